"""Gaussian beam areas, pixels per beam and Jy/beam -> K against check-values BM-02, BM-03, HI-07."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from astropy.wcs import WCS
from radio_beam import Beam

from pipeline.cube import Cube
from pipeline.instrument import JY_PER_PIXEL, BeamSpec, convolve_with_beam, jy_per_beam_to_kelvin

NU0 = 1_420_405_751.768 * u.Hz  # check-values HI-01


def _wcs(n_x, n_y, pixel_arcsec):
    wcs = WCS(naxis=3)
    wcs.wcs.ctype = ["RA---TAN", "DEC--TAN", "FREQ"]
    wcs.wcs.cunit = ["deg", "deg", "Hz"]
    wcs.wcs.crval = [0.5, -40.0, NU0.value]
    wcs.wcs.crpix = [(n_x + 1) / 2, (n_y + 1) / 2, 1.0]
    wcs.wcs.cdelt = [-pixel_arcsec / 3600, pixel_arcsec / 3600, 1.0e4]
    return wcs


def test_bm02_beam_solid_angle():
    # check-values BM-02 (Condon & Ransom 2016): 30" x 20" -> 679.8540 arcsec^2 = 1.597 958e-8 sr;
    # radio-beam Beam.sr is the reference library.
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    assert_quantity_allclose(beam.solid_angle, 679.8540 * u.arcsec**2, rtol=1e-7)
    assert_quantity_allclose(beam.solid_angle, 1.597958e-8 * u.sr, rtol=1e-6)
    assert_quantity_allclose(beam.solid_angle, Beam(30 * u.arcsec, 20 * u.arcsec).sr, rtol=1e-12)


@pytest.mark.parametrize(("pixel_arcsec", "pixels_per_beam"), [(5.0, 27.1942), (3.0, 75.5393)])
def test_bm03_jy_per_pixel_to_jy_per_beam(pixel_arcsec, pixels_per_beam):
    # check-values BM-03: S[Jy/beam] = S[Jy/pixel] x Omega_beam / |CDELT1 CDELT2|. A field of
    # 1 Jy/pixel reads pixels-per-beam Jy/beam away from its edges; summing Jy/pixel gives total flux.
    n_y, n_x = 71, 77
    observed = convolve_with_beam(Cube(np.ones((1, n_y, n_x)), _wcs(n_x, n_y, pixel_arcsec), JY_PER_PIXEL),
                                  BeamSpec(30 * u.arcsec, 20 * u.arcsec, 35 * u.deg))
    assert observed.data[0, n_y // 2, n_x // 2] == pytest.approx(pixels_per_beam, rel=2e-6)
    point = np.zeros((1, n_y, n_x))
    point[0, 30, 40] = 0.7
    observed = convolve_with_beam(Cube(point, _wcs(n_x, n_y, pixel_arcsec), JY_PER_PIXEL),
                                  BeamSpec(30 * u.arcsec, 20 * u.arcsec, 35 * u.deg))
    assert observed.data.sum() / pixels_per_beam == pytest.approx(0.7, rel=2e-6)


def test_hi07_one_mjy_per_beam_in_kelvin():
    # check-values HI-07 (Rayleigh-Jeans; Condon & Ransom 2016): 1 mJy/beam, 30" x 20", nu_0 ->
    # 1.009 573 35 K; astropy brightness_temperature and radio-beam Beam.jtok agree.
    beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg)
    factor = jy_per_beam_to_kelvin(NU0, beam)
    assert_quantity_allclose((1 * u.mJy / u.beam * factor).to(u.K), 1.00957335 * u.K, rtol=1e-8)
    assert_quantity_allclose(1 * u.Jy / u.beam * factor, Beam(30 * u.arcsec, 20 * u.arcsec).jtok(NU0), rtol=1e-12)
    astropy_value = (1 * u.mJy / u.beam).to(u.K, u.brightness_temperature(NU0, beam_area=beam.solid_angle))
    assert_quantity_allclose((1 * u.mJy / u.beam * factor).to(u.K), astropy_value, rtol=1e-12)


def test_hi07_numerical_form_at_the_rest_frequency():
    # check-values HI-07: at nu_0, T_B [K] = 605.744 S [mJy/beam] / (theta_maj theta_min [arcsec^2]).
    beam = BeamSpec(45 * u.arcsec, 12 * u.arcsec, 70 * u.deg)
    kelvin = (1 * u.mJy / u.beam * jy_per_beam_to_kelvin(NU0, beam)).to_value(u.K)
    assert kelvin == pytest.approx(605.744 / (45 * 12), rel=1e-6)
