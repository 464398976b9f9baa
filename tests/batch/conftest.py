"""Batch fixtures: a small base run config, snapshots beside it, and a batch-file writer."""

import textwrap

import pytest


@pytest.fixture
def write_batch(tmp_path, small_run_config):
    """Return a function writing ``batch.toml`` (text after a [batch] header naming the base config).

    The base run config is the shared small one (``small.toml``, snapshot
    ``snapshot.h5``, tiny grid); ``body`` is appended after ``[batch]`` and
    ``run_config``; the default output folder is ``tmp_path / "batch_out"``.
    """
    base = small_run_config()

    def _write(body="", *, name="batch.toml", edit_base=None):
        if edit_base:
            text = base.read_text()
            for old, new in edit_base.items():
                assert old in text, old
                text = text.replace(old, new)
            base.write_text(text)
        path = tmp_path / name
        path.write_text(f'[batch]\nrun_config = "{base.name}"\noutput_directory = "batch_out"\n'
                        + textwrap.dedent(body))
        return path

    return _write


@pytest.fixture
def fitsverify():
    """Return a function running HEASARC fitsverify on a file: (n_warnings, n_errors, report)."""
    import re
    import shutil
    import subprocess

    program = shutil.which("fitsverify")
    if program is None:
        pytest.skip("fitsverify is not installed")

    def _run(path):
        report = subprocess.run([program, str(path)], capture_output=True, text=True, check=False)
        text = report.stdout + report.stderr
        found = re.search(r"Verification found (\d+) warning\(s\) and (\d+) error\(s\)", text)
        assert found is not None, text
        return int(found.group(1)), int(found.group(2)), text

    return _run
