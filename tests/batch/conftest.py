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
