"""A batch killed mid-way (SIGINT, SIGKILL) and resumed ends with every output complete and uncorrupted."""

import json
import os
import secrets
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import pytest
from astropy.io import fits

import pipeline
from pipeline.batch import MANIFEST_NAME
from pipeline.batch._jobs import file_sha256
from pipeline.cli import main
from pipeline.io._atomic import PARTIAL_PREFIX

BODY = """
name = "g_{index}"
[sweep]
distances = ["8 Mpc", "9 Mpc", "10 Mpc", "11 Mpc", "12 Mpc", "13 Mpc"]
"""
N_JOBS = 6


def _partials(folder):
    return sorted(path.name for path in folder.rglob(f"{PARTIAL_PREFIX}*"))


def _n_records(manifest):
    try:
        return len(json.loads(manifest.read_text())["jobs"])
    except (OSError, ValueError):
        return 0


@pytest.mark.parametrize("kill_signal", [signal.SIGINT, signal.SIGKILL])
def test_killed_batch_resumes_to_complete_verified_outputs(write_batch, tmp_path, kill_signal, capsys):
    path = write_batch(BODY)
    manifest = tmp_path / "batch_out" / MANIFEST_NAME
    environment = {**os.environ, "PYTHONPATH": str(Path(pipeline.__file__).resolve().parents[1])}
    process = subprocess.Popen([sys.executable, "-m", "pipeline", "batch", str(path), "--workers", "1", "--quiet"],
                               env=environment, stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=tmp_path)
    deadline = time.monotonic() + 120
    while _n_records(manifest) < 2 and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    process.send_signal(kill_signal)
    _, err = process.communicate(timeout=60)
    n_before = _n_records(manifest)
    assert 2 <= n_before < N_JOBS, err.decode()
    if kill_signal == signal.SIGINT:
        assert process.returncode == 130 and b"interrupted" in err
    else:
        assert process.returncode == -signal.SIGKILL
    output_dir = tmp_path / "batch_out"
    # A temporary as a killed writer leaves it (whatever the signal left behind is counted too).
    (output_dir / f"{PARTIAL_PREFIX}{secrets.token_hex(6)}.g_5.fits").write_bytes(b"SIMPLE  =")
    n_stale = len(_partials(output_dir))
    assert main([str(a) for a in ("batch", path, "--workers", "1", "--resume")]) == 0
    _, err = capsys.readouterr()
    notes = [line for line in err.splitlines() if "stale partial" in line]
    assert notes == [f"cubewright: warning: {output_dir}: removed {n_stale} stale partial file(s) (.partial-*) "
                     "left by an interrupted run"], err
    document = json.loads(manifest.read_text())
    assert len(document["jobs"]) == N_JOBS
    for record in document["jobs"].values():
        assert record["status"] == "done"
        for output in record["outputs"].values():
            assert file_sha256(tmp_path / "batch_out" / output["path"]) == output["sha256"]
            if output["path"].endswith(".fits"):
                with warnings.catch_warnings():
                    warnings.simplefilter("error")  # a CHECKSUM or DATASUM that fails warns
                    with fits.open(tmp_path / "batch_out" / output["path"], checksum=True) as opened:
                        opened[0].data.sum()
    assert _partials(output_dir) == []
