"""cubewright batch from the command line: dry run, exit codes, one-line errors for bad input."""

import re

import pytest

from cli_calls import one_error_line, run_cli

from pipeline.cli import main

VIEWS = "[sweep.views]\npairs = [['30 deg', '0 deg'], ['60 deg', '90 deg']]\n"


def test_batch_help_exits_zero(capsys):
    with pytest.raises(SystemExit) as info:
        main(["batch", "--help"])
    assert info.value.code == 0 and "--dry-run" in capsys.readouterr().out


def test_dry_run_lists_jobs_with_memory_and_disk_and_writes_nothing(capsys, write_batch, tmp_path):
    path = write_batch("name = 'v{view}_i{inclination:.0f}'\n" + VIEWS)
    code, out, _ = run_cli(capsys, "batch", path, "--dry-run")
    assert code == 0
    lines = out.splitlines()
    assert "peak memory" in lines[0] and "disk" in lines[0]
    assert lines[1].split()[:2] == ["0", "v0_i30"] and "MiB" in lines[1] and "inclination=30" in lines[1]
    assert lines[2].split()[:2] == ["1", "v1_i60"]
    assert re.fullmatch(r"2 job\(s\); largest peak memory [0-9.]+ MiB; total disk [0-9.]+ [KMG]iB", lines[-1])
    assert not (tmp_path / "batch_out").exists()


def test_dry_run_marks_a_job_that_cannot_run_and_exits_one(capsys, write_batch, tmp_path):
    (tmp_path / "broken.h5").write_text("not HDF5")
    path = write_batch("[sweep]\nsnapshots = ['snapshot.h5', 'broken.h5']\n")
    code, out, _ = run_cli(capsys, "batch", path, "--dry-run")
    assert code == 1 and "cannot run: SnapshotError" in out


def test_batch_runs_in_process_and_reports(capsys, write_batch, tmp_path):
    code, out, _ = run_cli(capsys, "batch", write_batch(VIEWS), "--workers", "1")
    assert code == 0 and "2 job(s): 2 done, 0 skipped (complete), 0 failed" in out
    assert (tmp_path / "batch_out" / "catalogue.ecsv").is_file() and (tmp_path / "batch_out" / "catalogue.png").is_file()
    code, out, _ = run_cli(capsys, "batch", write_batch(VIEWS), "--workers", "1", "--resume")
    assert code == 0 and "0 done, 2 skipped" in out


def test_a_failed_job_exits_one_and_is_named(capsys, write_batch):
    path = write_batch("name = '{instrument}'\n[sweep.instruments.tiny.geometry]\nselection_radius = '0.0001 kpc'\n"
                       "[sweep.instruments.fine.beam]\nmajor = '50 arcsec'\n")
    code, out, err = run_cli(capsys, "batch", path, "--workers", "1")
    assert code == 1 and "1 failed" in out
    assert "cubewright: 1 job(s) failed: tiny" in err and "tiny: EmptyFieldError" in err


def test_a_job_failing_on_a_swept_value_names_the_batch_key_in_manifest_and_summary(capsys, write_batch, tmp_path):
    import json

    path = write_batch("name = 'tight'\n[sweep.keys.run]\nmemory_budget = ['1 MiB']\n")
    code, out, err = run_cli(capsys, "batch", path, "--workers", "1")
    assert code == 1 and "1 failed" in out
    reason = f"MemoryBudgetError: {path}:sweep.keys.run.memory_budget[0]: even one channel of the 17 x 24 x 37 cube"
    record = json.loads((tmp_path / "batch_out" / "manifest.json").read_text())["jobs"]["tight"]
    assert record["status"] == "failed" and record["error"].startswith(reason), record["error"]
    assert f"  tight: {record['error']}" in err.splitlines() and "--set" not in err


@pytest.mark.parametrize("body, fragments", [
    ("[sweep.keys.grid]\nn_x = [16, 0]\n", ["batch.toml:sweep.keys.grid.n_x[1]: expected a value of at least 1; got 0"]),
    ("name = 'same'\n" + VIEWS, ["batch.toml:batch.name: expected a distinct name for every job"]),
    ("name = '../{view}'\n" + VIEWS, ["batch.toml:batch.name:", "leads outside it"]),
    ("[sweep]\nsnapshots = ['nothing_*.h5']\n", ["batch.toml:sweep.snapshots[0]:", "matches no file"]),
])
def test_bad_batch_files_exit_two_with_one_line(capsys, write_batch, tmp_path, body, fragments):
    code, _, err = run_cli(capsys, "batch", write_batch(body), "--workers", "1")
    assert code == 2
    line = one_error_line(err)
    for fragment in fragments:
        assert fragment in line, line
    assert "--set" not in line
    assert not (tmp_path / "batch_out").exists()


@pytest.mark.dask
def test_an_unknown_scheduler_exits_two_quickly(capsys, write_batch):
    code, _, err = run_cli(capsys, "batch", write_batch(VIEWS), "--scheduler", "tcp://127.0.0.1:9",
                        "--connect-timeout", "1")
    assert code == 2 and "--scheduler: expected the address of a running Dask scheduler" in one_error_line(err)


def test_workers_must_be_positive(capsys, write_batch):
    code, _, err = run_cli(capsys, "batch", write_batch(VIEWS), "--workers", "0")
    assert code == 2 and "--workers: expected a whole number of at least 1; got 0" in one_error_line(err)


def test_a_manifest_from_another_config_exits_two_unless_forced(capsys, write_batch):
    assert run_cli(capsys, "batch", write_batch(VIEWS), "--workers", "1", "--quiet")[0] == 0
    changed = write_batch(VIEWS.replace("60 deg", "70 deg"))
    code, _, err = run_cli(capsys, "batch", changed, "--workers", "1", "--resume")
    assert code == 2 and "written by another batch config" in one_error_line(err)
    code, out, _ = run_cli(capsys, "batch", changed, "--workers", "1", "--resume", "--force")
    assert code == 0 and "1 done, 1 skipped" in out
