"""The demo galaxy generator against its own analytic model (demo data, not physics)."""

import importlib.util
from pathlib import Path

import astropy.units as u
import h5py
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy.spatial import cKDTree

from pipeline.errors import OutputError
from pipeline.scenario import DISC_GALAXY_PARAMETERS as P
from pipeline.scenario import _draw_particles, make_disc_galaxy

N_PARTICLES = 20_000
SCRIPT = Path(__file__).resolve().parents[2] / "demo" / "make_disc_galaxy.py"


def _read(path):
    """Return the datasets of group 'gas' and the root attributes of a snapshot."""
    with h5py.File(path, "r") as handle:
        datasets = {key: handle["gas"][key][...] for key in handle["gas"]}
        dtypes = {key: handle["gas"][key].dtype for key in handle["gas"]}
        attributes = dict(handle.attrs)
    return datasets, dtypes, attributes


def _configured_axis():
    """Spin axis from the configured angles: polar angle from +z, azimuth from +x to +y."""
    inclination = P.spin_inclination.to_value(u.rad)
    azimuth = P.spin_azimuth.to_value(u.rad)
    return np.array([np.sin(inclination) * np.cos(azimuth),
                     np.sin(inclination) * np.sin(azimuth), np.cos(inclination)])


def _disc_coordinates(fields):
    """Cylindrical radius, height and tangential velocity about the configured axis (kpc, km/s)."""
    axis = _configured_axis()
    offset = fields["position"] - P.bulk_offset.to_value(u.kpc)
    velocity = fields["velocity"] - P.bulk_velocity.to_value(u.km / u.s)
    height = offset @ axis
    in_plane = offset - np.outer(height, axis)
    radius = np.linalg.norm(in_plane, axis=1)
    tangent = np.cross(axis, in_plane) / radius[:, None]
    return radius, height, np.sum(velocity * tangent, axis=1), velocity @ axis


def _model_velocity(radius_kpc):
    """The configured rotation curve v_flat (1 - exp(-R / R_t)), in km/s."""
    return P.flat_velocity.to_value(u.km / u.s) * (1.0 - np.exp(-radius_kpc / P.turnover_radius.to_value(u.kpc)))


@pytest.fixture
def sample(rng):
    """A 20 000-particle draw: snapshot fields and the clump index of each particle."""
    return _draw_particles(N_PARTICLES, rng)


def test_file_has_the_project_layout(tmp_path):
    path = make_disc_galaxy(tmp_path / "velmora.h5", n_particles=N_PARTICLES, seed=3)
    datasets, dtypes, attributes = _read(path)
    shapes = {"position": (N_PARTICLES, 3), "velocity": (N_PARTICLES, 3), "mass": (N_PARTICLES,),
              "smoothing_length": (N_PARTICLES,), "temperature": (N_PARTICLES,),
              "neutral_fraction": (N_PARTICLES,)}
    assert {key: value.shape for key, value in datasets.items()} == shapes
    assert all(dtype == np.float64 for dtype in dtypes.values())
    assert all(np.all(np.isfinite(values)) for values in datasets.values())
    assert attributes["little_h"] == 0.7
    assert attributes["scale_factor"] == 1.0
    assert attributes["scenario"] == "velmora_disc"
    assert attributes["seed"] == 3
    assert attributes["n_particles"] == N_PARTICLES
    assert_allclose(attributes["spin_axis"], _configured_axis(), rtol=0, atol=1e-12)
    assert np.all(datasets["temperature"] > 0.0)
    assert np.all((datasets["neutral_fraction"] > 0.0) & (datasets["neutral_fraction"] <= 1.0))
    h_kpc = datasets["smoothing_length"]
    assert h_kpc.min() >= P.h_min.to_value(u.kpc) and h_kpc.max() <= P.h_max.to_value(u.kpc)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["velmora.h5"]  # no temporary left


def test_same_seed_gives_identical_contents(tmp_path):
    first, _, first_attributes = _read(make_disc_galaxy(tmp_path / "a.h5", n_particles=5000, seed=11))
    second, _, second_attributes = _read(make_disc_galaxy(tmp_path / "b.h5", n_particles=5000, seed=11))
    other, _, _ = _read(make_disc_galaxy(tmp_path / "c.h5", n_particles=5000, seed=12))
    for key, values in first.items():
        np.testing.assert_array_equal(values, second[key])
    assert first_attributes.keys() == second_attributes.keys()
    for key, value in first_attributes.items():
        np.testing.assert_array_equal(value, second_attributes[key])
    assert not np.array_equal(first["position"], other["position"])


def test_total_mass_equals_the_parameter(sample):
    fields, _ = sample
    assert_quantity_allclose(fields["mass"].sum() * u.Msun, P.gas_mass, rtol=1e-12)
    assert np.all(fields["mass"] == fields["mass"][0])


def test_each_clump_holds_the_configured_mass(sample):
    fields, clump_index = sample
    for clump in range(len(P.clump_radii)):
        mass = fields["mass"][clump_index == clump].sum() * u.Msun
        # Rounding to whole particles: within one particle mass of the parameter.
        assert abs(mass - P.clump_mass) <= fields["mass"][0] * u.Msun


def test_surface_density_is_exponential(sample):
    fields, clump_index = sample
    radius, _, _, _ = _disc_coordinates(fields)
    radius = radius[clump_index < 0]
    edges = np.arange(0.5, 15.01, 0.5)
    counts, _ = np.histogram(radius, bins=edges)
    surface_density = counts / (np.pi * np.diff(edges**2))
    centres = 0.5 * (edges[1:] + edges[:-1])
    # Poisson-weighted least squares of ln(Sigma) = a - R / R_d (analytic exponential disc).
    slope, _ = np.polyfit(centres, np.log(surface_density), 1, w=np.sqrt(counts))
    assert_quantity_allclose(-1.0 / slope * u.kpc, P.scale_length, rtol=0.03)
    assert radius.max() <= P.truncation_radius.to_value(u.kpc)


def test_vertical_profile_is_sech_squared(sample):
    fields, clump_index = sample
    radius, height, _, _ = _disc_coordinates(fields)
    inner_disc = (clump_index < 0) & (radius < P.warp_radius.to_value(u.kpc))
    # For rho ∝ sech^2(z / z_0), P(|z| < Z) = tanh(Z / z_0), so the median |z| is z_0 artanh(1/2).
    median = np.median(np.abs(height[inner_disc])) * u.kpc
    assert_quantity_allclose(median, P.scale_height * np.arctanh(0.5), rtol=0.03)


def test_rotation_curve_and_dispersion_follow_the_model(sample):
    fields, clump_index = sample
    radius, _, v_tangential, v_vertical = _disc_coordinates(fields)
    inner_disc = (clump_index < 0) & (radius < P.warp_radius.to_value(u.kpc))
    radius, v_tangential, v_vertical = radius[inner_disc], v_tangential[inner_disc], v_vertical[inner_disc]
    model = _model_velocity(radius)
    bins = np.digitize(radius, np.arange(0.5, 10.5, 1.0))
    for index in range(1, 11):
        in_bin = bins == index
        assert in_bin.sum() > 300
        # Mean over the same particles of the model, so curvature within a bin does not bias it.
        assert_quantity_allclose(v_tangential[in_bin].mean() * u.km / u.s,
                                 model[in_bin].mean() * u.km / u.s, atol=1.5 * u.km / u.s)
    assert_quantity_allclose(np.std(v_tangential - model) * u.km / u.s, P.velocity_dispersion, rtol=0.05)
    assert_quantity_allclose(np.std(v_vertical) * u.km / u.s, P.velocity_dispersion, rtol=0.05)


def test_angular_momentum_points_along_the_configured_axis(sample):
    fields, _ = sample
    offset = fields["position"] - P.bulk_offset.to_value(u.kpc)
    velocity = fields["velocity"] - P.bulk_velocity.to_value(u.km / u.s)
    inside = np.linalg.norm(offset, axis=1) < P.warp_radius.to_value(u.kpc)  # the unwarped disc
    momentum = np.sum(fields["mass"][inside, None] * np.cross(offset[inside], velocity[inside]), axis=0)
    direction = momentum / np.linalg.norm(momentum)
    angle = np.arccos(np.clip(direction @ _configured_axis(), -1.0, 1.0)) * u.rad
    assert angle < 0.2 * u.deg
    assert_allclose(P.spin_axis, _configured_axis(), rtol=0, atol=1e-12)


def test_outer_disc_is_tilted_by_the_warp(sample):
    fields, clump_index = sample
    radius, _, _, _ = _disc_coordinates(fields)
    warp_kpc, edge_kpc = P.warp_radius.to_value(u.kpc), P.truncation_radius.to_value(u.kpc)
    ring = (clump_index < 0) & (radius > edge_kpc - 2.0)
    offset = fields["position"][ring] - P.bulk_offset.to_value(u.kpc)
    # Normal of the best-fitting plane through the centre: the smallest principal axis.
    _, vectors = np.linalg.eigh(offset.T @ offset)
    normal = vectors[:, 0] * np.sign(vectors[:, 0] @ _configured_axis())
    tilt = np.arccos(normal @ _configured_axis()) * u.rad
    # Each ring is tilted by theta_max ((R - R_w) / (R_edge - R_w))^2; the second moments weight
    # the rings by R^2.
    ring_tilt = P.warp_max_tilt * ((radius[ring] - warp_kpc) / (edge_kpc - warp_kpc)) ** 2
    expected = np.average(ring_tilt, weights=radius[ring] ** 2)
    assert_quantity_allclose(tilt, expected, atol=0.5 * u.deg)


def test_clumps_are_colder_more_neutral_and_smaller(sample):
    fields, clump_index = sample
    radius, height, _, _ = _disc_coordinates(fields)
    for clump, clump_radius in enumerate(P.clump_radii.to_value(u.kpc)):
        member = clump_index == clump
        same_ring = (clump_index < 0) & (np.abs(radius - clump_radius) < 0.5) & (np.abs(height) < 0.1)
        assert np.median(fields["temperature"][member]) < 0.5 * np.median(fields["temperature"][same_ring])
        assert np.all(fields["neutral_fraction"][member] > fields["neutral_fraction"][same_ring].max())
        assert np.median(fields["smoothing_length"][member]) < 0.75 * np.median(
            fields["smoothing_length"][same_ring])


def test_smoothing_lengths_hold_the_expected_neighbour_number(sample, rng):
    fields, clump_index = sample
    radius, height, _, _ = _disc_coordinates(fields)
    h_kpc = fields["smoothing_length"]
    centroids = np.array([fields["position"][clump_index == k].mean(axis=0)
                          for k in range(len(P.clump_radii))])
    far_from_clumps = np.min(np.linalg.norm(fields["position"][:, None] - centroids, axis=2), axis=1) > 2.0
    chosen = ((clump_index < 0) & far_from_clumps & (radius > 3.0) & (radius < 8.0)
              & (np.abs(height) < 0.03))
    assert chosen.sum() > 200
    # Expected neighbours within the support 2h: the uniform-density number (4 pi / 3)(2 eta)^3
    # = 57.906 for eta = 1.2 (check-values SK-07, Price 2012), scaled by the mean over the ball of
    # the analytic density rho ∝ exp(-R / R_d) sech^2(z / z_0) relative to its value at the centre.
    assert_allclose(4.0 * np.pi / 3.0 * (2.0 * P.smoothing_eta) ** 3, 57.906, rtol=1e-5)
    directions = rng.normal(size=(4000, 3))
    ball = directions / np.linalg.norm(directions, axis=1)[:, None] * np.cbrt(rng.uniform(size=4000))[:, None]
    scale_length, scale_height = P.scale_length.to_value(u.kpc), P.scale_height.to_value(u.kpc)
    support = 2.0 * h_kpc[chosen, None]
    ball_radius = np.hypot(radius[chosen, None] + support * ball[:, 0], support * ball[:, 1])
    ball_height = height[chosen, None] + support * ball[:, 2]
    ratio = np.mean(np.exp(-(ball_radius - radius[chosen, None]) / scale_length)
                    * (np.cosh(height[chosen, None] / scale_height) / np.cosh(ball_height / scale_height)) ** 2,
                    axis=1)
    expected = 4.0 * np.pi / 3.0 * (2.0 * P.smoothing_eta) ** 3 * ratio
    tree = cKDTree(fields["position"])
    found = tree.query_ball_point(fields["position"][chosen], r=2.0 * h_kpc[chosen], return_length=True) - 1
    assert_allclose(found.mean(), expected.mean(), rtol=0.05)


def test_refuses_to_overwrite_unless_asked(tmp_path):
    path = make_disc_galaxy(tmp_path / "velmora.h5", n_particles=2000, seed=1)
    before = path.read_bytes()
    with pytest.raises(OutputError, match=r"velmora\.h5: file exists; pass overwrite=True"):
        make_disc_galaxy(path, n_particles=2000, seed=2)
    assert path.read_bytes() == before
    make_disc_galaxy(path, n_particles=2000, seed=2, overwrite=True)
    assert _read(path)[2]["seed"] == 2


def test_missing_folder_is_an_output_error(tmp_path):
    message = r"missing.*velmora\.h5: cannot write the snapshot \(No such file or directory\)$"
    with pytest.raises(OutputError, match=message):
        make_disc_galaxy(tmp_path / "missing" / "velmora.h5", n_particles=2000)
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(("arguments", "message"), [
    ({"n_particles": 999}, r"'n_particles' must be an integer of at least 1000.*got 999"),
    ({"n_particles": 2000.0}, r"'n_particles' must be an integer.*got 2000\.0"),
    ({"n_particles": True}, r"'n_particles' must be an integer.*got True"),
    ({"seed": -1}, r"'seed' must be a non-negative integer.*got -1"),
    ({"seed": None}, r"'seed' must be a non-negative integer.*got None"),
])
def test_refuses_bad_arguments(tmp_path, arguments, message):
    with pytest.raises(ValueError, match=message):
        make_disc_galaxy(tmp_path / "velmora.h5", **arguments)
    assert list(tmp_path.iterdir()) == []


def test_summary_lists_every_parameter_with_its_unit():
    lines = P.summary().splitlines()
    assert len(lines) == len(P.__dataclass_fields__)
    assert lines[1].split()[:3] == ["gas_mass", "1e+10", "solMass"]
    assert any(line.split()[:5] == ["bulk_offset", "(2,", "-1,", "0.5)", "kpc"] for line in lines)


def _script():
    """Import demo/make_disc_galaxy.py (a script, not a package module)."""
    spec = importlib.util.spec_from_file_location("make_disc_galaxy", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_script_writes_and_refuses(tmp_path, capsys):
    script = _script()
    path = tmp_path / "velmora.h5"
    assert script.main([str(path), "--n-particles", "2000", "--seed", "5"]) == 0
    assert _read(path)[2]["seed"] == 5
    assert f"wrote {path}: 2000 particles, seed 5" in capsys.readouterr().out
    with pytest.raises(SystemExit) as exit_info:
        script.main([str(path), "--n-particles", "2000"])
    assert exit_info.value.code == 2
    assert "error: " in capsys.readouterr().err
    assert script.main([str(path), "--n-particles", "2000", "--overwrite"]) == 0
    assert _read(path)[2]["seed"] == 2026
