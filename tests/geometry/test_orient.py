"""Tests for pipeline.geometry._orient: viewing angles and the observer frame.

Conventions checked from their geometric meaning, not from the formulas: the
observer frame is x east, y north, z away; east is to the LEFT on the sky as
seen (FITS WCS Paper II, Calabretta & Greisen 2002: RA increases to the left),
so "counter-clockwise as seen" carries gas at north towards east.
"""

import astropy.units as u
import numpy as np
import pytest

from pipeline.geometry import ViewSpec, orient_chunk, rotation_for_view
from pipeline.particles import ParticleChunk

AXES = [np.array(axis, dtype=float) for axis in
        ([1, 0, 0], [-1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1])]


def rotating_ring(spin, *, n_particles=360, radius_kpc=8.0, speed_kms=200.0):
    """A ring in the plane perpendicular to ``spin``, turning with angular momentum along ``spin``."""
    spin = np.asarray(spin, dtype=float) / np.linalg.norm(spin)
    first = np.cross(spin, [1.0, 0.0, 0.0] if abs(spin[0]) < 0.9 else [0.0, 1.0, 0.0])
    first /= np.linalg.norm(first)
    second = np.cross(spin, first)
    phase = np.linspace(0.0, 2 * np.pi, n_particles, endpoint=False)[:, None]
    radial = np.cos(phase) * first + np.sin(phase) * second
    tangential = np.cross(spin, radial)  # spin x r: turning with L along spin
    return radius_kpc * radial, speed_kms * tangential


def chunk_of(position_kpc, velocity_kms):
    """A ParticleChunk with the given positions and velocities and plain other fields."""
    n_particles = position_kpc.shape[0]
    return ParticleChunk(position_kpc=position_kpc, velocity_kms=velocity_kms,
                         mass_msun=np.full(n_particles, 1.0e5), h_kpc=np.full(n_particles, 0.5),
                         temperature_k=np.full(n_particles, 8000.0),
                         neutral_fraction=np.full(n_particles, 0.9),
                         hydrogen_fraction=np.full(n_particles, 0.76))


def observe(view, position_kpc, velocity_kms, spin=None):
    """Observer-frame positions and velocities of a ring seen with ``view``."""
    rotation = rotation_for_view(view, spin_axis=spin)
    oriented = orient_chunk(chunk_of(position_kpc, velocity_kms), np.zeros(3), np.zeros(3), rotation)
    return oriented.position_kpc, oriented.velocity_kms


def view(inclination_deg, position_angle_deg, orientation="simulation_axes"):
    return ViewSpec(inclination=inclination_deg * u.deg, position_angle=position_angle_deg * u.deg,
                    orientation=orientation)


def test_rotations_are_proper_and_orthonormal_for_random_spins_and_angles(rng):
    for _ in range(50):
        spin = rng.normal(size=3)
        rotation = rotation_for_view(view(rng.uniform(0, 180), rng.uniform(-360, 360), "angular_momentum"),
                                     spin_axis=spin)
        np.testing.assert_allclose(rotation @ rotation.T, np.eye(3), rtol=0, atol=1e-13)
        assert np.linalg.det(rotation) == pytest.approx(1.0, abs=1e-13)


@pytest.mark.parametrize("spin", AXES, ids=["+x", "-x", "+y", "-y", "+z", "-z"])
def test_spin_along_a_simulation_axis_is_handled(spin):
    rotation = rotation_for_view(view(40, 110, "angular_momentum"), spin_axis=spin)
    np.testing.assert_allclose(rotation @ rotation.T, np.eye(3), rtol=0, atol=1e-14)
    position, velocity = observe(view(40, 110, "angular_momentum"), *rotating_ring(spin), spin=spin)
    # the spin must come out inclined by 40 deg from the direction to the observer (-z)
    assert -(rotation @ spin)[2] == pytest.approx(np.cos(np.radians(40)), abs=1e-13)
    assert np.max(velocity[:, 2]) == pytest.approx(200 * np.sin(np.radians(40)), rel=1e-3)


def test_rotation_is_deterministic_and_matches_simulation_axes_for_a_z_spin():
    a = rotation_for_view(view(55, 20, "angular_momentum"), spin_axis=[0, 0, 3.0])
    b = rotation_for_view(view(55, 20, "simulation_axes"))
    np.testing.assert_array_equal(a, rotation_for_view(view(55, 20, "angular_momentum"), spin_axis=[0, 0, 3.0]))
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-15)


@pytest.mark.parametrize("position_angle", [0.0, 35.0, 200.0])
def test_face_on_ring_has_no_line_of_sight_velocity_and_turns_counter_clockwise(position_angle):
    position, velocity = observe(view(0, position_angle), *rotating_ring([0, 0, 1]))
    np.testing.assert_allclose(velocity[:, 2], 0.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(position[:, 2], 0.0, rtol=0, atol=1e-12)
    # counter-clockwise as seen, with east on the left: the northernmost gas moves east (+x)
    north = np.argmax(position[:, 1])
    assert velocity[north, 0] == pytest.approx(200.0, rel=1e-3)


def test_inclination_180_is_face_on_turning_clockwise():
    position, velocity = observe(view(180, 0), *rotating_ring([0, 0, 1]))
    np.testing.assert_allclose(velocity[:, 2], 0.0, rtol=0, atol=1e-12)
    assert velocity[np.argmax(position[:, 1]), 0] == pytest.approx(-200.0, rel=1e-3)


@pytest.mark.parametrize("position_angle", [0.0, 35.0, 135.0, 250.0])
def test_edge_on_ring_lies_along_the_major_axis_with_full_rotation_speed(position_angle):
    position, velocity = observe(view(90, position_angle), *rotating_ring([0, 0, 1]))
    minor = np.array([np.cos(np.radians(position_angle)), -np.sin(np.radians(position_angle))])
    np.testing.assert_allclose(position[:, :2] @ minor, 0.0, rtol=0, atol=1e-12)  # a line on the sky
    assert np.max(np.abs(velocity[:, 2])) == pytest.approx(200.0, rel=1e-4)


@pytest.mark.parametrize(("inclination", "position_angle"),
                         [(30.0, 0.0), (60.0, 35.0), (75.0, 160.0), (60.0, 290.0), (120.0, 35.0)])
def test_receding_half_of_the_major_axis_sits_at_the_position_angle(inclination, position_angle):
    position, velocity = observe(view(inclination, position_angle), *rotating_ring([0, 0, 1]))
    fastest = np.argmax(velocity[:, 2])
    # position angle of a sky offset, east of north: atan2(east, north)
    found = np.degrees(np.arctan2(position[fastest, 0], position[fastest, 1]))
    assert (found - position_angle + 180) % 360 - 180 == pytest.approx(0.0, abs=0.5)  # ring step 1 deg
    assert velocity[fastest, 2] == pytest.approx(200 * np.sin(np.radians(inclination)), rel=1e-4)


@pytest.mark.parametrize("inclination", [20.0, 50.0, 80.0])
def test_inclined_ring_appears_as_an_ellipse_of_axis_ratio_cos_i(inclination):
    position, _ = observe(view(inclination, 70), *rotating_ring([0, 0, 1], n_particles=3600))
    angle = np.radians(70)
    major = position[:, :2] @ np.array([np.sin(angle), np.cos(angle)])
    minor = position[:, :2] @ np.array([np.cos(angle), -np.sin(angle)])
    # projection of a circle of radius r inclined by i: semi-axes r and r cos i
    assert np.max(major) == pytest.approx(8.0, rel=1e-5)
    assert np.max(minor) == pytest.approx(8.0 * np.cos(np.radians(inclination)), rel=1e-5)


def test_tilted_disc_seen_through_its_angular_momentum_follows_the_same_conventions(rng):
    spin = rng.normal(size=3)
    spin /= np.linalg.norm(spin)
    position, velocity = observe(view(60, 35, "angular_momentum"), *rotating_ring(spin), spin=spin)
    fastest = np.argmax(velocity[:, 2])
    assert np.degrees(np.arctan2(position[fastest, 0], position[fastest, 1])) == pytest.approx(35.0, abs=0.5)
    assert velocity[fastest, 2] == pytest.approx(200 * np.sin(np.radians(60)), rel=1e-4)


def test_explicit_matrix_is_used_as_given():
    matrix = np.array([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    spec = ViewSpec(orientation="explicit", rotation_matrix=matrix)
    np.testing.assert_array_equal(rotation_for_view(spec), matrix)
    oriented = orient_chunk(chunk_of(np.array([[1.0, 2.0, 3.0]]), np.array([[0.0, 0.0, 5.0]])),
                            np.zeros(3), np.zeros(3), rotation_for_view(spec))
    np.testing.assert_array_equal(oriented.position_kpc, [[3.0, 1.0, 2.0]])  # east = sim z, ...
    np.testing.assert_array_equal(oriented.velocity_kms, [[5.0, 0.0, 0.0]])


def test_orient_chunk_shifts_subtracts_frame_rotates_and_keeps_other_fields(rng):
    position = rng.normal(size=(20, 3))
    velocity = rng.normal(size=(20, 3))
    chunk = chunk_of(position, velocity)
    rotation = rotation_for_view(view(33, 71, "angular_momentum"), spin_axis=rng.normal(size=3))
    centre, frame = np.array([1.0, -2.0, 0.5]), np.array([10.0, 20.0, -30.0])
    oriented = orient_chunk(chunk, centre, frame, rotation)
    for i in range(20):
        np.testing.assert_allclose(oriented.position_kpc[i], rotation @ (position[i] - centre), atol=1e-14)
        np.testing.assert_allclose(oriented.velocity_kms[i], rotation @ (velocity[i] - frame), atol=1e-13)
    assert oriented.mass_msun is chunk.mass_msun and oriented.h_kpc is chunk.h_kpc
    # a rotation keeps distances from the centre
    np.testing.assert_allclose(np.linalg.norm(oriented.position_kpc, axis=1),
                               np.linalg.norm(position - centre, axis=1), rtol=1e-13)


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"inclination": 60 * u.deg, "position_angle": 0 * u.deg, "orientation": "sideways"},
     "'orientation' must be one of"),
    ({"inclination": 181 * u.deg, "position_angle": 0 * u.deg}, r"'inclination' must lie in \[0, 180\] deg"),
    ({"inclination": -1 * u.deg, "position_angle": 0 * u.deg}, r"'inclination' must lie in \[0, 180\] deg"),
    ({"inclination": 60.0, "position_angle": 0 * u.deg}, "'inclination' must be an angle"),
    ({"inclination": 60 * u.deg}, "'position_angle' must be an angle"),
    ({"inclination": 60 * u.deg, "position_angle": 0 * u.deg, "rotation_matrix": np.eye(3)},
     "'rotation_matrix' is used only when orientation is 'explicit'"),
    ({"orientation": "explicit"}, "'rotation_matrix' must be given"),
    ({"orientation": "explicit", "rotation_matrix": np.eye(2)}, "'rotation_matrix' must be a finite 3 x 3"),
    ({"orientation": "explicit", "rotation_matrix": 2 * np.eye(3)}, "'rotation_matrix' must be orthonormal"),
    ({"orientation": "explicit", "rotation_matrix": np.diag([1.0, 1.0, -1.0])}, "determinant \\+1"),
    ({"orientation": "explicit", "rotation_matrix": np.eye(3), "inclination": 5.0},
     "'inclination' must be an angle"),
])
def test_view_spec_refuses_bad_values(kwargs, match):
    with pytest.raises(ValueError, match=match):
        ViewSpec(**kwargs)


@pytest.mark.parametrize(("spec", "spin", "match"), [
    (view(60, 0, "angular_momentum"), None, "'spin_axis' must be given"),
    (view(60, 0, "angular_momentum"), [0.0, 0.0, 0.0], "'spin_axis' must be a finite non-zero 3-vector"),
    (view(60, 0, "angular_momentum"), [1.0, 0.0], "'spin_axis' must be a finite non-zero 3-vector"),
    (view(60, 0, "simulation_axes"), [0.0, 0.0, 1.0], "'spin_axis' is used only with"),
    (ViewSpec(orientation="explicit", rotation_matrix=np.eye(3)), [0.0, 0.0, 1.0], "'spin_axis' is used only with"),
])
def test_rotation_for_view_refuses_bad_spin_axes(spec, spin, match):
    with pytest.raises(ValueError, match=match):
        rotation_for_view(spec, spin_axis=spin)


@pytest.mark.parametrize(("centre", "frame", "rotation", "match"), [
    (np.zeros(2), np.zeros(3), np.eye(3), "'centre_kpc' must have shape"),
    (np.zeros(3), np.zeros((1, 3)), np.eye(3), "'frame_velocity_kms' must have shape"),
    (np.zeros(3), np.zeros(3), np.eye(2), "'rotation' must have shape"),
])
def test_orient_chunk_refuses_bad_shapes(centre, frame, rotation, match):
    with pytest.raises(ValueError, match=match):
        orient_chunk(chunk_of(np.zeros((2, 3)), np.zeros((2, 3))), centre, frame, rotation)


def test_explicit_matrix_is_read_only_and_copied():
    matrix = np.eye(3)
    spec = ViewSpec(orientation="explicit", rotation_matrix=matrix)
    matrix[0, 0] = 5.0
    assert spec.rotation_matrix[0, 0] == 1.0
    with pytest.raises(ValueError, match="read-only"):
        spec.rotation_matrix[0, 0] = 2.0
