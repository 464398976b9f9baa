"""Shared fixtures: a seeded random generator, a tiny-snapshot factory and fitsverify."""

import re
import shutil
import subprocess

import h5py
import numpy as np
import pytest
from hypothesis import settings

settings.register_profile("ci", derandomize=True, max_examples=30, deadline=None)
settings.load_profile("ci")


@pytest.fixture
def rng():
    """A seeded generator; every test that needs randomness takes it from here."""
    return np.random.default_rng(20261202)


@pytest.fixture
def make_snapshot(tmp_path):
    """Return a function writing a small snapshot in the project's own HDF5 layout.

    The layout is the one the default field map reads: group ``gas`` with
    datasets ``position`` (kpc, shape (n, 3)), ``velocity`` (km/s, (n, 3)),
    ``mass`` (Msun), ``smoothing_length`` (kpc), ``temperature`` (K) and
    ``neutral_fraction``; root attributes ``little_h`` and ``scale_factor``.
    Keyword arguments replace or add datasets (``None`` removes one).
    """

    def _make(n_particles=100, *, name="snapshot.h5", seed=1, **datasets):
        generator = np.random.default_rng(seed)
        fields = {
            "position": generator.normal(0.0, 3.0, (n_particles, 3)),
            "velocity": generator.normal(0.0, 50.0, (n_particles, 3)),
            "mass": np.full(n_particles, 1.0e5),
            "smoothing_length": generator.uniform(0.2, 1.0, n_particles),
            "temperature": np.full(n_particles, 8000.0),
            "neutral_fraction": np.full(n_particles, 0.9),
        }
        fields.update(datasets)
        path = tmp_path / name
        with h5py.File(path, "w") as handle:
            handle.attrs["little_h"] = 0.7
            handle.attrs["scale_factor"] = 1.0
            group = handle.create_group("gas")
            for key, values in fields.items():
                if values is not None:
                    group.create_dataset(key, data=values)
        return path

    return _make


SMALL_RUN_TOML = """
[snapshot]
path = "{snapshot}"
chunk_particles = 64

[geometry]
centre = "centre_of_mass"
selection_radius = "6 kpc"
orientation = "simulation_axes"
inclination = "30 deg"
position_angle = "20 deg"

[observer]
distance = "10 Mpc"
systemic_velocity = "700 km/s"
ra = "359.98 deg"
dec = "12.5 deg"

[grid]
n_x = 37
n_y = 24
n_chan = 17
pixel_scale = "12 arcsec"
channel_width = "12 km/s"

[beam]
major = "45 arcsec"
minor = "36 arcsec"
position_angle = "30 deg"

[noise]
mode = "rms"
rms = "0.2 mJy/beam"

[output]
directory = "{output}"
name = "small"
"""


@pytest.fixture
def small_run_config(tmp_path, make_snapshot):
    """Write a small, valid run config (and its snapshot) and return the config path.

    Keyword arguments of the returned factory replace whole lines of the TOML
    text: ``edit={"n_x = 37": "n_x = 40"}``.
    """

    def _make(*, edit=None, snapshot_kwargs=None):
        snapshot = make_snapshot(200, **(snapshot_kwargs or {}))
        text = SMALL_RUN_TOML.format(snapshot=snapshot, output=tmp_path / "out")
        for old, new in (edit or {}).items():
            if old not in text:
                raise KeyError(f"{old!r} is not a line of the small config")
            text = text.replace(old, new)
        path = tmp_path / "small.toml"
        path.write_text(text)
        return path

    return _make


_FITSVERIFY_SUMMARY = re.compile(r"Verification found (\d+) warning\(s\) and (\d+) error\(s\)")


@pytest.fixture
def fitsverify():
    """Return a function running HEASARC fitsverify on a file: (n_warnings, n_errors, report)."""
    program = shutil.which("fitsverify")
    if program is None:
        pytest.skip("fitsverify is not installed")

    def _run(path):
        report = subprocess.run([program, str(path)], capture_output=True, text=True, check=False)
        text = report.stdout + report.stderr
        found = _FITSVERIFY_SUMMARY.search(text)
        assert found is not None, text
        return int(found.group(1)), int(found.group(2)), text

    return _run
