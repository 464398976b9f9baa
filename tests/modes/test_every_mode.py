"""Every mode of the parameter table runs end to end through ``cubewright run``.

The rows are derived from the table, not listed here: one run per ``choices``
value of every parameter (with the keys that choice needs, ``COMPANIONS``) and
one per side of every either/or form the loader knows (``_ALTERNATIVES``),
with values from ``EXAMPLES``, and one per form of each ``VALUE_FORMS`` key
(a channel width as a velocity or a frequency).  A choice or form added later gets its row
without editing this file; the meta-tests fail if one cannot be built.
"""

import json

import numpy as np
import pytest

from pipeline.config._load import _ALTERNATIVES
from pipeline.config._schema import COMPANIONS, EXAMPLES, PARAMS, SNAPSHOT_FIELDS, VALUE_FORMS
from cli_calls import run_cli

# The small base run: tiny grid, a few hundred particles; every row changes only its own keys.
_BASE = {
    "snapshot.chunk_particles": 64,
    "geometry.centre": "centre_of_mass",
    "geometry.selection_radius": "6 kpc",
    "geometry.orientation": "simulation_axes",
    "geometry.inclination": "30 deg",
    "observer.distance": "10 Mpc",
    "observer.systemic_velocity": "700 km/s",
    "grid.n_x": 12,
    "grid.n_y": 10,
    "grid.n_chan": 9,
    "grid.pixel_scale": "15 arcsec",
    "grid.channel_width": "30 km/s",
    "beam.major": "45 arcsec",
    "beam.minor": "36 arcsec",
    "noise.mode": "rms",
    "noise.rms": "0.2 mJy/beam",
    "output.name": "mode",
    "output.preview": False,
    "run.threads": 1,
}


def _companions(key, choice):
    return COMPANIONS.get(f"{key}={choice}", ()) + COMPANIONS.get(key, ())


def _give(settings, keys):
    """Give ``keys`` their example values, dropping every key of the forms they exclude."""
    for key in keys:
        for first, second, _ in _ALTERNATIVES:
            if key in first:
                excluded = second
            elif key in second:
                excluded = first
            else:
                continue
            for other in excluded:
                settings.pop(other, None)
        settings[key] = EXAMPLES[key]
    return settings


def _rows():
    rows = []
    for param in PARAMS:
        for choice in param.choices:
            settings = _give(dict(_BASE), _companions(param.key, choice))
            settings[param.key] = choice
            rows.append(pytest.param(settings, id=f"{param.key}={choice}"))
    for first, second, _ in _ALTERNATIVES:
        for form in (first, second):
            rows.append(pytest.param(_give(dict(_BASE), form), id="+".join(form)))
    for key, values in VALUE_FORMS.items():
        for value in values:
            rows.append(pytest.param({**_BASE, key: value}, id=f"{key}={value}"))
    return rows


ROWS = _rows()


def _toml(settings, snapshot, output):
    """Write dotted ``settings`` as TOML tables (JSON literals are valid TOML for these values)."""
    settings = {"snapshot.path": str(snapshot), "output.directory": str(output), **settings}
    tables = {}
    for key, value in settings.items():
        table, _, name = key.rpartition(".")
        tables.setdefault(table, []).append(f"{name} = {json.dumps(value)}")
    return "\n".join(f"[{table}]\n" + "\n".join(lines) + "\n" for table, lines in tables.items())


@pytest.mark.parametrize("settings", ROWS)
def test_mode_runs_and_writes_a_valid_cube(capsys, tmp_path, make_snapshot, fitsverify, settings):
    n = 300
    # Every may-be-constant field is also stored as a dataset, so both forms of each can be read.
    extra = {name: np.full(n, 0.5) for name, (_, constant) in SNAPSHOT_FIELDS.items()
             if constant and name not in ("temperature", "neutral_fraction")}
    snapshot = make_snapshot(n, **extra)
    config = tmp_path / "mode.toml"
    config.write_text(_toml(settings, snapshot, tmp_path / "out"))
    code, _, err = run_cli(capsys, "run", config, "--quiet")
    assert code == 0, err
    # HEASARC fitsverify: the cube of every mode is a standard-conforming FITS file.
    warnings, errors, report = fitsverify(tmp_path / "out" / "mode.fits")
    assert (warnings, errors) == (0, 0), report


def test_every_choice_has_a_row():
    ids = {row.id for row in ROWS}
    missing = [f"{p.key}={c}" for p in PARAMS for c in p.choices if f"{p.key}={c}" not in ids]
    assert missing == []


def test_every_form_and_companion_has_an_example():
    needed = {key for first, second, _ in _ALTERNATIVES for key in first + second}
    needed |= {key for keys in COMPANIONS.values() for key in keys}
    assert sorted(needed - set(EXAMPLES)) == []


def test_every_value_form_has_a_row_and_a_real_key():
    ids = {row.id for row in ROWS}
    choices = {p.key for p in PARAMS}
    for key, values in VALUE_FORMS.items():
        assert key in choices, key
        assert all(f"{key}={value}" in ids for value in values), key


def test_every_companion_names_a_real_choice():
    choices = {p.key: p.choices for p in PARAMS}
    for entry in COMPANIONS:
        key, _, choice = entry.partition("=")
        assert key in choices and (not choice or choice in choices[key]), entry
