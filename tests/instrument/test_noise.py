"""Radiometer noise levels and thermal noise added to Jy/beam cubes."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from radio_beam import Beam

from pipeline.cube import Cube
from pipeline.instrument import JY_PER_PIXEL, BeamSpec, add_thermal_noise, interferometer_rms, single_dish_rms

FWHM_PER_SIGMA = np.sqrt(8 * np.log(2))  # check-values BM-01
JY_PER_BEAM = u.Jy / u.beam
DISH = dict(system_temperature=25 * u.K, dish_diameter=15 * u.m, aperture_efficiency=0.7, n_polarisations=2)
ARRAY = dict(DISH, n_antennas=64, correlator_efficiency=1.0)


def _empty_cube(make_wcs, n_chan, n_y, n_x, beam, *, pixel_arcsec=5.0):
    return Cube(np.zeros((n_chan, n_y, n_x)), make_wcs(n_x, n_y, n_chan, pixel_arcsec=pixel_arcsec),
                JY_PER_BEAM, beam=beam)


def _expected_correlation(beam, pixel_arcsec, lag_x, lag_y):
    """Autocorrelation of white noise smoothed by a Gaussian: exp(-d^T Sigma^-1 d / 4) (derived here).

    The major axis points along (east, north) = (sin PA, cos PA); with east to the left the
    pixel direction is (-sin PA, cos PA) (check-values FW-09 for the PA convention).
    """
    angle = beam.position_angle.to_value(u.rad)
    sigma_major = beam.major.to_value(u.arcsec) / FWHM_PER_SIGMA / pixel_arcsec
    sigma_minor = beam.minor.to_value(u.arcsec) / FWHM_PER_SIGMA / pixel_arcsec
    along = -lag_x * np.sin(angle) + lag_y * np.cos(angle)
    across = lag_x * np.cos(angle) + lag_y * np.sin(angle)
    return np.exp(-0.25 * (along**2 / sigma_major**2 + across**2 / sigma_minor**2))


def _lag_correlation(noise, lag_x, lag_y):
    """Sample correlation of a (n_chan, n_y, n_x) field with itself shifted by (lag_x, lag_y), lag_y >= 0."""
    n_y, n_x = noise.shape[1:]
    x_a = slice(0, n_x - lag_x) if lag_x >= 0 else slice(-lag_x, n_x)
    x_b = slice(lag_x, n_x) if lag_x >= 0 else slice(0, n_x + lag_x)
    a, b = noise[:, :n_y - lag_y, x_a], noise[:, lag_y:, x_b]
    return float(np.mean(a * b) / np.sqrt(np.mean(a * a) * np.mean(b * b)))


# --- radiometer functions ----------------------------------------------------------------------------


def test_radiometer_levels_are_in_jy_per_beam():
    single = single_dish_rms(**DISH, channel_width=10 * u.kHz, integration_time=60 * u.s)
    array = interferometer_rms(**ARRAY, channel_width=10 * u.kHz, integration_time=4 * u.h)
    assert single.unit == JY_PER_BEAM and array.unit == JY_PER_BEAM


def test_radiometer_accepts_arrays_of_times():
    times = [1, 4, 16] * u.h
    rms = interferometer_rms(**ARRAY, channel_width=10 * u.kHz, integration_time=times)
    assert_quantity_allclose(rms[0] / rms, [1.0, 2.0, 4.0], rtol=1e-12)


@given(time_factor=st.floats(0.01, 100.0), width_factor=st.floats(0.01, 100.0))
def test_noise_scales_as_inverse_root_of_time_times_bandwidth(time_factor, width_factor):
    # Radiometer equation (check-values RS-01 to RS-03): sigma proportional to 1 / sqrt(dnu t).
    base = dict(channel_width=10 * u.kHz, integration_time=4 * u.h)
    scaled = dict(channel_width=10 * width_factor * u.kHz, integration_time=4 * time_factor * u.h)
    ratio = np.sqrt(time_factor * width_factor)
    assert_quantity_allclose(interferometer_rms(**ARRAY, **scaled) * ratio, interferometer_rms(**ARRAY, **base),
                             rtol=1e-12)
    assert_quantity_allclose(single_dish_rms(**DISH, **scaled) * ratio, single_dish_rms(**DISH, **base),
                             rtol=1e-12)


@pytest.mark.parametrize(("changes", "error", "match"), [
    ({"system_temperature": -25 * u.K}, ValueError, "'system_temperature' must be finite and positive"),
    ({"dish_diameter": 15}, u.UnitsError, "'dish_diameter'"),
    ({"aperture_efficiency": 1.2}, ValueError, r"'aperture_efficiency' must be a number in \(0, 1\]"),
    ({"aperture_efficiency": True}, ValueError, "'aperture_efficiency' must be a number"),
    ({"n_polarisations": 3}, ValueError, "'n_polarisations' must be an integer from 1 to 2"),
    ({"n_polarisations": 2.0}, ValueError, "'n_polarisations' must be an integer"),
    ({"n_antennas": 1}, ValueError, "'n_antennas' must be an integer >= 2"),
    ({"correlator_efficiency": 0.0}, ValueError, "'correlator_efficiency' must be a number"),
    ({"channel_width": 2 * u.km / u.s}, u.UnitsError, "'channel_width' must be convertible to Hz"),
    ({"integration_time": 0 * u.s}, ValueError, "'integration_time' must be finite and positive"),
])
def test_interferometer_rms_refuses_bad_values(changes, error, match):
    values = dict(ARRAY, channel_width=10 * u.kHz, integration_time=4 * u.h)
    values.update(changes)
    with pytest.raises(error, match=match):
        interferometer_rms(**values)


def test_single_dish_rms_refuses_a_velocity_channel_width():
    with pytest.raises(u.UnitsError, match="'channel_width' must be convertible to Hz"):
        single_dish_rms(**DISH, channel_width=2 * u.km / u.s, integration_time=60 * u.s)


# --- add_thermal_noise -----------------------------------------------------------------------------


def test_noise_rms_equals_requested_rms_within_correlated_statistics(make_wcs):
    # Expected variance is exactly rms^2. With beam-correlated noise the effective number of
    # independent samples is about n_pix / (pixels per beam) (derived here: sum of the squared
    # autocorrelation of Gaussian-smoothed white noise is Omega_beam / Omega_pix), so the
    # relative standard error of the variance is sqrt(2 / n_eff); we allow 4 of them.
    n_chan, n_y, n_x = 16, 96, 128
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 40 * u.deg)
    rms = 0.5 * u.mJy / u.beam
    noisy = add_thermal_noise(_empty_cube(make_wcs, n_chan, n_y, n_x, beam), rms=rms, seed=7)
    pixels_per_beam = (Beam(30 * u.arcsec, 20 * u.arcsec).sr / (5 * u.arcsec) ** 2).decompose().value
    n_eff_channel = n_y * n_x / pixels_per_beam
    variance = np.mean(noisy.data**2, axis=(1, 2)) / 0.5e-3**2
    assert abs(variance.mean() - 1) < 4 * np.sqrt(2 / (n_chan * n_eff_channel))
    assert np.all(np.abs(variance - 1) < 5 * np.sqrt(2 / n_eff_channel))
    assert abs(np.mean(noisy.data)) < 5 * 0.5e-3 / np.sqrt(n_chan * n_eff_channel)


def test_uncorrelated_noise_rms_equals_requested_rms(make_wcs):
    # Independent Gaussian pixels: relative standard error of the variance sqrt(2 / n).
    n_chan, n_y, n_x = 8, 64, 80
    noisy = add_thermal_noise(_empty_cube(make_wcs, n_chan, n_y, n_x, None), rms=2 * u.mJy / u.beam, seed=3,
                              correlate_on_beam=False)
    variance = np.mean(noisy.data**2) / 2e-3**2
    assert abs(variance - 1) < 4 * np.sqrt(2 / noisy.data.size)
    assert abs(_lag_correlation(noisy.data, 1, 0)) < 4 / np.sqrt(noisy.data.size)


def test_noise_is_correlated_on_the_beam_shape_and_orientation(make_wcs):
    # Expected autocorrelation: exp(-d^T Sigma^-1 d / 4) for Gaussian-smoothed white noise (derived
    # here); the standard error of a sample correlation is about (1 - rho^2) / sqrt(n_eff).
    n_chan, n_y, n_x = 12, 80, 96
    beam = BeamSpec(40 * u.arcsec, 15 * u.arcsec, 40 * u.deg)
    noise = add_thermal_noise(_empty_cube(make_wcs, n_chan, n_y, n_x, beam), rms=1 * JY_PER_BEAM, seed=11).data
    n_eff = noise.size / (Beam(40 * u.arcsec, 15 * u.arcsec).sr / (5 * u.arcsec) ** 2).decompose().value
    for lag_x, lag_y in [(1, 0), (0, 1), (1, 1), (-1, 1), (-2, 2), (2, 2)]:
        expected = _expected_correlation(beam, 5.0, lag_x, lag_y)
        assert _lag_correlation(noise, lag_x, lag_y) == pytest.approx(
            expected, abs=5 * (1 - expected**2) / np.sqrt(n_eff) + 0.01)
    # PA 40 deg east of north with east to the left: the noise is stretched up and to the left.
    assert _lag_correlation(noise, -2, 2) > _lag_correlation(noise, 2, 2) + 0.3


def test_noise_on_opposite_edges_is_independent(make_wcs):
    # Noise is made on a padded grid and cropped, so the first and last columns/rows are
    # uncorrelated; a circular FFT on the cube grid would give them the lag-1 correlation (~0.9).
    n_chan, n_y, n_x = 16, 40, 56
    beam = BeamSpec(30 * u.arcsec, 25 * u.arcsec, 10 * u.deg)
    noise = add_thermal_noise(_empty_cube(make_wcs, n_chan, n_y, n_x, beam), rms=1 * JY_PER_BEAM, seed=5).data
    # Along one edge the samples are correlated over about sqrt(2 pi) sigma pixels (derived here,
    # as in the 2-D case); sigma of the major axis is the conservative choice.
    n_eff = n_chan * n_y / (np.sqrt(2 * np.pi) * 30 / FWHM_PER_SIGMA / 5.0)
    columns = np.corrcoef(noise[:, :, 0].ravel(), noise[:, :, -1].ravel())[0, 1]
    rows = np.corrcoef(noise[:, 0, :].ravel(), noise[:, -1, :].ravel())[0, 1]
    assert abs(columns) < 5 / np.sqrt(n_eff) and abs(rows) < 5 / np.sqrt(n_eff)
    assert np.corrcoef(noise[:, :, 0].ravel(), noise[:, :, 1].ravel())[0, 1] > 0.7


def test_same_seed_gives_the_same_noise_and_other_seeds_differ(make_wcs):
    beam = BeamSpec(20 * u.arcsec, 15 * u.arcsec, 0 * u.deg)
    cube = _empty_cube(make_wcs, 3, 20, 24, beam)
    first = add_thermal_noise(cube, rms=1 * u.mJy / u.beam, seed=42).data
    again = add_thermal_noise(cube, rms=1 * u.mJy / u.beam, seed=42).data
    other = add_thermal_noise(cube, rms=1 * u.mJy / u.beam, seed=43).data
    assert np.array_equal(first, again)
    assert not np.allclose(first, other)


@pytest.mark.parametrize("correlate_on_beam", [True, False])
def test_noise_made_in_channel_slabs_equals_noise_made_whole(make_wcs, correlate_on_beam):
    # Each channel has its own stream keyed by (seed, channel), so a cube filled slab by slab is
    # bit-identical to the cube made at once (needed for slab-parallel batch runs).
    beam = BeamSpec(20 * u.arcsec, 15 * u.arcsec, 30 * u.deg)
    whole = add_thermal_noise(_empty_cube(make_wcs, 7, 16, 19, beam), rms=1 * u.mJy / u.beam, seed=5,
                              correlate_on_beam=correlate_on_beam).data
    slabs = [add_thermal_noise(_empty_cube(make_wcs, stop - start, 16, 19, beam), rms=1 * u.mJy / u.beam,
                               seed=5, correlate_on_beam=correlate_on_beam, first_channel=start).data
             for start, stop in [(0, 3), (3, 4), (4, 7)]]
    assert np.array_equal(np.concatenate(slabs), whole)


def test_noise_is_linear_in_rms_and_added_to_the_signal(make_wcs, rng):
    # The scale is analytic (rms / sqrt(sum K^2)), never the measured rms, so doubling rms doubles
    # the noise exactly for the same seed.
    beam = BeamSpec(20 * u.arcsec, 15 * u.arcsec, 70 * u.deg)
    signal = rng.normal(size=(4, 18, 22))
    cube = Cube(signal, make_wcs(22, 18, 4), JY_PER_BEAM, beam=beam, provenance={"stage": "beam"})
    one = add_thermal_noise(cube, rms=1 * u.mJy / u.beam, seed=9)
    two = add_thermal_noise(cube, rms=2 * u.mJy / u.beam, seed=9)
    assert_allclose(two.data - signal, 2 * (one.data - signal), rtol=0, atol=1e-14)
    assert one.provenance == {"stage": "beam", "noise_rms_jy_per_beam": pytest.approx(1e-3),
                              "noise_seed": 9, "noise_correlated_on_beam": True}
    assert cube.provenance == {"stage": "beam"} and np.array_equal(cube.data, signal)


def test_noise_keeps_float32_and_a_scaled_unit(make_wcs):
    beam = BeamSpec(20 * u.arcsec, 15 * u.arcsec, 0 * u.deg)
    cube = Cube(np.zeros((2, 30, 30), dtype=np.float32), make_wcs(30, 30, 2), u.mJy / u.beam, beam=beam)
    noisy = add_thermal_noise(cube, rms=1 * u.mJy / u.beam, seed=1)
    assert noisy.data.dtype == np.float32 and noisy.unit == u.mJy / u.beam
    assert 0.5 < np.std(noisy.data) < 1.5
    assert noisy.provenance["noise_rms_jy_per_beam"] == pytest.approx(1e-3)


@pytest.mark.parametrize(("kwargs", "error", "match"), [
    ({"rms": -1 * u.mJy / u.beam}, ValueError, "'rms' must be one finite positive value"),
    ({"rms": [1, 2] * u.mJy / u.beam}, ValueError, "'rms' must be one finite positive value"),
    ({"rms": 1 * u.K}, u.UnitsError, "'rms'"),
    ({"seed": -1}, ValueError, "'seed' must be a non-negative integer"),
    ({"seed": 1.5}, ValueError, "'seed' must be a non-negative integer"),
    ({"first_channel": -2}, ValueError, "'first_channel' must be a non-negative integer"),
])
def test_add_thermal_noise_refuses_bad_arguments(make_wcs, kwargs, error, match):
    cube = _empty_cube(make_wcs, 2, 8, 9, BeamSpec(20 * u.arcsec, 15 * u.arcsec, 0 * u.deg))
    with pytest.raises(error, match=match):
        add_thermal_noise(cube, **{"rms": 1 * u.mJy / u.beam, "seed": 1, **kwargs})


def test_add_thermal_noise_refuses_cubes_it_cannot_use(make_wcs):
    wcs = make_wcs(9, 8, 2)
    with pytest.raises(ValueError, match="must be in Jy/beam to add thermal noise"):
        add_thermal_noise(Cube(np.zeros((2, 8, 9)), wcs, JY_PER_PIXEL), rms=1 * u.mJy / u.beam, seed=1)
    with pytest.raises(ValueError, match="has no beam to correlate the noise on"):
        add_thermal_noise(Cube(np.zeros((2, 8, 9)), wcs, JY_PER_BEAM), rms=1 * u.mJy / u.beam, seed=1)
    with pytest.raises(TypeError, match="'cube.beam' must be a BeamSpec"):
        add_thermal_noise(Cube(np.zeros((2, 8, 9)), wcs, JY_PER_BEAM, beam=Beam(20 * u.arcsec)),
                          rms=1 * u.mJy / u.beam, seed=1)
