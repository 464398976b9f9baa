"""Fixture of the every-mode test: HEASARC fitsverify on a written file."""

import re
import shutil
import subprocess

import pytest

_SUMMARY = re.compile(r"Verification found (\d+) warning\(s\) and (\d+) error\(s\)")


@pytest.fixture
def fitsverify():
    """Return a function running fitsverify on a file and giving (n_warnings, n_errors, report)."""
    program = shutil.which("fitsverify")
    if program is None:
        pytest.skip("fitsverify is not installed")

    def _run(path):
        report = subprocess.run([program, str(path)], capture_output=True, text=True, check=False)
        text = report.stdout + report.stderr
        found = _SUMMARY.search(text)
        assert found is not None, text
        return int(found.group(1)), int(found.group(2)), text

    return _run
