"""What a user sees from the command line: exit codes, one-line errors, nothing clobbered."""

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from cli_calls import one_error_line, run_cli

import pipeline
from pipeline.cli import main


@pytest.mark.parametrize("command", [[], ["run"], ["check"], ["inspect"], ["demo"]])
def test_help_exits_zero_and_describes_the_command(capsys, command):
    with pytest.raises(SystemExit) as exit_info:
        main([*command, "--help"])
    assert exit_info.value.code == 0
    assert "usage: cubewright" in capsys.readouterr().out


def test_check_prints_resolved_config_and_derived_numbers(capsys, small_run_config):
    code, out, _ = run_cli(capsys, "check", small_run_config(), "--set", "grid.pixel_scale=10 arcsec")
    assert code == 0
    assert "pixel_scale = " in out and "10" in out
    for label in ("pixel size", "beam FWHM", "channel width", "noise per channel", "peak memory"):
        assert label in out


def test_check_warns_about_an_undersampled_beam(capsys, small_run_config):
    code, _, err = run_cli(capsys, "check", small_run_config(), "--set", "grid.pixel_scale=20 arcsec")
    assert code == 0
    assert "cubewright: warning:" in err and "fewer than 3" in err


def test_run_writes_every_output_and_reports_the_hi_mass(capsys, small_run_config, tmp_path):
    code, out, _ = run_cli(capsys, "run", small_run_config(), "--quiet")
    assert code == 0 and out == ""
    written = sorted(p.name for p in (tmp_path / "out").iterdir())
    assert written == ["small.fits", "small_mom0.fits", "small_nhi.fits", "small_preview.png"]


def test_run_refuses_to_clobber_without_overwrite(capsys, small_run_config, tmp_path):
    config = small_run_config()
    assert run_cli(capsys, "run", config, "--quiet")[0] == 0
    cube = tmp_path / "out" / "small.fits"
    before = cube.read_bytes()
    code, _, err = run_cli(capsys, "run", config, "--quiet")
    assert code == 2
    assert "exists; pass --overwrite" in one_error_line(err)
    assert cube.read_bytes() == before
    assert run_cli(capsys, "run", config, "--quiet", "--overwrite")[0] == 0


def _assert_bad_input(capsys, argv, *fragments, output=None):
    code, _, err = run_cli(capsys, *argv)
    assert code == 2
    line = one_error_line(err)
    for fragment in fragments:
        assert fragment in line, line
    if output is not None:
        assert not output.exists() or list(output.iterdir()) == []
    return line


def test_unknown_key_names_the_file_and_suggests_the_key(capsys, small_run_config, tmp_path):
    config = small_run_config(edit={"pixel_scale = ": "pixle_scale = "})
    _assert_bad_input(capsys, ["run", config], "small.toml", "grid.pixle_scale", "grid.pixel_scale",
                      output=tmp_path / "out")


def test_wrong_dimension_names_the_key_and_the_value(capsys, small_run_config):
    _assert_bad_input(capsys, ["check", small_run_config(), "--set", "grid.channel_width=3 kpc"],
                      "grid.channel_width", "3 kpc")


def test_missing_config_file(capsys, tmp_path):
    _assert_bad_input(capsys, ["check", tmp_path / "nowhere.toml"], "nowhere.toml")


def test_missing_snapshot(capsys, small_run_config, tmp_path):
    config = small_run_config()
    (tmp_path / "snapshot.h5").unlink()
    _assert_bad_input(capsys, ["run", config], "snapshot.h5", output=tmp_path / "out")


def test_snapshot_that_is_not_hdf5(capsys, small_run_config, tmp_path):
    config = small_run_config()
    (tmp_path / "snapshot.h5").write_text("not a snapshot\n")
    _assert_bad_input(capsys, ["run", config], "snapshot.h5", "HDF5", output=tmp_path / "out")


def test_missing_dataset(capsys, small_run_config, tmp_path):
    config = small_run_config(snapshot_kwargs={"temperature": None})
    _assert_bad_input(capsys, ["run", config], "snapshot.h5", "gas/temperature", output=tmp_path / "out")


def test_wrong_shape(capsys, small_run_config, tmp_path):
    config = small_run_config(snapshot_kwargs={"mass": np.full(199, 1e5)})
    _assert_bad_input(capsys, ["run", config], "gas/mass", output=tmp_path / "out")


@pytest.mark.parametrize("dataset, bad", [("temperature", np.nan), ("mass", np.inf),
                                          ("smoothing_length", 0.0), ("smoothing_length", -1.0),
                                          ("mass", 0.0), ("mass", -5.0)])
def test_bad_values_in_the_snapshot(capsys, small_run_config, tmp_path, dataset, bad):
    values = np.full(200, 0.5) if dataset == "smoothing_length" else np.full(200, 1e4)
    values[17] = bad
    config = small_run_config(snapshot_kwargs={dataset: values})
    _assert_bad_input(capsys, ["run", config], f"gas/{dataset}", output=tmp_path / "out")


def test_unknown_unit_in_the_field_map(capsys, small_run_config):
    _assert_bad_input(capsys, ["check", small_run_config(), "--set", "snapshot.fields.mass.unit=parsnips"],
                      "snapshot.fields.mass.unit")


def test_mismatched_unit_in_the_field_map(capsys, small_run_config):
    _assert_bad_input(capsys, ["check", small_run_config(), "--set", "snapshot.fields.position.unit=km/s"],
                      "snapshot.fields.position.unit")


def test_grid_too_large_for_the_memory_budget(capsys, small_run_config, tmp_path):
    config = small_run_config()
    _assert_bad_input(capsys, ["run", config, "--set", "grid.n_x=4000", "--set", "grid.n_y=4000",
                               "--set", "grid.n_chan=500"], "run.memory_budget", output=tmp_path / "out")


def test_no_particles_selected(capsys, small_run_config, tmp_path):
    config = small_run_config()
    _assert_bad_input(capsys, ["run", config, "--set", "geometry.selection_radius=0.001 kpc"],
                      "geometry.selection_radius", output=tmp_path / "out")


def test_no_particles_in_the_band(capsys, small_run_config, tmp_path):
    config = small_run_config(edit={'centre = "centre_of_mass"':
                                    'centre = "centre_of_mass"\nframe = "explicit"\n'
                                    'frame_velocity = ["0 km/s", "0 km/s", "-20000 km/s"]'})
    _assert_bad_input(capsys, ["run", config], "no selected gas", output=tmp_path / "out")


def test_unwritable_output_folder(capsys, small_run_config, tmp_path):
    blocker = tmp_path / "a_file"
    blocker.write_text("")
    _assert_bad_input(capsys, ["run", small_run_config(), "--output", blocker / "sub"], "a_file")


def test_inspect_describes_a_snapshot_and_a_cube(capsys, small_run_config, tmp_path):
    config = small_run_config()
    code, out, _ = run_cli(capsys, "inspect", tmp_path / "snapshot.h5")
    assert code == 0 and "position  shape (200, 3)  float64" in out
    assert run_cli(capsys, "run", config, "--quiet")[0] == 0
    code, out, _ = run_cli(capsys, "inspect", tmp_path / "out" / "small.fits")
    assert code == 0
    assert "beam" in out.lower() and "FREQ" in out


def test_inspect_refuses_other_files(capsys, tmp_path):
    other = tmp_path / "notes.txt"
    other.write_text("hello\n")
    _assert_bad_input(capsys, ["inspect", other], "notes.txt", "neither")



def test_an_error_after_a_foreign_warning_ends_at_once(tmp_path):
    # A numpy-style warning recorded before a bad-input error used to be shown inside the recording
    # block, so each one shown was recorded again and the command never ended (memory growing).
    script = tmp_path / "warn_then_fail.py"
    script.write_text(
        "import sys, warnings\n"
        "from pipeline import cli\n"
        "from pipeline.errors import ConfigError\n"
        "def command(args):\n"
        "    warnings.warn('overflow encountered', RuntimeWarning)\n"
        "    raise ConfigError('galaxy.toml:grid.n_x: expected a count')\n"
        "cli._COMMANDS['check'] = command\n"
        "sys.exit(cli.main(['check', 'galaxy.toml']))\n")
    here = {**os.environ, "PYTHONPATH": str(Path(pipeline.__file__).parents[1])}   # this checkout's package
    finished = subprocess.run([sys.executable, "-W", "default", str(script)], capture_output=True, text=True,
                              timeout=120, env=here)
    assert finished.returncode == 2
    assert finished.stderr.count("RuntimeWarning: overflow encountered") == 1
    assert finished.stderr.strip().splitlines()[-1] == "cubewright: error: galaxy.toml:grid.n_x: expected a count"


@pytest.mark.parametrize("field", ["position", "velocity"])
def test_a_particle_at_1e300_ends_in_one_error_line(make_snapshot, small_run_config, field, tmp_path):
    # Used to hang with memory growing (position) or end in a traceback (velocity).
    config = small_run_config()
    values = np.random.default_rng(3).normal(0.0, 3.0, (200, 3))
    values[5, 1] = 1e300
    make_snapshot(200, **{field: values})
    here = {**os.environ, "PYTHONPATH": str(Path(pipeline.__file__).parents[1])}
    finished = subprocess.run([sys.executable, "-m", "pipeline", "run", str(config)], capture_output=True,
                              text=True, timeout=120, env=here, cwd=tmp_path)
    assert finished.returncode == 2, finished.stderr
    assert "Traceback" not in finished.stderr
    (line,) = [text for text in finished.stderr.splitlines() if text.startswith("cubewright: error:")]
    assert f"snapshot.h5:gas/{field}: 1 value is" in line and "(first at row 5)" in line
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())   # nothing written
