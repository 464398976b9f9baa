"""Tests of ParticleChunk."""

import numpy as np
import pytest

from pipeline.particles import ParticleChunk


def make_chunk(start, n_particles, *, metallicity=True):
    """Return a chunk whose values count up from ``start`` so rows can be traced."""
    values = np.arange(start, start + n_particles, dtype=np.float64)
    vectors = np.repeat(values[:, None], 3, axis=1)
    return ParticleChunk(position_kpc=vectors, velocity_kms=-vectors, mass_msun=values, h_kpc=values,
                         temperature_k=values, neutral_fraction=values, hydrogen_fraction=values,
                         metallicity=values if metallicity else None)


def test_take_picks_the_same_rows_of_every_quantity():
    picked = make_chunk(0, 6).take(np.array([True, False, True, False, False, True]))
    assert picked.n_particles == 3
    np.testing.assert_array_equal(picked.position_kpc[:, 1], [0.0, 2.0, 5.0])
    np.testing.assert_array_equal(picked.metallicity, [0.0, 2.0, 5.0])
    assert picked.density_msun_kpc3 is None
    np.testing.assert_array_equal(make_chunk(0, 6).take(np.array([4, 1])).h_kpc, [4.0, 1.0])


def test_concatenate_joins_in_order_and_drops_partial_optionals():
    joined = ParticleChunk.concatenate([make_chunk(0, 2), make_chunk(2, 3)])
    np.testing.assert_array_equal(joined.mass_msun, np.arange(5.0))
    np.testing.assert_array_equal(joined.velocity_kms[:, 2], -np.arange(5.0))
    np.testing.assert_array_equal(joined.metallicity, np.arange(5.0))
    partial = ParticleChunk.concatenate([make_chunk(0, 2), make_chunk(2, 3, metallicity=False)])
    assert partial.metallicity is None


def test_concatenate_refuses_no_chunks():
    with pytest.raises(ValueError, match=r"'chunks' must hold at least one ParticleChunk; got none"):
        ParticleChunk.concatenate([])


def test_with_frame_replaces_only_positions_and_velocities():
    chunk = make_chunk(0, 3)
    moved = chunk.with_frame(position_kpc=chunk.position_kpc + 1.0, velocity_kms=np.zeros((3, 3)))
    np.testing.assert_array_equal(moved.position_kpc, chunk.position_kpc + 1.0)
    np.testing.assert_array_equal(moved.velocity_kms, 0.0)
    assert moved.mass_msun is chunk.mass_msun
