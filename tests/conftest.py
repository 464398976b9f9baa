"""Shared fixtures: a seeded random generator and a tiny-snapshot factory."""

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
