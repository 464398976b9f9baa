"""A snapshot held in memory serves the same chunks as the file, and works with iter_positions."""

import numpy as np

from pipeline.particles import FieldSource, MemorySnapshot, iter_positions, load_into_memory, open_snapshot

FIELDS = {
    "position": FieldSource(dataset="gas/position", unit="kpc"),
    "velocity": FieldSource(dataset="gas/velocity", unit="km/s"),
    "mass": FieldSource(dataset="gas/mass", unit="Msun"),
    "smoothing_length": FieldSource(dataset="gas/smoothing_length", unit="kpc"),
    "temperature": FieldSource(dataset="gas/temperature", unit="K"),
    "neutral_fraction": FieldSource(dataset="gas/neutral_fraction", unit=""),
    "hydrogen_fraction": FieldSource(value=0.76, unit=""),
}


def test_memory_snapshot_yields_the_files_chunks_exactly(make_snapshot):
    snapshot = open_snapshot(make_snapshot(103), fields=FIELDS, chunk_particles=25)
    held = load_into_memory(snapshot)
    assert isinstance(held, MemorySnapshot) and held.n_particles == 103 and held.path == snapshot.path
    from_file, from_memory = list(snapshot.iter_chunks()), list(held.iter_chunks())
    assert [c.n_particles for c in from_memory] == [c.n_particles for c in from_file] == [25, 25, 25, 25, 3]
    for a, b in zip(from_file, from_memory):
        for name in ("position_kpc", "velocity_kms", "mass_msun", "h_kpc", "temperature_k", "hydrogen_fraction"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


def test_iter_positions_reads_memory_like_the_file(make_snapshot):
    snapshot = open_snapshot(make_snapshot(60), fields=FIELDS, chunk_particles=16)
    held = load_into_memory(snapshot)
    for with_velocity in (False, True):
        pairs = zip(iter_positions(snapshot, with_velocity=with_velocity),
                    iter_positions(held, with_velocity=with_velocity))
        for (position, mass, velocity), (position_m, mass_m, velocity_m) in pairs:
            np.testing.assert_array_equal(position, position_m)
            np.testing.assert_array_equal(mass, mass_m)
            assert (velocity is None) == (velocity_m is None) == (not with_velocity)
            if with_velocity:
                np.testing.assert_array_equal(velocity, velocity_m)
