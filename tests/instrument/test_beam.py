"""BeamSpec, the beam kernel, convolution to Jy/beam and Jy/beam -> K."""

import dataclasses

import astropy.units as u
import numpy as np
import pytest
import scipy.fft
from astropy.convolution import convolve_fft
from astropy.coordinates import SkyCoord
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from radio_beam import Beam

from pipeline.cube import Cube
from pipeline.instrument import (JY_PER_PIXEL, BeamSpec, beam_kernel, convolve_with_beam, cube_to_kelvin,
                                 fft_plane_pixels, jy_per_beam_to_kelvin)

NU0 = 1_420_405_751.768 * u.Hz  # check-values HI-01
FWHM_PER_SIGMA = np.sqrt(8 * np.log(2))  # check-values BM-01


def _delta_cube(wcs, n_chan, n_y, n_x, *, y, x, flux=1.0):
    data = np.zeros((n_chan, n_y, n_x))
    data[:, y, x] = flux
    return Cube(data, wcs, JY_PER_PIXEL)


# --- BeamSpec ----------------------------------------------------------------------------------------


def test_beamspec_stores_canonical_units_and_is_frozen():
    beam = BeamSpec(0.5 * u.arcmin, 20 * u.arcsec, 0.5 * u.rad)
    assert beam.major.unit == u.arcsec and beam.position_angle.unit == u.deg
    assert_quantity_allclose(beam.major, 30 * u.arcsec, rtol=1e-14)
    assert_quantity_allclose(beam.position_angle, np.degrees(0.5) * u.deg, rtol=1e-14)
    with pytest.raises(dataclasses.FrozenInstanceError):
        beam.major = 40 * u.arcsec
    narrower = dataclasses.replace(beam, minor=10 * u.arcsec)
    assert_quantity_allclose(narrower.minor, 10 * u.arcsec)


def test_beamspec_round_trips_through_radio_beam():
    # radio-beam is the reference beam object.
    beam = BeamSpec(40 * u.arcsec, 25 * u.arcsec, -20 * u.deg)
    other = beam.to_radio_beam()
    assert other == Beam(40 * u.arcsec, 25 * u.arcsec, -20 * u.deg)
    assert_quantity_allclose(beam.solid_angle, other.sr, rtol=1e-12)


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"major": 0 * u.arcsec}, "'major' must be a positive finite angle"),
    ({"minor": -1 * u.arcsec}, "'minor' must be a positive finite angle"),
    ({"major": np.inf * u.arcsec}, "'major' must be a positive finite angle"),
    ({"position_angle": np.nan * u.deg}, "'position_angle' must be a finite angle"),
    ({"major": [30, 40] * u.arcsec}, r"\(one value\)"),
    ({"minor": 40 * u.arcsec}, "'minor' must not exceed 'major'"),
])
def test_beamspec_refuses_bad_values(kwargs, match):
    values = {"major": 30 * u.arcsec, "minor": 20 * u.arcsec, "position_angle": 0 * u.deg, **kwargs}
    with pytest.raises(ValueError, match=match):
        BeamSpec(**values)


def test_beamspec_refuses_bare_numbers_and_wrong_units():
    with pytest.raises(u.UnitsError, match="'major'"):
        BeamSpec(30, 20 * u.arcsec, 0 * u.deg)
    with pytest.raises(u.UnitsError, match="'position_angle'"):
        BeamSpec(30 * u.arcsec, 20 * u.arcsec, 1 * u.m)


# --- beam_kernel ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(("major", "minor", "angle"), [(40, 20, 30), (30, 30, 0), (35, 12, -65), (25, 15, 120)])
def test_beam_kernel_equals_radio_beam_as_kernel(major, minor, angle):
    # radio-beam Beam.as_kernel (centre-sampled, PA east of north with east to the left) is the reference.
    spec = BeamSpec(major * u.arcsec, minor * u.arcsec, angle * u.deg)
    reference = Beam(major * u.arcsec, minor * u.arcsec, angle * u.deg).as_kernel(4 * u.arcsec).array
    kernel = beam_kernel(spec, 4 * u.arcsec, shape=reference.shape)
    assert_allclose(kernel, reference / reference.sum(), rtol=0, atol=1e-13 * kernel.max())


def test_beam_kernel_default_is_unit_sum_and_covers_six_sigma():
    spec = BeamSpec(40 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    kernel = beam_kernel(spec, 4 * u.arcsec)
    sigma_y, sigma_x = 40 / 4 / FWHM_PER_SIGMA, 20 / 4 / FWHM_PER_SIGMA
    assert kernel.shape == (2 * int(np.ceil(6 * sigma_y)) + 1, 2 * int(np.ceil(6 * sigma_x)) + 1)
    assert kernel.sum() == pytest.approx(1.0, rel=1e-14)
    assert np.unravel_index(np.argmax(kernel), kernel.shape) == (kernel.shape[0] // 2, kernel.shape[1] // 2)


@pytest.mark.parametrize("shape", [(30, 31), (31,), (0, 3), (3.0, 5)])
def test_beam_kernel_refuses_bad_shape(shape):
    with pytest.raises(ValueError, match="'shape' must be"):
        beam_kernel(BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg), 5 * u.arcsec, shape=shape)


def test_beam_kernel_refuses_bad_inputs():
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    with pytest.raises(ValueError, match="'pixel_scale' must be a positive finite angle"):
        beam_kernel(beam, -5 * u.arcsec)
    with pytest.raises(u.UnitsError, match="'pixel_scale'"):
        beam_kernel(beam, 5)
    with pytest.raises(TypeError, match="'beam' must be a BeamSpec"):
        beam_kernel(Beam(30 * u.arcsec), 5 * u.arcsec)


# --- convolve_with_beam ------------------------------------------------------------------------------


def test_convolution_equals_astropy_convolve_fft(make_wcs, rng):
    # astropy.convolution.convolve_fft with zero fill and a normalised kernel is the reference.
    n_chan, n_y, n_x = 3, 24, 37
    data = rng.normal(size=(n_chan, n_y, n_x))
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 40 * u.deg)
    observed = convolve_with_beam(Cube(data, make_wcs(n_x, n_y, n_chan), JY_PER_PIXEL), beam)
    kernel = beam_kernel(beam, 5 * u.arcsec)
    pixels_per_beam = (Beam(30 * u.arcsec, 20 * u.arcsec).sr / (5 * u.arcsec) ** 2).decompose().value
    for channel in range(n_chan):
        expected = convolve_fft(data[channel], kernel, boundary="fill", fill_value=0.0,
                                normalize_kernel=True) * pixels_per_beam
        # Single-precision FFTs: float32 round-off (eps 1.2e-7) grows to ~1e-6 of the peak, not more.
        assert_allclose(observed.data[channel], expected, rtol=0, atol=2e-6 * np.abs(expected).max())
    assert observed.unit == u.Jy / u.beam and observed.beam is beam


def test_point_source_peaks_at_its_flux_in_jy_per_beam_and_keeps_total_flux(make_wcs):
    # check-values BM-03: S[Jy/pixel] = S[Jy/beam] x Omega_pix / Omega_beam, so a point source of F Jy
    # peaks at F Jy/beam and the Jy/pixel sum is F.
    n_chan, n_y, n_x = 2, 40, 53
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 25 * u.deg)
    observed = convolve_with_beam(_delta_cube(make_wcs(n_x, n_y, n_chan), n_chan, n_y, n_x, y=18, x=29,
                                              flux=2.5), beam)
    for channel in range(n_chan):
        plane = observed.data[channel]
        assert np.unravel_index(np.argmax(plane), plane.shape) == (18, 29)
        # The cube is float32 after the beam (eps 1.2e-7): peak and sum agree to round-off at that level.
        assert plane[18, 29] == pytest.approx(2.5, rel=1e-6)
        pixels_per_beam = (Beam(30 * u.arcsec, 20 * u.arcsec).sr / (5 * u.arcsec) ** 2).decompose().value
        assert plane.sum(dtype=np.float64) / pixels_per_beam == pytest.approx(2.5, rel=1e-6)


@pytest.mark.parametrize("east_left", [True, False])
def test_elliptical_beam_orientation_is_east_of_north_on_the_sky(make_wcs, east_left):
    # astropy SkyCoord.position_angle (east of north) is the reference for the orientation; the
    # second moments of the convolved delta give the axes (check-values BM-01 for FWHM/sigma).
    n_chan, n_y, n_x = 1, 48, 61
    wcs = make_wcs(n_x, n_y, n_chan, pixel_arcsec=4.0, east_left=east_left)
    beam = BeamSpec(40 * u.arcsec, 20 * u.arcsec, 30 * u.deg)
    image = convolve_with_beam(_delta_cube(wcs, n_chan, n_y, n_x, y=24, x=30), beam).data[0]
    y, x = np.mgrid[:n_y, :n_x]
    weight = image / image.sum()
    dx, dy = x - 30, y - 24
    covariance = np.array([[np.sum(weight * dx * dx), np.sum(weight * dx * dy)],
                           [np.sum(weight * dx * dy), np.sum(weight * dy * dy)]])
    variances, vectors = np.linalg.eigh(covariance)
    assert_allclose(np.sqrt(variances[::-1]) * FWHM_PER_SIGMA * 4.0, [40.0, 20.0], rtol=1e-5)
    major_x, major_y = vectors[:, 1]
    centre = wcs.celestial.pixel_to_world(30, 24)
    tip = wcs.celestial.pixel_to_world(30 + 5 * major_x, 24 + 5 * major_y)
    angle = centre.position_angle(tip).to_value(u.deg) % 180.0
    assert angle == pytest.approx(30.0, abs=1e-3)
    assert isinstance(centre, SkyCoord)


def test_convolution_does_not_wrap_around_the_edges(make_wcs):
    # A source on one edge must leave nothing on the opposite edge: a circular FFT would put a
    # sizeable fraction of the peak there; float32 round-off stays near 1e-7 of the peak.
    n_chan, n_y, n_x = 1, 30, 41
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 60 * u.deg)
    cases = [((15, 0), (slice(None), slice(n_x - 10, n_x))),
             ((0, 20), (slice(n_y - 10, n_y), slice(None))),
             ((29, 40), (slice(0, 10), slice(None))),
             ((29, 40), (slice(None), slice(0, 10)))]
    for (y, x), far in cases:
        image = convolve_with_beam(_delta_cube(make_wcs(n_x, n_y, n_chan), n_chan, n_y, n_x, y=y, x=x),
                                   beam).data[0]
        assert image[y, x] == pytest.approx(1.0, rel=1e-6)
        assert np.abs(image[far]).max() < 1e-6 * image.max()


def test_uniform_field_of_one_jy_per_pixel_reads_pixels_per_beam(make_wcs):
    # Away from the edges, 1 Jy/pixel everywhere is Omega_beam / Omega_pix Jy/beam
    # (check-values BM-03: 30" x 20" beam with 5" pixels -> 27.1942 pixels per beam).
    n_chan, n_y, n_x = 1, 61, 67
    data = np.ones((n_chan, n_y, n_x))
    observed = convolve_with_beam(Cube(data, make_wcs(n_x, n_y, n_chan), JY_PER_PIXEL),
                                  BeamSpec(30 * u.arcsec, 20 * u.arcsec, 15 * u.deg))
    assert_allclose(observed.data[0, 25:36, 25:42], 27.1942, rtol=2e-6)


def test_float32_input_stays_float32_and_scaled_units_convert(make_wcs):
    n_chan, n_y, n_x = 2, 20, 25
    data = np.zeros((n_chan, n_y, n_x), dtype=np.float32)
    data[:, 10, 12] = 3000.0
    beam = BeamSpec(20 * u.arcsec, 15 * u.arcsec, 10 * u.deg)
    observed = convolve_with_beam(Cube(data, make_wcs(n_x, n_y, n_chan), u.mJy / u.pixel), beam)
    assert observed.data.dtype == np.float32
    assert observed.data[0, 10, 12] == pytest.approx(3.0, rel=1e-6)


def test_convolution_copies_wcs_and_provenance(make_wcs):
    wcs = make_wcs(11, 9, 1)
    cube = Cube(np.ones((1, 9, 11)), wcs, JY_PER_PIXEL, provenance={"stage": "grid"})
    observed = convolve_with_beam(cube, BeamSpec(15 * u.arcsec, 15 * u.arcsec, 0 * u.deg))
    assert observed.provenance == {"stage": "grid"} and observed.provenance is not cube.provenance
    assert observed.wcs is not wcs and observed.wcs.to_header() == wcs.to_header()


def test_convolve_with_beam_refuses_bad_cubes(make_wcs):
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    wcs = make_wcs(11, 9, 2)
    with pytest.raises(ValueError, match="must be in Jy/pixel"):
        convolve_with_beam(Cube(np.ones((2, 9, 11)), wcs, u.Jy), beam)
    bad = np.ones((2, 9, 11))
    bad[1, 3, 4] = np.nan
    with pytest.raises(ValueError, match="channel 1 holds NaN or Inf"):
        convolve_with_beam(Cube(bad, wcs, JY_PER_PIXEL), beam)
    with pytest.raises(TypeError, match="'beam' must be a BeamSpec"):
        convolve_with_beam(Cube(np.ones((2, 9, 11)), wcs, JY_PER_PIXEL), Beam(30 * u.arcsec))
    swapped = wcs.sub([3, 1, 2])
    with pytest.raises(ValueError, match="celestial axes first"):
        convolve_with_beam(Cube(np.ones((9, 11, 2)), swapped, JY_PER_PIXEL), beam)


# --- Jy/beam -> K --------------------------------------------------------------------------------------


def test_jy_per_beam_to_kelvin_matches_astropy_and_radio_beam():
    # astropy brightness_temperature and radio-beam Beam.jtok are the references (check-values HI-07).
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    frequency = np.array([1.30e9, 1.40e9, NU0.value]) * u.Hz
    factor = jy_per_beam_to_kelvin(frequency, beam)
    expected = (1 * u.Jy / u.beam).to(u.K, u.brightness_temperature(frequency, beam_area=Beam(30 * u.arcsec,
                                                                                            20 * u.arcsec).sr))
    assert_quantity_allclose(factor * (u.Jy / u.beam), expected, rtol=1e-12)
    assert_quantity_allclose(factor[2] * (u.Jy / u.beam), beam.to_radio_beam().jtok(NU0), rtol=1e-12)


def test_jy_per_beam_to_kelvin_refuses_bad_frequency():
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    with pytest.raises(ValueError, match="'frequency' must be finite and positive"):
        jy_per_beam_to_kelvin(0 * u.Hz, beam)
    with pytest.raises(u.UnitsError, match="'frequency'"):
        jy_per_beam_to_kelvin(21 * u.cm, beam)
    with pytest.raises(TypeError, match="'beam' must be a BeamSpec"):
        jy_per_beam_to_kelvin(NU0, None)


@pytest.mark.parametrize("ctype3", ["FREQ", "VRAD"])
def test_cube_to_kelvin_equals_astropy_channel_by_channel(make_wcs, rng, ctype3):
    # astropy brightness_temperature at each channel's frequency is the reference; the channel
    # frequencies are computed here from the header (check-values FW-03; HI-10 radio convention).
    n_chan, n_y, n_x = 5, 7, 9
    if ctype3 == "FREQ":
        crval3, cdelt3 = 1.40e9, 2.0e5
        frequency = (crval3 + np.arange(n_chan) * cdelt3) * u.Hz
    else:
        crval3, cdelt3 = 3.0e6, 4.0e4
        velocity = (crval3 + np.arange(n_chan) * cdelt3) * u.m / u.s
        frequency = NU0 * (1 - velocity / (299_792_458.0 * u.m / u.s))
    wcs = make_wcs(n_x, n_y, n_chan, ctype3=ctype3, crval3=crval3, cdelt3=cdelt3)
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 45 * u.deg)
    data = rng.normal(size=(n_chan, n_y, n_x))
    kelvin = cube_to_kelvin(Cube(data, wcs, u.mJy / u.beam, beam=beam, provenance={"a": 1}))
    assert kelvin.unit == u.K and kelvin.beam is beam and kelvin.provenance == {"a": 1}
    for channel in range(n_chan):
        expected = (data[channel] * u.mJy / u.beam).to(
            u.K, u.brightness_temperature(frequency[channel], beam_area=beam.to_radio_beam().sr))
        assert_quantity_allclose(kelvin.data[channel] * u.K, expected, rtol=1e-10)


def test_cube_to_kelvin_refuses_bad_cubes(make_wcs):
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    data = np.ones((3, 4, 5))
    with pytest.raises(ValueError, match="must be in Jy/beam to convert to K"):
        cube_to_kelvin(Cube(data, make_wcs(5, 4, 3), JY_PER_PIXEL, beam=beam))
    with pytest.raises(TypeError, match="'cube.beam' must be a BeamSpec"):
        cube_to_kelvin(Cube(data, make_wcs(5, 4, 3), u.Jy / u.beam))
    no_rest = make_wcs(5, 4, 3, ctype3="VRAD", crval3=0.0, cdelt3=1e3, restfrq=None)
    with pytest.raises(ValueError, match="needs RESTFRQ"):
        cube_to_kelvin(Cube(data, no_rest, u.Jy / u.beam, beam=beam))
    spectral_first = make_wcs(5, 4, 3).sub([1, 3, 2])
    with pytest.raises(ValueError, match="spectral third axis"):
        cube_to_kelvin(Cube(data, spectral_first, u.Jy / u.beam, beam=beam))


@pytest.mark.parametrize("position_angle", [0, 30, 90])
@pytest.mark.parametrize("minor", [10, 25])
def test_fft_plane_bound_covers_every_beam_of_that_major_axis(position_angle, minor):
    # The memory plan counts fft_plane_pixels per thread; the beam step pads each plane by the sampled
    # kernel's half-width (scipy.fft.next_fast_len), which must never need more.
    beam = BeamSpec(major=25 * u.arcsec, minor=minor * u.arcsec, position_angle=position_angle * u.deg)
    kernel = beam_kernel(beam, 4 * u.arcsec)
    used = np.prod([scipy.fft.next_fast_len(n + 2 * (k // 2), real=True) for n, k in zip((100, 70), kernel.shape)])
    bound = fft_plane_pixels((100, 70), 25 / 4)
    assert used <= bound <= 1.5 * used
