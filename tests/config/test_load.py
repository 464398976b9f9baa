"""Loading, overriding and validating configs; RunConfig and describe_config (pipeline/config/_load.py)."""

import copy
import dataclasses
import hashlib
import re
import tomllib
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from scipy.spatial.transform import Rotation

from pipeline.config import PARAMS, PARAMS_BY_KEY, RunConfig, config_from_dict, describe_config, load_config
from pipeline.errors import ConfigError

EXAMPLE = Path(__file__).resolve().parents[2] / "configs" / "single_cube.toml"

MINIMAL = {"snapshot": {"path": "snap.h5"}, "observer": {"distance": "8.5 Mpc"}}


def make(*, overrides=(), base_dir="/data", **sections):
    """Config from MINIMAL with whole sections' keys merged in (``snapshot={"little_h": 0.7}``)."""
    mapping = copy.deepcopy(MINIMAL)
    for name, keys in sections.items():
        mapping.setdefault(name, {}).update(keys)
    return config_from_dict(mapping, source="galaxy.toml", base_dir=base_dir, overrides=overrides)


def field(name, **keys):
    return {"fields": {name: keys}}


def write(tmp_path, text, name="galaxy.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


MINIMAL_TOML = """\
[snapshot]
path = "snap.h5"

[observer]
distance = "8.5 Mpc"
"""


# --- the example config -------------------------------------------------------------


def test_example_config_loads_without_the_snapshot_existing(tmp_path):
    copy = tmp_path / "configs" / EXAMPLE.name
    copy.parent.mkdir()
    copy.write_text(EXAMPLE.read_text())
    config = load_config(copy)
    assert not config["snapshot.path"].exists()
    assert config["snapshot.path"] == (tmp_path / "cubewright-demo" / "disc_galaxy.h5")
    assert_quantity_allclose(config["observer.distance"], 8.5 * u.Mpc, rtol=0)
    assert config["noise.n_antennas"] == 64
    assert_quantity_allclose(config["noise.dish_diameter"], 15 * u.m, rtol=0)


def test_example_config_names_every_key_set_or_commented():
    # Each key appears as "name = ..." (or "# name = ...") under its own [section] header.
    seen, section = set(), None
    for line in EXAMPLE.read_text(encoding="utf-8").splitlines():
        header = re.match(r"^\[([\w.]+)\]", line)
        if header:
            section = header.group(1)
            continue
        entry = re.match(r"^(?:# )?(\w+) = ", line)
        if entry and section is not None:
            seen.add(f"{section}.{entry.group(1)}")
    assert seen == set(PARAMS_BY_KEY)


# --- accepted forms -------------------------------------------------------------------


def test_unset_keys_take_the_table_defaults():
    config = make()
    assert config["grid.n_x"] == 128
    assert_quantity_allclose(config["grid.pixel_scale"], 10 * u.arcsec, rtol=0)
    assert config["observer.redshift"] is None
    assert config["output.moment0"] is True
    assert config["snapshot.fields.hydrogen_fraction.value"] == 0.76
    assert config["snapshot.fields.hydrogen_fraction.dataset"] is None
    assert config["snapshot.fields.temperature.dataset"] == "gas/temperature"
    assert config["snapshot.fields.temperature.value"] is None


def test_every_key_resolves_to_its_kind():
    config = make()
    for param in PARAMS:
        value = config[param.key]
        if value is None:
            continue
        if param.kind in ("length3", "velocity3"):
            assert isinstance(value, u.Quantity) and value.shape == (3,)
        elif param.kind in ("angle", "length", "velocity", "spectral", "time", "temperature", "memory"):
            assert isinstance(value, u.Quantity) and value.shape == ()
        elif param.kind == "unit":
            assert isinstance(value, u.UnitBase)
        elif param.kind == "path":
            assert isinstance(value, Path) and value.is_absolute()
        else:
            assert type(value) is {"int": int, "float": float, "bool": bool, "str": str}[param.kind]


@pytest.mark.parametrize("key, raw, expected", [
    ("grid.pixel_scale", "0.1 arcmin", 0.1 * u.arcmin),
    ("grid.pixel_scale", 6 * u.arcsec, 6 * u.arcsec),
    ("grid.channel_width", "20 kHz", 20 * u.kHz),
    ("noise.rms", "0.4 mJy/beam", 0.4 * u.mJy / u.beam),
    ("noise.rms", "2 mJy", 2 * u.mJy),
    ("noise.integration_time", "3600 s", 3600 * u.s),
    ("run.memory_budget", "512 MB", 512 * u.MB),
    ("observer.ra", "12 hourangle", 12 * u.hourangle),
])
def test_quantities_keep_the_unit_given(key, raw, expected):
    section, name = key.split(".")
    value = make(**{section: {name: raw}})[key]
    assert value.unit == expected.unit
    assert_quantity_allclose(value, expected, rtol=0)


def test_three_vectors_accept_strings_and_quantities():
    config = make(geometry={"centre": "explicit", "centre_position": ["1 kpc", "500 pc", "-2 kpc"],
                            "frame": "explicit", "frame_velocity": [10, 0, -5] * u.km / u.s})
    assert_quantity_allclose(config["geometry.centre_position"], [1, 0.5, -2] * u.kpc, rtol=1e-15)
    assert_quantity_allclose(config["geometry.frame_velocity"], [10, 0, -5] * u.km / u.s, rtol=0)


def test_rotation_matrix_accepts_a_proper_rotation(rng):
    # scipy's Rotation gives an orthonormal matrix with determinant +1 (outside reference).
    matrix = Rotation.random(random_state=rng).as_matrix()
    config = make(geometry={"orientation": "explicit", "rotation_matrix": matrix.tolist()})
    result = config["geometry.rotation_matrix"]
    assert result.dtype == np.float64 and result.shape == (3, 3)
    np.testing.assert_array_equal(result, matrix)
    assert make(geometry={"orientation": "explicit", "rotation_matrix": matrix}).digest == config.digest


def test_rotation_matrix_accepts_integer_entries():
    config = make(geometry={"orientation": "explicit", "rotation_matrix": [[0, 1, 0], [-1, 0, 0], [0, 0, 1]]})
    np.testing.assert_array_equal(config["geometry.rotation_matrix"], [[0, 1, 0], [-1, 0, 0], [0, 0, 1]])


def test_units_paths_and_numbers_accept_their_python_objects():
    config = make(snapshot={"path": Path("sub/snap.h5"), **field("mass", unit=u.CompositeUnit(1e10, [u.Msun], [1]))},
                  grid={"n_x": np.int64(37)}, noise={"aperture_efficiency": 1})
    assert config["snapshot.path"] == Path("/data/sub/snap.h5").resolve()
    assert config["snapshot.fields.mass.unit"] == u.Unit("1e10 Msun")
    assert config["grid.n_x"] == 37 and type(config["grid.n_x"]) is int
    assert config["noise.aperture_efficiency"] == 1.0 and type(config["noise.aperture_efficiency"]) is float


@pytest.mark.parametrize("name, unit", [
    ("position", "pc"), ("smoothing_length", "Mpc"),
    ("velocity", "m/s"), ("mass", "1e10 Msun"), ("temperature", "K"), ("neutral_fraction", ""),
    ("metallicity", "0.01"), ("density", "g / cm3"),
])
def test_field_units_of_the_right_physical_type_are_accepted(name, unit):
    config = make(snapshot=field(name, unit=unit))
    assert config[f"snapshot.fields.{name}.unit"] == u.Unit(unit)


def test_paths_resolve_against_the_config_folder(tmp_path):
    (tmp_path / "runs").mkdir()
    path = write(tmp_path / "runs", '[snapshot]\npath = "../snap.h5"\n[observer]\ndistance = "8.5 Mpc"\n'
                 '[output]\ndirectory = "/elsewhere/out"\n')
    config = load_config(path)
    assert config.base_dir == (tmp_path / "runs").resolve()
    assert config["snapshot.path"] == (tmp_path / "snap.h5").resolve()
    assert config["output.directory"] == Path("/elsewhere/out")


def test_command_line_paths_start_at_the_current_folder_and_replace_paths_at_the_config_folder(tmp_path,
                                                                                                monkeypatch):
    (tmp_path / "runs").mkdir()
    (tmp_path / "work").mkdir()
    path = write(tmp_path / "runs", '[snapshot]\npath = "snap.h5"\n[observer]\ndistance = "8.5 Mpc"\n')
    monkeypatch.chdir(tmp_path / "work")
    config = load_config(path, overrides=["snapshot.path=data/galaxy.h5"])
    assert config["snapshot.path"] == (tmp_path / "work" / "data" / "galaxy.h5").resolve()
    assert config["output.directory"] == (tmp_path / "runs" / "output").resolve()
    replaced = config.replace(["run.scratch_directory=scratch"])
    assert replaced["run.scratch_directory"] == (tmp_path / "runs" / "scratch").resolve()
    assert replaced["snapshot.path"] == config["snapshot.path"]


def test_a_value_replaces_the_default_dataset_and_a_dataset_the_default_value():
    config = make(snapshot={"fields": {"temperature": {"value": 8000.0},
                                       "hydrogen_fraction": {"dataset": "gas/x_h"}}})
    assert config["snapshot.fields.temperature.value"] == 8000.0
    assert config["snapshot.fields.temperature.dataset"] is None
    assert config["snapshot.fields.hydrogen_fraction.dataset"] == "gas/x_h"
    assert config["snapshot.fields.hydrogen_fraction.value"] is None


def test_redshift_drops_the_default_systemic_velocity():
    config = config_from_dict({"snapshot": {"path": "/s.h5"}, "observer": {"redshift": 0.02}})
    assert config["observer.systemic_velocity"] is None
    assert config["observer.distance"] is None


def test_h_and_a_powers_are_accepted_with_their_factors():
    config = make(snapshot={"little_h_attribute": "Header/HubbleParam", "scale_factor": 0.5,
                            **field("position", h_power=-1, a_power=1)})
    assert config["snapshot.fields.position.h_power"] == -1.0


def test_config_from_dict_defaults_base_dir_to_the_current_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    config = config_from_dict(MINIMAL)
    assert config.source == "<dict>"
    assert config.base_dir == tmp_path.resolve()
    assert config["snapshot.path"] == (tmp_path / "snap.h5").resolve()


def test_config_from_dict_does_not_keep_the_callers_objects():
    mapping = copy.deepcopy(MINIMAL)
    mapping["geometry"] = {"centre": "explicit", "centre_position": ["1 kpc", "0 kpc", "0 kpc"]}
    config = config_from_dict(mapping)
    mapping["geometry"]["centre_position"][0] = "5 kpc"
    assert config.replace([]).digest == config.digest


# --- refusals of single values ----------------------------------------------------------


@pytest.mark.parametrize("section, keys, message", [
    ("grid", {"channel_width": "3 kpc"},
     "galaxy.toml:grid.channel_width: expected a velocity or frequency, e.g. '4 km/s' or '20 kHz'; got '3 kpc'"),
    ("grid", {"pixel_scale": 12},
     "galaxy.toml:grid.pixel_scale: expected an angle, e.g. '10 arcsec' or '60 deg'; got 12, a bare number "
     "(units are never assumed)"),
    ("grid", {"n_x": True}, "galaxy.toml:grid.n_x: expected an integer, e.g. 64; got true"),
    ("grid", {"n_x": 64.0}, "galaxy.toml:grid.n_x: expected an integer, e.g. 64; got 64.0"),
    ("grid", {"n_x": "64"}, "galaxy.toml:grid.n_x: expected an integer, e.g. 64; got '64'"),
    ("grid", {"n_x": 0}, "galaxy.toml:grid.n_x: expected a value of at least 1; got 0"),
    ("grid", {"support_factor": False}, "galaxy.toml:grid.support_factor: expected a number, e.g. 0.7; got false"),
    ("grid", {"support_factor": float("inf")},
     "galaxy.toml:grid.support_factor: expected a finite number, e.g. 0.7; got inf"),
    ("grid", {"support_factor": -2.0}, "galaxy.toml:grid.support_factor: expected a value greater than 0; got -2.0"),
    ("grid", {"projection": "sin"},
     "galaxy.toml:grid.projection: expected one of 'SIN', 'TAN'; got 'sin' (did you mean 'SIN'?)"),
    ("grid", {"kernel": "top_hat"},
     "galaxy.toml:grid.kernel: expected one of 'cubic_spline', 'quintic_spline', 'wendland_c2', "
     "'wendland_c4', 'wendland_c6', 'gaussian'; got 'top_hat'"),
    ("output", {"moment0": 1}, "galaxy.toml:output.moment0: expected true or false; got 1"),
    ("output", {"name": ""}, "galaxy.toml:output.name: expected a non-empty string; got ''"),
    ("output", {"name": 2024}, "galaxy.toml:output.name: expected a non-empty string; got 2024"),
    ("output", {"directory": 5}, "galaxy.toml:output.directory: expected a file or folder path as a string, "
     "e.g. 'galaxy.h5'; got 5"),
    ("beam", {"major": "-30 arcsec"}, "galaxy.toml:beam.major: expected a value greater than 0; got '-30 arcsec'"),
    ("observer", {"dec": "95 deg"}, "galaxy.toml:observer.dec: expected a value of at most 90 deg; got '95 deg'"),
    ("observer", {"dec": "-1.6 rad"},
     "galaxy.toml:observer.dec: expected a value of at least -90 deg; got '-1.6 rad'"),
    ("emission", {"turbulent_dispersion": "-1 km/s"},
     "galaxy.toml:emission.turbulent_dispersion: expected a value of at least 0 km/s; got '-1 km/s'"),
    ("noise", {"n_polarisations": 3}, "galaxy.toml:noise.n_polarisations: expected a value of at most 2; got 3"),
    ("noise", {"integration_time": "4 K"},
     "galaxy.toml:noise.integration_time: expected a time, e.g. '4 h' or '3600 s'; got '4 K'"),
    ("run", {"memory_budget": "8"},
     "galaxy.toml:run.memory_budget: expected an amount of memory, e.g. '4 GiB' or '512 MB'; got '8' (no unit)"),
    ("geometry", {"centre_position": ["1 kpc", "0 kpc"]},
     "galaxy.toml:geometry.centre_position: expected a list of three lengths, e.g. ['1 kpc', '0 kpc', '-2 kpc']; "
     "got ['1 kpc', '0 kpc']"),
])
def test_single_value_refusals_name_file_key_expectation_and_value(section, keys, message):
    with pytest.raises(ConfigError, match="^" + re.escape(message) + "$"):
        make(**{section: keys})


@pytest.mark.parametrize("name, unit, message", [
    ("position", "km/s", "expected a unit of length, e.g. 'kpc'; got 'km/s', a unit of velocity"),
    ("velocity", "kpc", "expected a unit of velocity, e.g. 'km/s'; got 'kpc', a unit of length"),
    ("mass", "K", "expected a unit of mass, e.g. 'Msun'; got 'K', a unit of temperature"),
    ("temperature", "km", "expected a unit of temperature, e.g. 'K'; got 'km', a unit of length"),
    ("neutral_fraction", "kpc", "expected a unit of dimensionless, e.g. ''; got 'kpc', a unit of length"),
    ("density", "Msun", "expected a unit of mass density, e.g. 'Msun / kpc3'; got 'Msun', a unit of mass"),
    ("smoothing_length", "parsecs_x",
     "expected a unit of length, e.g. 'kpc'; got 'parsecs_x', which astropy cannot read as a unit"),
    ("mass", 1e10, "expected a unit of mass, e.g. 'Msun'; got 10000000000.0"),
])
def test_field_units_of_the_wrong_physical_type_are_refused(name, unit, message):
    with pytest.raises(ConfigError, match=re.escape(f"galaxy.toml:snapshot.fields.{name}.unit: {message}")):
        make(snapshot=field(name, unit=unit))


def test_redshift_below_zero_is_refused():
    mapping = {"snapshot": {"path": "/s.h5"}, "observer": {"redshift": -0.1}}
    with pytest.raises(ConfigError, match=r"^galaxy\.toml:observer\.redshift: expected a value greater than 0; "
                                          r"got -0\.1$"):
        config_from_dict(mapping, source="galaxy.toml")


def test_field_fractions_are_limited_to_one():
    with pytest.raises(ConfigError, match=r"^galaxy\.toml:snapshot\.fields\.neutral_fraction\.value: expected a "
                                          r"value of at most 1; got 1\.5$"):
        make(snapshot=field("neutral_fraction", value=1.5))


@pytest.mark.parametrize("matrix, message", [
    ([[1, 0, 0], [0, 1, 0]], r"expected a rotation matrix as three rows of three numbers, .*; got \[\[1, 0, 0\], "
                             r"\[0, 1, 0\]\]$"),
    ([[1, 0, 0], [0, 1, 0], [0, 0, True]], r"expected a rotation matrix as three rows.*got .*true\]\]$"),
    ([[1, 0, 0], [0, 1, 0], [0, 0, "1"]], r"expected a rotation matrix as three rows"),
    (np.array([["1", "0", "0"]] * 3), r"expected a rotation matrix as three rows"),
    ([[1, 0, 0], [0, 1, 0], [0, 0, float("nan")]],
     r"expected a rotation matrix as three rows.*, which holds a non-finite number$"),
    # 45 degrees about z written with 4 significant digits: rows miss orthonormality by 2e-5.
    ([[0.7071, -0.7071, 0], [0.7071, 0.7071, 0], [0, 0, 1]],
     r"expected a rotation matrix with orthonormal rows \(to 1e-06\); got rows whose dot products miss the "
     r"identity by 1\.9e-05 \(give 8 significant digits\)$"),
    ([[1, 0, 0], [0, 1, 0], [0, 0, -1]],
     r"expected a rotation matrix \(determinant \+1\); got determinant -1\.000000, a reflection \(negate one row\)$"),
])
def test_rotation_matrix_refusals(matrix, message):
    with pytest.raises(ConfigError, match=r"^galaxy\.toml:geometry\.rotation_matrix: " + message):
        make(geometry={"orientation": "explicit", "rotation_matrix": matrix})


def test_rotation_matrix_accepts_eight_significant_digits():
    # 45 degrees about z: cos = sin = 0.70710678 (8 digits), within the 1e-6 tolerance.
    config = make(geometry={"orientation": "explicit",
                            "rotation_matrix": [[0.70710678, -0.70710678, 0], [0.70710678, 0.70710678, 0],
                                                [0, 0, 1]]})
    expected = Rotation.from_euler("z", 45, degrees=True).as_matrix()  # scipy, outside reference
    np.testing.assert_allclose(config["geometry.rotation_matrix"], expected, atol=1e-8)


# --- unknown keys -------------------------------------------------------------------------


@pytest.mark.parametrize("mapping, message", [
    ({"grid": {"pixle_scale": "6 arcsec"}}, "galaxy.toml:grid.pixle_scale: unknown key; did you mean "
                                            "'grid.pixel_scale'?"),
    ({"gird": {"n_x": 64}}, "galaxy.toml:gird: unknown section; did you mean 'grid'?"),
    ({"snapshot": {"fields": {"tempurature": {"unit": "K"}}}},
     "galaxy.toml:snapshot.fields.tempurature: unknown section; did you mean 'snapshot.fields.temperature'?"),
    ({"snapshot": {"fields": {"mass": {"units": "Msun"}}}},
     "galaxy.toml:snapshot.fields.mass.units: unknown key; did you mean 'snapshot.fields.mass.unit'?"),
    ({"grid": {"major": "30 arcsec"}}, "galaxy.toml:grid.major: unknown key; did you mean 'beam.major'?"),
    ({"grid": {"zzz": 1}}, "galaxy.toml:grid.zzz: unknown key; the valid keys in [grid] are: n_x, n_y, n_chan, "
                           "pixel_scale, channel_width, projection, spectral_axis, kernel, support_factor, line_profile"),
    ({"zzz": 1}, "galaxy.toml:zzz: unknown section; the valid sections are: snapshot, geometry, observer, grid, "
                 "emission, beam, noise, output, run"),
])
def test_unknown_keys_are_refused_with_the_nearest_valid_key(mapping, message):
    full = {**copy.deepcopy(MINIMAL), **mapping}
    with pytest.raises(ConfigError, match="^" + re.escape(message) + "$"):
        config_from_dict(full, source="galaxy.toml")


def test_a_section_given_as_a_value_is_refused():
    with pytest.raises(ConfigError, match=r"^galaxy\.toml:grid: expected a table of keys \(\[grid\]\); got 64$"):
        config_from_dict({**MINIMAL, "grid": 64}, source="galaxy.toml")


def test_a_key_given_as_a_table_is_refused():
    with pytest.raises(ConfigError, match=r"^galaxy\.toml:grid\.n_x: expected an integer, e\.g\. 64; "
                                          r"got a table \{value = 64\}$"):
        make(grid={"n_x": {"value": 64}})


def test_quoted_dotted_key_names_are_refused(tmp_path):
    path = write(tmp_path, MINIMAL_TOML + '"grid.n_x" = 64\n')
    with pytest.raises(ConfigError, match=r"galaxy\.toml:observer\.grid\.n_x: not a valid key name"):
        load_config(path)
    with pytest.raises(ConfigError, match=r"^<dict>:7: not a valid key name"):
        config_from_dict({**MINIMAL, 7: 1})


# --- file reading ---------------------------------------------------------------------------


def test_load_config_names_the_file_as_given(tmp_path, monkeypatch):
    write(tmp_path, MINIMAL_TOML + '\n[grid]\nchannel_width = "3 kpc"\n')
    monkeypatch.chdir(tmp_path)
    with pytest.raises(ConfigError, match=r"^galaxy\.toml:grid\.channel_width: expected a velocity or frequency, "
                                          r"e\.g\. '4 km/s' or '20 kHz'; got '3 kpc'$"):
        load_config("galaxy.toml")


def test_toml_syntax_errors_name_file_and_line(tmp_path):
    path = write(tmp_path, '[grid]\nn_x = 64\npixel_scale = 12 arcsec\n')
    with pytest.raises(ConfigError, match=re.escape(f"{path}: not valid TOML: ") + r".*line 3"):
        load_config(path)


def test_missing_and_unreadable_files_are_refused(tmp_path):
    with pytest.raises(ConfigError, match=re.escape(f"{tmp_path / 'absent.toml'}: cannot read the config file: "
                                                    "No such file or directory")):
        load_config(tmp_path / "absent.toml")
    with pytest.raises(ConfigError, match=re.escape(f"{tmp_path}: cannot read the config file: Is a directory")):
        load_config(tmp_path)


def test_non_utf8_files_are_refused(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes('[output]\nname = "caf\u00e9"\n'.encode("latin-1"))
    with pytest.raises(ConfigError, match=re.escape(f"{path}: expected UTF-8 text; got a byte that is not UTF-8 "
                                                    "at offset 20")):
        load_config(path)


def test_non_mapping_input_is_a_type_error():
    with pytest.raises(TypeError, match=r"mapping must be a mapping of config sections; got list"):
        config_from_dict([("grid", {})])


# --- cross-key rules ------------------------------------------------------------------------


@pytest.mark.parametrize("mapping, message", [
    ({"observer": {"distance": "8.5 Mpc"}},
     "galaxy.toml:snapshot.path: expected the HDF5 snapshot file, e.g. path = 'galaxy.h5' in [snapshot]; got "
     "nothing (this key is required)"),
    ({"snapshot": {"path": "s.h5"}},
     "galaxy.toml:observer: expected observer.distance (e.g. '8.5 Mpc') or observer.redshift (e.g. 0.02); got "
     "neither"),
    ({"snapshot": {"path": "s.h5"}, "observer": {"systemic_velocity": "600 km/s"}},
     "galaxy.toml:observer: expected observer.distance (e.g. '8.5 Mpc') or observer.redshift (e.g. 0.02); got "
     "neither"),
    ({"snapshot": {"path": "s.h5"}, "observer": {"distance": "8.5 Mpc", "redshift": 0.002}},
     "galaxy.toml:observer.distance: cannot be combined with observer.redshift; a redshift sets the systemic "
     "velocity itself: give observer.distance (and optionally observer.systemic_velocity) or observer.redshift"),
    ({"snapshot": {"path": "s.h5"}, "observer": {"systemic_velocity": "600 km/s", "redshift": 0.002}},
     "galaxy.toml:observer.systemic_velocity: cannot be combined with observer.redshift; a redshift sets the "
     "systemic velocity itself"),
])
def test_observer_and_snapshot_rules(mapping, message):
    with pytest.raises(ConfigError, match="^" + re.escape(message)):
        config_from_dict(mapping, source="galaxy.toml")


@pytest.mark.parametrize("sections, message", [
    ({"geometry": {"centre": "explicit"}},
     "galaxy.toml:geometry.centre_position: required when geometry.centre = 'explicit', e.g. centre_position = "
     "['0 kpc', '0 kpc', '0 kpc']; got nothing"),
    ({"geometry": {"frame": "explicit"}},
     "galaxy.toml:geometry.frame_velocity: required when geometry.frame = 'explicit', e.g. frame_velocity = "
     "['0 km/s', '0 km/s', '0 km/s']; got nothing"),
    ({"geometry": {"orientation": "explicit"}},
     "galaxy.toml:geometry.rotation_matrix: required when geometry.orientation = 'explicit', e.g. "
     "rotation_matrix = [[1, 0, 0], [0, 1, 0], [0, 0, 1]]; got nothing"),
    ({"noise": {"mode": "rms"}},
     "galaxy.toml:noise.rms: required when noise.mode = 'rms', e.g. rms = '0.4 mJy/beam'; got nothing"),
    ({"beam": {"major": "20 arcsec", "minor": "0.5 arcmin"}},
     "galaxy.toml:beam.minor: expected at most beam.major (20.0 arcsec); got 0.5 arcmin"),
    ({"snapshot": field("mass", h_power=-1)},
     "galaxy.toml:snapshot.fields.mass.h_power: is -1, so snapshot.little_h or snapshot.little_h_attribute must "
     "be given; got neither"),
    ({"snapshot": {"little_h": 0.7, **field("position", a_power=1)}},
     "galaxy.toml:snapshot.fields.position.a_power: is 1, so snapshot.scale_factor or "
     "snapshot.scale_factor_attribute must be given; got neither"),
    ({"snapshot": {"little_h": 0.7, "little_h_attribute": "Header/HubbleParam"}},
     "galaxy.toml:snapshot.little_h: cannot be combined with snapshot.little_h_attribute; give little h as a "
     "number or as the attribute that holds it, not both"),
    ({"snapshot": {"scale_factor": 1.0, "scale_factor_attribute": "Header/Time"}},
     "galaxy.toml:snapshot.scale_factor: cannot be combined with snapshot.scale_factor_attribute"),
    ({"snapshot": field("temperature", dataset="gas/t", value=8000.0)},
     "galaxy.toml:snapshot.fields.temperature.dataset: cannot be combined with "
     "snapshot.fields.temperature.value; a field is read from a dataset or set to a constant value, not both"),
])
def test_cross_key_rules(sections, message):
    with pytest.raises(ConfigError, match="^" + re.escape(message)):
        make(**sections)


def test_beam_minor_equal_to_major_is_accepted():
    config = make(beam={"major": "0.5 arcmin", "minor": "30 arcsec"})
    assert_quantity_allclose(config["beam.minor"], config["beam.major"], rtol=1e-15)


# --- overrides --------------------------------------------------------------------------------


@pytest.mark.parametrize("text, key, expected", [
    ("grid.n_x=64", "grid.n_x", 64),
    (" grid.n_x = 64 ", "grid.n_x", 64),
    ("grid.pixel_scale=12 arcsec", "grid.pixel_scale", 12 * u.arcsec),
    ("grid.pixel_scale='12 arcsec'", "grid.pixel_scale", 12 * u.arcsec),
    ('grid.pixel_scale="0.2 arcmin"', "grid.pixel_scale", 0.2 * u.arcmin),
    ("output.moment0=false", "output.moment0", False),
    ("noise.aperture_efficiency=0.5", "noise.aperture_efficiency", 0.5),
    ("noise.aperture_efficiency=1", "noise.aperture_efficiency", 1.0),
    ("grid.spectral_axis=VRAD", "grid.spectral_axis", "VRAD"),
    ("output.name=2024", "output.name", "2024"),
    ("output.name=a=b", "output.name", "a=b"),
    ("output.name='quoted name'", "output.name", "quoted name"),
    ("snapshot.fields.metallicity.unit=1e-3", "snapshot.fields.metallicity.unit", u.Unit("1e-3")),
    ("snapshot.fields.mass.unit=1e10 Msun", "snapshot.fields.mass.unit", u.Unit("1e10 Msun")),
    ("snapshot.path=/abs/other.h5", "snapshot.path", Path("/abs/other.h5")),
    ("snapshot.path=other.h5", "snapshot.path", Path("/data/other.h5").resolve()),
])
def test_override_values_parse_as_toml_or_as_bare_strings(text, key, expected):
    value = make(overrides=[text])[key]
    if isinstance(expected, u.Quantity):
        assert value.unit == expected.unit
        assert_quantity_allclose(value, expected, rtol=0)
    else:
        assert value == expected and type(value) is type(expected)


def test_override_arrays_parse_as_toml():
    config = make(overrides=["geometry.centre=explicit", "geometry.centre_position=['1 kpc', '0 kpc', '2 kpc']",
                             "geometry.orientation=explicit",
                             "geometry.rotation_matrix=[[0, 1, 0], [-1, 0, 0], [0, 0, 1]]"])
    assert_quantity_allclose(config["geometry.centre_position"], [1, 0, 2] * u.kpc, rtol=0)
    np.testing.assert_array_equal(config["geometry.rotation_matrix"], [[0, 1, 0], [-1, 0, 0], [0, 0, 1]])


@pytest.mark.parametrize("text, message", [
    ("grid.n_x", "--set: expected 'key.path=value', e.g. 'grid.n_x=64'; got 'grid.n_x'"),
    ("=64", "--set: expected 'key.path=value', e.g. 'grid.n_x=64'; got '=64'"),
    ("grid.pixle_scale=6 arcsec", "--set:grid.pixle_scale: unknown key; did you mean 'grid.pixel_scale'?"),
    ("gird.n_x=64", "--set:gird.n_x: unknown key; did you mean 'grid.n_x'?"),
    ("qqqq.zzzz=1", "--set:qqqq.zzzz: unknown key; the valid sections are: snapshot, geometry"),
    ("grid=64", "--set:grid: is a section, not a key; give a key, e.g. 'grid.n_x=...'"),
    ("grid.n_x=6 4", "--set:grid.n_x: expected an integer, e.g. 64; got '6 4'"),
    ("grid.n_x=", "--set:grid.n_x: expected an integer, e.g. 64; got ''"),
    ("grid.n_x=64\nother=1", "--set:grid.n_x: expected an integer, e.g. 64; got '64\\nother=1'"),
    ("grid.pixel_scale=12", "--set:grid.pixel_scale: expected an angle, e.g. '10 arcsec' or '60 deg'; got 12, a "
                            "bare number"),
])
def test_override_refusals(text, message):
    with pytest.raises(ConfigError, match="^" + re.escape(message)):
        make(overrides=[text])


@pytest.mark.parametrize("overrides", ["grid.n_x=64", [b"grid.n_x=64"], ["grid.n_x=64", 3]])
def test_overrides_must_be_a_sequence_of_strings(overrides):
    with pytest.raises(TypeError, match=r"overrides must be a sequence of 'key\.path=value' strings"):
        make(overrides=overrides)
    with pytest.raises(TypeError, match=r"overrides must be a sequence"):
        make().replace(overrides)


# Precedence, one row per case: defaults < config file < --set (later --set wins), then replace().
@pytest.mark.parametrize("file_value, overrides, replaced, expected, expected_is_set", [
    (None, [], None, 128, False),
    (64, [], None, 64, True),
    (None, ["grid.n_x=32"], None, 32, True),
    (64, ["grid.n_x=32"], None, 32, True),
    (64, ["grid.n_x=32", "grid.n_x=16"], None, 16, True),
    (64, ["grid.n_x=32"], ["grid.n_x=8"], 8, True),
    (None, [], ["grid.n_x=8"], 8, True),
    (64, ["grid.n_y=32"], [], 64, True),
])
def test_precedence_defaults_file_overrides_replace(file_value, overrides, replaced, expected, expected_is_set):
    grid = {} if file_value is None else {"n_x": file_value}
    config = make(grid=grid, overrides=overrides)
    if replaced is not None:
        config = config.replace(replaced)
    assert config["grid.n_x"] == expected
    assert config.is_set("grid.n_x") is expected_is_set


# Alternatives, one row per case: a later layer that chooses one drops the other from below.
@pytest.mark.parametrize("sections, overrides, key, expected, dropped", [
    ({}, ["observer.redshift=0.002"], "observer.redshift", 0.002, "observer.distance"),
    ({"observer": {"systemic_velocity": "600 km/s"}}, ["observer.redshift=0.002"], "observer.redshift", 0.002,
     "observer.systemic_velocity"),
    ({}, ["snapshot.fields.temperature.value=8000.0"], "snapshot.fields.temperature.value", 8000.0,
     "snapshot.fields.temperature.dataset"),
    ({"snapshot": field("temperature", value=8000.0)}, ["snapshot.fields.temperature.dataset=gas/t"],
     "snapshot.fields.temperature.dataset", "gas/t", "snapshot.fields.temperature.value"),
    ({"snapshot": {"little_h": 0.7}}, ["snapshot.little_h_attribute=Header/HubbleParam"],
     "snapshot.little_h_attribute", "Header/HubbleParam", "snapshot.little_h"),
])
def test_an_override_of_one_alternative_drops_the_other(sections, overrides, key, expected, dropped):
    config = make(**sections, overrides=overrides)
    assert config[key] == expected
    assert config[dropped] is None
    assert not config.is_set(dropped)


def test_a_replace_layer_may_switch_an_alternative_chosen_by_an_earlier_override():
    config = make(overrides=["observer.redshift=0.002"]).replace(["observer.distance=9 Mpc"])
    assert_quantity_allclose(config["observer.distance"], 9 * u.Mpc, rtol=0)
    assert config["observer.redshift"] is None


def test_both_alternatives_in_one_override_batch_are_refused():
    with pytest.raises(ConfigError, match=r"^--set:observer\.distance: cannot be combined with observer\.redshift"):
        make(overrides=["observer.distance=9 Mpc", "observer.redshift=0.002"])


def test_systemic_velocity_override_with_a_redshift_file_is_refused():
    mapping = {"snapshot": {"path": "/s.h5"}, "observer": {"redshift": 0.002}}
    with pytest.raises(ConfigError, match=r"^--set:observer\.systemic_velocity: cannot be combined with "
                                          r"observer\.redshift"):
        config_from_dict(mapping, overrides=["observer.systemic_velocity=600 km/s"])


def test_replace_returns_a_new_config_and_leaves_the_old_one():
    config = make()
    changed = config.replace(["grid.n_chan=11"])
    assert changed["grid.n_chan"] == 11 and config["grid.n_chan"] == 64
    assert changed.source == config.source and changed.base_dir == config.base_dir


# Where a replaced value came from, one row per form of origin: the message starts with that place.
PLACE = "batch.toml:sweep.keys.grid.n_x[1]"


@pytest.mark.parametrize("origin, message", [
    ({}, "--set:grid.n_x: expected a value of at least 1; got 0"),
    ({"origin": "sweep.toml"}, "sweep.toml:grid.n_x: expected a value of at least 1; got 0"),
    ({"origin": ["b.toml:sweep.keys.grid.n_y[0]", PLACE]}, PLACE + ": expected a value of at least 1; got 0"),
])
def test_replace_names_the_origin_it_is_given_in_its_errors(origin, message):
    overrides = ["grid.n_y=8", "grid.n_x=0"] if isinstance(origin.get("origin"), list) else ["grid.n_x=0"]
    with pytest.raises(ConfigError, match="^" + re.escape(message) + "$"):
        make().replace(overrides, **origin)


@pytest.mark.parametrize("overrides, message", [
    (["grid.n_x"], "expected 'key.path=value', e.g. 'grid.n_x=64'; got 'grid.n_x'"),
    (["gird.n_x=64"], "unknown key 'gird.n_x'; did you mean 'grid.n_x'?"),
    (["qqqq.zzzz=1"], "unknown key 'qqqq.zzzz'; the valid sections are: snapshot, geometry"),
    (["grid=64"], "'grid' is a section, not a key; give a key, e.g. 'grid.n_x=...'"),
    (["grid.pixel_scale=12"], "expected an angle, e.g. '10 arcsec' or '60 deg'; got 12, a bare number"),
    (["snapshot.fields.mass.h_power=-1"], "is -1, so snapshot.little_h or snapshot.little_h_attribute must be "
                                          "given; got neither"),
    (["observer.distance=9 Mpc", "observer.redshift=0.002"], "cannot be combined with observer.redshift"),
])
def test_replace_with_one_place_per_override_starts_every_refusal_with_that_place(overrides, message):
    places = [PLACE, "batch.toml:sweep.redshifts[0]"][:len(overrides)]
    with pytest.raises(ConfigError, match="^" + re.escape(f"{PLACE}: {message}")):
        make().replace(overrides, origin=places)


@pytest.mark.parametrize("replaced, message", [
    ("beam.major=20 arcsec", "batch.toml:k: expected at least beam.minor (36.0 arcsec); got 20.0 arcsec"),
    ("beam.minor=50 arcsec", "batch.toml:k: expected at most beam.major (45.0 arcsec); got 50.0 arcsec"),
])
def test_a_cross_key_rule_blames_the_key_given_last(replaced, message):
    config = make(beam={"major": "45 arcsec", "minor": "36 arcsec"})
    with pytest.raises(ConfigError, match="^" + re.escape(message) + "$"):
        config.replace([replaced], origin=["batch.toml:k"])


def test_where_tells_the_file_an_override_and_a_named_place_apart():
    config = make(grid={"n_x": 64}).replace(["grid.n_y=32"]).replace(["observer.redshift=0.01", "grid.n_chan=5"],
                                                                     origin=["b.toml:z[0]", "b.toml:c[0]"])
    assert [config.where(key) for key in ("grid.n_x", "grid.n_y", "grid.n_chan", "observer.redshift")] == \
        ["galaxy.toml:grid.n_x", "--set:grid.n_y", "b.toml:c[0]", "b.toml:z[0]"]
    # A default, and an alternative a later layer dropped, read as the config file's.
    assert config.where("beam.major") == "galaxy.toml:beam.major"
    assert config.where("observer.distance") == "galaxy.toml:observer.distance"
    with pytest.raises(KeyError, match=r"unknown config key 'grid\.nx'"):
        config.where("grid.nx")


@pytest.mark.parametrize("origin", [3, ["only one"], ("a", 2), {"grid.n_x": "a", "grid.n_y": "b"}])
def test_an_origin_must_be_a_string_or_one_string_per_override(origin):
    with pytest.raises(TypeError, match=r"origin must be a string or a sequence of one string per override \(2\)"):
        make().replace(["grid.n_x=8", "grid.n_y=8"], origin=origin)


def test_load_config_takes_overrides(tmp_path):
    config = load_config(write(tmp_path, MINIMAL_TOML), overrides=["grid.n_y=24"])
    assert config["grid.n_y"] == 24


# --- RunConfig --------------------------------------------------------------------------------


def test_run_config_is_frozen_and_returns_copies():
    config = make(geometry={"orientation": "explicit", "rotation_matrix": [[1, 0, 0], [0, 1, 0], [0, 0, 1]]})
    with pytest.raises(dataclasses.FrozenInstanceError):
        config.source = "other.toml"
    matrix = config["geometry.rotation_matrix"]
    matrix[0, 0] = 5.0
    distance = config["observer.distance"]
    distance += 1 * u.Mpc
    assert config["geometry.rotation_matrix"][0, 0] == 1.0
    assert_quantity_allclose(config["observer.distance"], 8.5 * u.Mpc, rtol=0)


def test_unknown_keys_and_sections_raise_key_errors_with_a_suggestion():
    config = make()
    with pytest.raises(KeyError, match=r"unknown config key 'grid\.pixle_scale'; did you mean 'grid\.pixel_scale'"):
        config["grid.pixle_scale"]
    with pytest.raises(KeyError, match=r"unknown config key 'zzz'\"$"):
        config.is_set("zzz")
    with pytest.raises(KeyError, match=r"unknown config key 'grid'; it is a section: use section\('grid'\)"):
        config.normalised("grid")
    with pytest.raises(KeyError, match=r"unknown config section 'gird'; did you mean 'grid'"):
        config.section("gird")
    with pytest.raises(KeyError, match=r"unknown config section 'grid\.n_x'"):
        config.section("grid.n_x")


def test_section_returns_its_keys_relative_to_the_section():
    config = make()
    grid = config.section("grid")
    assert list(grid) == [key.removeprefix("grid.") for key in PARAMS_BY_KEY if key.startswith("grid.")]
    assert grid["n_x"] == 128
    mass = config.section("snapshot.fields.mass")
    assert mass["dataset"] == "gas/mass" and mass["unit"] == u.Msun
    assert "fields.mass.unit" in config.section("snapshot")


def test_is_set_tells_given_keys_from_defaults():
    config = make(grid={"n_x": 128})
    assert config.is_set("grid.n_x")  # given, even though equal to the default
    assert not config.is_set("grid.n_y")
    assert config.is_set("observer.distance")


@pytest.mark.parametrize("key, raw, expected", [
    ("grid.pixel_scale", "0.5 deg", 1800 * u.arcsec),  # 1 deg = 3600 arcsec (SI brochure, table 8)
    ("observer.ra", "12 hourangle", 180 * u.deg),  # 1 hourangle = 15 deg (definition)
    ("observer.distance", "8500 kpc", 8.5 * u.Mpc),
    ("noise.dish_diameter", "0.015 km", 15 * u.m),
    ("grid.channel_width", "0.02 MHz", 20 * u.kHz),
    ("grid.channel_width", "4000 m/s", 4 * u.km / u.s),
    ("noise.integration_time", "4 h", 14400 * u.s),  # 1 h = 3600 s (SI brochure, table 8)
    ("noise.rms", "400 uJy/beam", 0.0004 * u.Jy / u.beam),
    ("run.memory_budget", "8192 MiB", 8 * u.GiB),  # IEC 80000-13 binary prefixes
    ("emission.turbulent_dispersion", "7000 m/s", 7 * u.km / u.s),
])
def test_normalised_gives_display_units(key, raw, expected):
    section, name = key.split(".")
    keys = {name: raw, "mode": "rms"} if key == "noise.rms" else {name: raw}
    value = make(**{section: keys}).normalised(key)
    assert value.unit == expected.unit
    assert_quantity_allclose(value, expected, rtol=1e-14)


def test_normalised_leaves_other_kinds_alone():
    config = make(geometry={"centre": "explicit", "centre_position": ["1 pc", "0 pc", "0 pc"]})
    assert config.normalised("grid.n_x") == 128
    assert config.normalised("observer.redshift") is None
    assert_quantity_allclose(config.normalised("geometry.centre_position"), [0.001, 0, 0] * u.kpc, rtol=1e-15)
    assert config.normalised("geometry.centre_position").unit == u.kpc


# --- to_toml and digest -----------------------------------------------------------------------


def _flat(table, prefix=""):
    flat = {}
    for name, value in table.items():
        if isinstance(value, dict):
            flat.update(_flat(value, f"{prefix}{name}."))
        else:
            flat[prefix + name] = value
    return flat


def test_to_toml_writes_every_resolved_key_in_display_units():
    config = load_config(EXAMPLE)
    written = _flat(tomllib.loads(config.to_toml()))
    assert set(written) == {param.key for param in PARAMS if config[param.key] is not None}
    assert written["grid.pixel_scale"] == "6.0 arcsec"
    assert written["observer.distance"] == "8.5 Mpc"
    assert written["noise.dish_diameter"] == "15.0 m"
    assert written["noise.integration_time"] == "28800.0 s"  # 8 h; 1 h = 3600 s (SI brochure)
    assert written["run.memory_budget"] == "4.0 GiB"
    assert written["snapshot.path"] == str(config["snapshot.path"])
    assert written["grid.n_x"] == 240 and written["output.moment0"] is True


def test_to_toml_round_trips_through_load_config_to_an_equal_digest(tmp_path):
    config = make(snapshot={"little_h": 0.6774, "scale_factor_attribute": "Header/Time",
                            **field("mass", unit="1e10 Msun", h_power=-1, a_power=0)},
                  geometry={"centre": "explicit", "centre_position": ["1 kpc", "500 pc", "-2 kpc"],
                            "frame": "explicit", "frame_velocity": ["10 km/s", "0 km/s", "-5 km/s"],
                            "orientation": "explicit",
                            "rotation_matrix": Rotation.from_euler("zx", [30, 60], degrees=True).as_matrix()},
                  grid={"pixel_scale": "0.1 arcmin", "channel_width": "20 kHz"},
                  noise={"mode": "rms", "rms": "400 uJy/beam"},
                  output={"name": 'odd "name"\twith\\escapes\u007f'},
                  run={"memory_budget": "512 MB"})
    path = write(tmp_path, config.to_toml(), name="resolved.toml")
    again = load_config(path)
    assert again.digest == config.digest
    assert again.to_toml() == config.to_toml()
    assert again["output.name"] == config["output.name"]
    np.testing.assert_array_equal(again["geometry.rotation_matrix"], config["geometry.rotation_matrix"])


def test_to_toml_round_trips_a_redshift_config(tmp_path):
    config = config_from_dict({"snapshot": {"path": "/s.h5"}, "observer": {"redshift": 0.02},
                               "grid": {"channel_width": "4 km/s"}})
    again = load_config(write(tmp_path, config.to_toml()))
    assert again.digest == config.digest


def test_digest_is_the_sha256_of_to_toml_and_is_stable():
    config = make()
    assert config.digest == hashlib.sha256(config.to_toml().encode("utf-8")).hexdigest()
    assert make().digest == config.digest
    assert config.replace([]).digest == config.digest


def test_digest_depends_on_values_not_on_how_they_were_written():
    # 8192 MiB = 8 GiB exactly (IEC 80000-13); 1 km/s = 1000 m/s (SI prefix).
    written_one_way = make(run={"memory_budget": "8 GiB"}, grid={"channel_width": "4 km/s"})
    written_another = make(run={"memory_budget": "8192 MiB"}, grid={"channel_width": "4000 m/s"})
    assert written_one_way.digest == written_another.digest


@pytest.mark.parametrize("override", ["grid.n_x=129", "grid.pixel_scale=10.000001 arcsec", "output.moment0=false",
                                      "snapshot.path=other.h5", "observer.distance=8.6 Mpc"])
def test_digest_changes_with_content(override):
    assert make().replace([override]).digest != make().digest


# --- describe_config --------------------------------------------------------------------------


def test_describe_config_lists_every_key_once_with_its_doc():
    config = make(grid={"pixel_scale": "0.1 arcmin"})
    text = describe_config(config)
    lines = [line for line in text.splitlines() if " = " in line]
    assert len(lines) == len(PARAMS)
    sections = re.findall(r"^\[([\w.]+)\]$", text, flags=re.MULTILINE)
    assert sections == list(dict.fromkeys(param.key.rpartition(".")[0] for param in PARAMS))
    grid_block = text.split("[grid]\n")[1].split("\n\n")[0]
    assert re.search(r'^pixel_scale = "6\.0 arcsec" +# pixel size on the sky$', grid_block, flags=re.MULTILINE)
    assert re.search(r"^redshift = \(not set\) +# cosmological redshift", text, flags=re.MULTILINE)


def test_run_config_repr_names_source_and_folder():
    assert repr(make()) == f"RunConfig(source='galaxy.toml', base_dir={Path('/data').resolve()!r})"


def test_run_config_has_no_value_equality():
    # Configs compare by digest; == is identity (no elementwise array comparisons).
    assert make() != make()
    assert isinstance(make(), RunConfig)


# Each of these ended in a traceback (the distance resolver) or wrote outside
# output.directory; now one line naming the key.
@pytest.mark.parametrize(("sections", "message"), [
    ({"observer": {"distance": "10 Mpc", "systemic_velocity": "299792.458 km/s"}},
     r"galaxy\.toml:observer\.systemic_velocity: expected a speed below that of light .*; got 299792\.458 km / s$"),
    ({"observer": {"distance": "10 Mpc", "systemic_velocity": "-4e5 km/s"}},
     r"galaxy\.toml:observer\.systemic_velocity: expected a speed below that of light .*; got -400000\.0 km / s$"),
    ({"output": {"name": "../escape/cube"}},
     r"galaxy\.toml:output\.name: expected a file base name without folders .*; got '\.\./escape/cube'$"),
    ({"output": {"name": ".."}}, r"galaxy\.toml:output\.name: expected a file base name .*; got '\.\.'$"),
])
def test_values_the_run_cannot_use_are_refused_at_load(sections, message):
    with pytest.raises(ConfigError, match=message):
        make(**sections)
