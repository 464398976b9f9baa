"""Moment maps, global profile, integrated flux and W50 against closed forms."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from astropy.wcs import WCS
from radio_beam import Beam

from pipeline.analysis import (channel_frequencies, channel_radio_velocities, global_profile,
                               integrated_flux, line_width_w50, moment0, moment0_from_chunks)
from pipeline.cube import Cube
from pipeline.instrument import BeamSpec

NU0_HZ = 1_420_405_751.768


def _cube_wcs(*, n_chan, ctype3="FREQ", crval3=1.4e9, cdelt3=1.0e4, pixel_arcsec=5.0):
    wcs = WCS(naxis=3)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN", ctype3]
    wcs.wcs.cunit = ["deg", "deg", "Hz" if ctype3 == "FREQ" else "m/s"]
    wcs.wcs.crval = [10.0, -20.0, crval3]
    wcs.wcs.crpix = [9.0, 6.5, 1.0]
    wcs.wcs.cdelt = [-pixel_arcsec / 3600, pixel_arcsec / 3600, cdelt3]
    wcs.wcs.restfrq = NU0_HZ
    wcs.wcs.specsys = "BARYCENT"
    wcs.pixel_shape = (17, 12, n_chan)
    return wcs


def test_channel_radio_velocity_matches_wcs_paper_iii_example():
    # Greisen et al. 2006 (WCS Paper III) via check-values HI-10: 1400 MHz -> 4306.86124 km/s radio.
    wcs = _cube_wcs(n_chan=3, crval3=1.4e9)
    assert_quantity_allclose(channel_radio_velocities(wcs)[0], 4306.86124 * u.km / u.s, atol=1e-5 * u.km / u.s)


def test_vrad_axis_gives_frequencies_through_astropy_radio_equivalency():
    # astropy doppler_radio is the reference for the radio convention.
    wcs = _cube_wcs(n_chan=5, ctype3="VRAD", crval3=1.0e6, cdelt3=2000.0)
    expected = (np.array([1000.0, 1002.0, 1004.0, 1006.0, 1008.0]) * u.km / u.s).to(
        u.Hz, equivalencies=u.doppler_radio(NU0_HZ * u.Hz))
    assert_quantity_allclose(channel_frequencies(wcs), expected, rtol=1e-12)


def test_moment0_of_a_flat_cube_is_channels_times_radio_width():
    # 10 kHz channels are 2.11061141 km/s in radio velocity (check-values HI-10).
    n_chan = 7
    cube = Cube(np.ones((n_chan, 12, 17)), _cube_wcs(n_chan=n_chan), u.Jy / u.beam)
    assert_quantity_allclose(moment0(cube), n_chan * 2.11061141 * u.Jy / u.beam * u.km / u.s, rtol=1e-8)


def test_global_profile_converts_jy_per_beam_with_the_beam_solid_angle():
    # radio-beam's Beam.sr is the reference solid angle (check-values BM-02/BM-03).
    beam = BeamSpec(major=30 * u.arcsec, minor=20 * u.arcsec, position_angle=25 * u.deg)
    cube = Cube(np.full((3, 12, 17), 2.0), _cube_wcs(n_chan=3), u.Jy / u.beam, beam=beam)
    _, flux = global_profile(cube)
    pixels_per_beam = (Beam(30 * u.arcsec, 20 * u.arcsec).sr / (5 * u.arcsec) ** 2).decompose().value
    assert_quantity_allclose(flux, np.full(3, 2.0 * 12 * 17 / pixels_per_beam) * u.Jy, rtol=1e-9)
    assert_quantity_allclose(integrated_flux(cube), 3 * 1.0e4 * flux[0] * u.Hz, rtol=1e-9)


def test_global_profile_refuses_a_cube_in_kelvin():
    cube = Cube(np.ones((3, 12, 17)), _cube_wcs(n_chan=3), u.K)
    with pytest.raises(ValueError, match="must be in Jy/beam"):
        global_profile(cube)


def test_global_profile_needs_a_beam():
    cube = Cube(np.ones((3, 12, 17)), _cube_wcs(n_chan=3), u.Jy / u.beam)
    with pytest.raises(ValueError, match="must carry a beam"):
        global_profile(cube)


def test_w50_of_a_gaussian_is_its_fwhm():
    # FWHM = sqrt(8 ln 2) sigma (check-values BM-01); fine sampling keeps interpolation error small.
    velocity = np.linspace(-100, 100, 2001) * u.km / u.s
    sigma = 12.0
    profile = np.exp(-0.5 * (velocity.value / sigma) ** 2) * u.Jy
    assert_quantity_allclose(line_width_w50(velocity, profile), 2.354820045 * sigma * u.km / u.s, rtol=1e-4)


def test_w50_of_a_top_hat_interpolates_half_way_across_the_edge_channels():
    # A top-hat sampled on unit channels reaches half power half-way to the next channel (closed form).
    velocity = np.arange(10.0) * u.km / u.s
    profile = np.array([0, 0, 1, 1, 1, 1, 0, 0, 0, 0.0]) * u.Jy
    assert_quantity_allclose(line_width_w50(velocity, profile), 4.0 * u.km / u.s)


def test_w50_refuses_mismatched_or_empty_profiles():
    with pytest.raises(ValueError, match="equal-length"):
        line_width_w50(np.arange(3.0) * u.km / u.s, np.ones(4) * u.Jy)
    with pytest.raises(ValueError, match="positive peak"):
        line_width_w50(np.arange(3.0) * u.km / u.s, np.zeros(3) * u.Jy)


@pytest.mark.parametrize("sizes", [(7,), (1, 4, 2), (3, 1, 1, 2)])
def test_moment0_from_chunks_equals_moment0_of_the_whole_cube(rng, sizes):
    # The whole-array moment0 (itself checked against the closed form above) is the reference: the chunks
    # are summed channel by channel in the same order, so the maps agree bit for bit, float32 input included.
    data = rng.normal(size=(7, 12, 17)).astype(np.float32)
    wcs = _cube_wcs(n_chan=7, ctype3="VRAD", crval3=1.0e6, cdelt3=-2100.0)
    whole = moment0(Cube(data, wcs, u.K))
    edges = np.cumsum((0, *sizes))
    chunked = moment0_from_chunks((data[a:b] for a, b in zip(edges[:-1], edges[1:])), wcs, u.K)
    assert chunked.unit == whole.unit == u.K * u.km / u.s
    np.testing.assert_array_equal(chunked.value, whole.value)


@pytest.mark.parametrize("n_chan", [6, 8])
def test_moment0_from_chunks_refuses_chunks_that_miss_or_exceed_the_band(rng, n_chan):
    data = rng.normal(size=(n_chan, 12, 17))
    with pytest.raises(ValueError, match=rf"the chunks must hold the 7 channels of 'wcs'; got {n_chan}"):
        moment0_from_chunks([data[:3], data[3:]], _cube_wcs(n_chan=7), u.Jy / u.beam)
