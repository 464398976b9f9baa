"""Tests of sphere selection."""

import numpy as np
import pytest
from scipy.spatial import cKDTree

from pipeline.particles import ParticleChunk, select_sphere


def random_chunk(rng, n_particles):
    """Return a chunk of random particles with every optional quantity set."""
    ones = np.ones(n_particles)
    return ParticleChunk(
        position_kpc=rng.normal(0.0, 10.0, (n_particles, 3)), velocity_kms=rng.normal(0.0, 50.0, (n_particles, 3)),
        mass_msun=rng.uniform(1e4, 1e5, n_particles), h_kpc=rng.uniform(0.1, 1.0, n_particles),
        temperature_k=rng.uniform(1e2, 1e4, n_particles), neutral_fraction=rng.uniform(0, 1, n_particles),
        hydrogen_fraction=0.76 * ones, molecular_fraction=0.1 * ones, metallicity=0.02 * ones,
        density_msun_kpc3=rng.uniform(1e5, 1e7, n_particles))


def test_select_sphere_matches_a_kd_tree_query(rng):
    chunk = random_chunk(rng, 3000)
    centre_kpc, radius_kpc = np.array([3.5, -2.0, 1.25]), 7.3
    selected = select_sphere(chunk, centre_kpc, radius_kpc)
    # Reference: scipy.spatial.cKDTree.query_ball_point (Euclidean ball, boundary included).
    expected = np.sort(cKDTree(chunk.position_kpc).query_ball_point(centre_kpc, radius_kpc))
    assert 0 < expected.size < chunk.n_particles
    np.testing.assert_array_equal(selected.position_kpc, chunk.position_kpc[expected])
    np.testing.assert_array_equal(selected.velocity_kms, chunk.velocity_kms[expected])
    np.testing.assert_array_equal(selected.density_msun_kpc3, chunk.density_msun_kpc3[expected])
    np.testing.assert_array_equal(selected.metallicity, chunk.metallicity[expected])


def test_select_sphere_keeps_particles_on_the_boundary_and_may_return_none(rng):
    chunk = random_chunk(rng, 3)
    chunk = chunk.with_frame(position_kpc=np.array([[3.0, 4.0, 0.0], [0.0, 0.0, 5.0000001], [0.0, 0.0, 0.0]]),
                             velocity_kms=chunk.velocity_kms)
    assert select_sphere(chunk, np.zeros(3), 5.0).n_particles == 2
    assert select_sphere(chunk, np.array([100.0, 0.0, 0.0]), 1.0).n_particles == 0


@pytest.mark.parametrize(("centre", "radius", "message"), [
    (np.zeros(2), 1.0, r"'centre_kpc' must be three finite numbers"),
    (np.array([0.0, np.nan, 0.0]), 1.0, r"'centre_kpc' must be three finite numbers"),
    (np.zeros(3), 0.0, r"'radius_kpc' must be a positive finite number of kpc, e\.g\. 30\.0; got 0\.0"),
    (np.zeros(3), np.inf, r"'radius_kpc' must be a positive finite number"),
])
def test_select_sphere_refuses_bad_geometry(rng, centre, radius, message):
    with pytest.raises(ValueError, match=message):
        select_sphere(random_chunk(rng, 5), centre, radius)
