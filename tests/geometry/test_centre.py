"""Tests for pipeline.geometry._centre: centre, frame velocity and spin axis from chunked gas."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from pipeline.errors import EmptyFieldError, SnapshotError
from pipeline.geometry import _centre, angular_momentum_axis, find_centre, find_frame_velocity


class Chunked:
    """A ``positions`` callable over arrays, in chunks, counting the passes made."""

    def __init__(self, position_kpc, mass_msun, velocity_kms=None, *, chunk=700):
        self.position_kpc = position_kpc
        self.mass_msun = mass_msun
        self.velocity_kms = np.zeros_like(position_kpc) if velocity_kms is None else velocity_kms
        self.chunk = chunk
        self.n_passes = 0

    def __call__(self):
        self.n_passes += 1
        for start in range(0, self.mass_msun.size, self.chunk):
            stop = start + self.chunk
            yield self.position_kpc[start:stop], self.mass_msun[start:stop], self.velocity_kms[start:stop]


def plummer_sphere(rng, n_particles, scale_kpc):
    """Positions drawn from a Plummer sphere: M(<r)/M = r^3 / (r^2 + a^2)^(3/2) (Plummer 1911, MNRAS 71, 460)."""
    fraction = rng.uniform(1e-6, 0.999, n_particles)
    radius = scale_kpc / np.sqrt(fraction ** (-2.0 / 3.0) - 1.0)
    direction = rng.normal(size=(n_particles, 3))
    return radius[:, None] * direction / np.linalg.norm(direction, axis=1)[:, None]


def exponential_disc(rng, n_particles, scale_kpc, height_kpc):
    """Positions in an exponential disc: surface density ~ exp(-R / R_d) (Freeman 1970, ApJ 160, 811)."""
    radius = rng.gamma(2.0, scale_kpc, n_particles)  # R exp(-R/R_d) dR is a gamma(2) law
    phase = rng.uniform(0, 2 * np.pi, n_particles)
    height = rng.laplace(0.0, height_kpc, n_particles)
    return np.column_stack([radius * np.cos(phase), radius * np.sin(phase), height])


def galaxy_with_clump(rng, body):
    """The galaxy body at an offset centre plus an outlying compact clump that drags the mass centre."""
    centre = np.array([12.0, -7.0, 3.0])
    clump = rng.normal(0.0, 0.5, (3000, 3)) + np.array([150.0, 80.0, -60.0])
    position = np.concatenate([body + centre, clump])
    return position, np.full(position.shape[0], 2.0e4), centre


@pytest.mark.parametrize("body", ["plummer", "disc"])
def test_shrinking_sphere_finds_the_centre_where_the_mass_centre_fails(rng, body):
    shape = plummer_sphere(rng, 8000, 1.0) if body == "plummer" else exponential_disc(rng, 8000, 2.0, 0.2)
    position, mass, true_centre = galaxy_with_clump(rng, shape)
    positions = Chunked(position, mass)
    mass_centre = find_centre(positions, method="centre_of_mass")
    assert np.linalg.norm(mass_centre.to_value(u.kpc) - true_centre) > 20.0  # dragged by the clump
    centre = find_centre(positions, method="shrinking_sphere")
    # sampling noise of the central 1000 particles is ~ 0.01-0.05 kpc for these scale lengths
    assert np.linalg.norm(centre.to_value(u.kpc) - true_centre) < 0.15
    assert centre.unit == u.kpc and centre.shape == (3,)


def test_cache_gives_the_same_centre_as_a_pass_per_step_and_saves_passes(rng, monkeypatch):
    position, mass, _ = galaxy_with_clump(rng, plummer_sphere(rng, 8000, 1.0))
    cached = Chunked(position, mass)
    with_cache = find_centre(cached, method="shrinking_sphere")
    monkeypatch.setattr(_centre, "_CACHE_PARTICLES", 0)
    uncached = Chunked(position, mass)
    without_cache = find_centre(uncached, method="shrinking_sphere")
    assert_quantity_allclose(with_cache, without_cache, rtol=0, atol=1e-12 * u.kpc)
    assert cached.n_passes < 10 < uncached.n_passes


def test_shrinking_sphere_stops_at_the_documented_particle_count(rng, monkeypatch):
    position, mass, _ = galaxy_with_clump(rng, plummer_sphere(rng, 8000, 1.0))
    counts = []
    original = _centre._sphere_mass_centre

    def spy(positions, centre_kpc, radius_kpc, cache):
        result = original(positions, centre_kpc, radius_kpc, cache)
        counts.append(result[1])
        return result

    monkeypatch.setattr(_centre, "_sphere_mass_centre", spy)
    find_centre(Chunked(position, mass), method="shrinking_sphere")
    # Power et al. 2003 as adopted: stop below max(1000, 1 % of 11000) = 1000 particles
    assert counts[-1] < 1000 <= counts[-2]
    assert counts[0] == position.shape[0]  # the first sphere encloses every particle
    assert all(later <= earlier for earlier, later in zip(counts, counts[1:]))


def test_shrinking_sphere_with_few_particles_is_the_mass_centre(rng):
    position = rng.normal(size=(300, 3))
    mass = rng.uniform(1.0, 2.0, 300)
    centre = find_centre(Chunked(position, mass), method="shrinking_sphere")
    np.testing.assert_allclose(centre.to_value(u.kpc), np.average(position, axis=0, weights=mass), atol=1e-12)


def test_shrinking_sphere_ends_when_all_particles_coincide():
    position = np.tile([1.0, 2.0, 3.0], (2000, 1))
    centre = find_centre(Chunked(position, np.ones(2000)), method="shrinking_sphere")
    np.testing.assert_allclose(centre.to_value(u.kpc), [1.0, 2.0, 3.0], rtol=1e-14)


def test_coincident_core_ends_at_the_minimum_radius(rng):
    core = np.tile([0.5, 0.5, 0.5], (5000, 1))
    position = np.concatenate([core, rng.uniform(-10, 10, (500, 3))])
    positions = Chunked(position, np.ones(position.shape[0]))
    centre = find_centre(positions, method="shrinking_sphere")
    np.testing.assert_allclose(centre.to_value(u.kpc), [0.5, 0.5, 0.5], atol=1e-12)


@pytest.mark.parametrize("chunk", [1, 333, 100_000])
def test_centre_of_mass_does_not_depend_on_chunking(rng, chunk):
    position = rng.normal(size=(1000, 3)) + 4.0
    mass = rng.uniform(1.0, 3.0, 1000)
    centre = find_centre(Chunked(position, mass, chunk=chunk), method="centre_of_mass")
    np.testing.assert_allclose(centre.to_value(u.kpc), np.average(position, axis=0, weights=mass), rtol=1e-12)


def test_explicit_centre_is_returned_in_kpc_without_reading_the_gas():
    positions = Chunked(np.zeros((5, 3)), np.ones(5))
    centre = find_centre(positions, method="explicit", centre_position=[1.0, 2.0, 3.0] * u.Mpc)
    assert_quantity_allclose(centre, [1000.0, 2000.0, 3000.0] * u.kpc)
    assert positions.n_passes == 0


def test_selection_radius_must_hold_gas(rng):
    positions = Chunked(rng.normal(size=(50, 3)), np.ones(50))
    with pytest.raises(EmptyFieldError, match="the selection radius around the explicit centre"):
        find_centre(positions, method="explicit", centre_position=[100.0, 0, 0] * u.kpc,
                    selection_radius=30 * u.kpc)
    found = find_centre(positions, method="explicit", centre_position=[20.0, 0, 0] * u.kpc,
                        selection_radius=30 * u.kpc)
    assert_quantity_allclose(found, [20.0, 0, 0] * u.kpc)


def test_centre_of_mass_between_two_galaxies_is_refused_with_a_small_selection_radius(rng):
    position = np.concatenate([rng.normal(size=(500, 3)) - 50.0, rng.normal(size=(500, 3)) + 50.0])
    with pytest.raises(EmptyFieldError, match="around the centre of mass centre"):
        find_centre(Chunked(position, np.ones(1000)), method="centre_of_mass", selection_radius=10 * u.kpc)


@pytest.mark.parametrize(("kwargs", "error", "match"), [
    ({"method": "median"}, ValueError, "'method' must be one of"),
    ({"method": "explicit"}, ValueError, "'centre_position' must be given exactly when"),
    ({"method": "centre_of_mass", "centre_position": [0, 0, 0] * u.kpc}, ValueError,
     "'centre_position' must be given exactly when"),
    ({"method": "explicit", "centre_position": [0, 0] * u.kpc}, ValueError, "'centre_position' must be a finite 3-vector"),
    ({"method": "explicit", "centre_position": [0, 0, 0]}, u.UnitsError, "'centre_position' must be a Quantity"),
    ({"method": "centre_of_mass", "selection_radius": -1 * u.kpc}, ValueError,
     "'selection_radius' must be a positive length"),
])
def test_find_centre_refuses_bad_arguments(kwargs, error, match):
    with pytest.raises(error, match=match):
        find_centre(Chunked(np.zeros((5, 3)), np.ones(5)), **kwargs)


def test_find_centre_refuses_massless_or_empty_gas():
    with pytest.raises(EmptyFieldError, match="must hold particles of positive mass"):
        find_centre(Chunked(np.zeros((0, 3)), np.zeros(0)), method="centre_of_mass")
    with pytest.raises(EmptyFieldError, match="must hold particles of positive mass"):
        find_centre(Chunked(np.zeros((4, 3)), np.zeros(4)), method="shrinking_sphere")


def test_chunks_with_wrong_shapes_are_refused():
    def positions():
        yield np.zeros((3, 2)), np.ones(3), np.zeros((3, 3))

    with pytest.raises(ValueError, match=r"each chunk from 'positions' must be \(position_kpc \(n, 3\)"):
        find_centre(positions, method="centre_of_mass")


def test_frame_velocity_is_the_mass_weighted_mean_of_the_central_gas(rng):
    n_particles = 4000
    position = rng.normal(0.0, 2.0, (n_particles, 3))
    velocity = rng.normal(0.0, 30.0, (n_particles, 3)) + np.array([100.0, -50.0, 20.0])
    mass = rng.uniform(1.0, 5.0, n_particles)
    position[:200] += 40.0  # an outlying fast stream that must not count
    velocity[:200] += 900.0
    centre = np.zeros(3)
    frame = find_frame_velocity(Chunked(position, mass, velocity), centre * u.kpc, radius=10 * u.kpc)
    inside = np.linalg.norm(position - centre, axis=1) <= 10.0
    expected = np.average(velocity[inside], axis=0, weights=mass[inside])  # numpy, mass-weighted
    assert_quantity_allclose(frame, expected * u.km / u.s, rtol=1e-12)
    assert frame.unit == u.km / u.s


def test_frame_velocity_of_empty_sphere_is_refused():
    with pytest.raises(EmptyFieldError, match="the frame radius must hold gas of positive mass"):
        find_frame_velocity(Chunked(np.full((5, 3), 50.0), np.ones(5)), [0, 0, 0] * u.kpc, radius=5 * u.kpc)


def tilted_rotating_disc(rng, axis, n_particles=3000):
    """A thin disc perpendicular to ``axis`` in solid-body-like flat rotation, angular momentum along ``axis``."""
    axis = axis / np.linalg.norm(axis)
    first = np.cross(axis, [1.0, 0.0, 0.0])
    first /= np.linalg.norm(first)
    second = np.cross(axis, first)
    radius = rng.uniform(0.5, 10.0, n_particles)
    phase = rng.uniform(0, 2 * np.pi, n_particles)
    radial = np.cos(phase)[:, None] * first + np.sin(phase)[:, None] * second
    position = radius[:, None] * radial + rng.normal(0, 0.05, (n_particles, 1)) * axis
    velocity = 180.0 * np.cross(axis, radial) + rng.normal(0, 10.0, (n_particles, 3))
    return position, velocity


def test_angular_momentum_axis_of_a_tilted_disc(rng):
    axis = np.array([np.sin(0.7) * np.cos(2.1), np.sin(0.7) * np.sin(2.1), np.cos(0.7)])
    position, velocity = tilted_rotating_disc(rng, axis)
    centre, frame = np.array([5.0, -3.0, 8.0]), np.array([60.0, 10.0, -40.0])
    positions = Chunked(position + centre, np.full(len(position), 1e5), velocity + frame)
    found = angular_momentum_axis(positions, centre * u.kpc, frame * u.km / u.s, radius=20 * u.kpc)
    assert np.linalg.norm(found) == pytest.approx(1.0, rel=1e-14)
    # random motions of 10 km/s against 180 km/s rotation over 3000 particles tilt L by < 0.01 rad
    assert np.degrees(np.arccos(np.clip(found @ axis, -1, 1))) < 0.6
    # reversing the rotation reverses the axis
    reversed_positions = Chunked(position + centre, np.full(len(position), 1e5), -velocity + frame)
    reversed_axis = angular_momentum_axis(reversed_positions, centre * u.kpc, frame * u.km / u.s,
                                          radius=20 * u.kpc)
    assert reversed_axis @ axis < -0.999


def test_angular_momentum_axis_matches_a_direct_sum(rng):
    position = rng.normal(size=(500, 3))
    velocity = rng.normal(size=(500, 3)) + np.cross([0.0, 0.3, 1.0], position) * 20.0
    mass = rng.uniform(1.0, 2.0, 500)
    found = angular_momentum_axis(Chunked(position, mass, velocity, chunk=37), [0, 0, 0] * u.kpc,
                                  [0, 0, 0] * u.km / u.s, radius=1.5 * u.kpc)
    inside = np.linalg.norm(position, axis=1) <= 1.5
    total = np.sum(mass[inside, None] * np.cross(position[inside], velocity[inside]), axis=0)
    np.testing.assert_allclose(found, total / np.linalg.norm(total), rtol=1e-12)


def test_angular_momentum_axis_refuses_empty_or_non_rotating_gas(rng):
    with pytest.raises(EmptyFieldError, match="the radius for the spin axis must hold gas"):
        angular_momentum_axis(Chunked(np.full((5, 3), 50.0), np.ones(5)), [0, 0, 0] * u.kpc,
                              [0, 0, 0] * u.km / u.s, radius=5 * u.kpc)
    position = rng.normal(size=(100, 3))
    radial_flow = 50.0 * position  # purely radial motion carries no angular momentum
    with pytest.raises(SnapshotError, match="must rotate to define a spin axis"):
        angular_momentum_axis(Chunked(position, np.ones(100), radial_flow), [0, 0, 0] * u.kpc,
                              [0, 0, 0] * u.km / u.s, radius=50 * u.kpc)


@pytest.mark.parametrize(("frame", "radius", "error", "match"), [
    ([0, 0, 0] * u.kpc, 5 * u.kpc, u.UnitsError, "'frame_velocity' must be convertible"),
    ([0, 0, 0] * u.km / u.s, 5.0, u.UnitsError, "'radius' must be a Quantity"),
    ([0, 0, 0] * u.km / u.s, 0 * u.kpc, ValueError, "'radius' must be a positive length"),
])
def test_angular_momentum_axis_refuses_bad_arguments(frame, radius, error, match):
    with pytest.raises(error, match=match):
        angular_momentum_axis(Chunked(np.zeros((5, 3)), np.ones(5)), [0, 0, 0] * u.kpc, frame, radius=radius)


def test_empty_chunks_are_skipped(rng):
    position = rng.normal(size=(300, 3)) + 2.0
    mass = rng.uniform(1.0, 2.0, 300)

    def positions():
        yield np.zeros((0, 3)), np.zeros(0), np.zeros((0, 3))
        yield position, mass, np.zeros_like(position)
        yield np.zeros((0, 3)), np.zeros(0), np.zeros((0, 3))

    for method in ("centre_of_mass", "shrinking_sphere"):
        centre = find_centre(positions, method=method)
        np.testing.assert_allclose(centre.to_value(u.kpc), np.average(position, axis=0, weights=mass), rtol=1e-12)
