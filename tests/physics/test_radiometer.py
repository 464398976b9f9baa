"""Radiometer sensitivities against check-values RS-01 to RS-06 (shared/reference/check-values.md)."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from radio_beam import Beam

from pipeline.emission import column_density_from_brightness
from pipeline.instrument import BeamSpec, interferometer_rms, jy_per_beam_to_kelvin, single_dish_rms

NU0 = 1_420_405_751.768 * u.Hz  # check-values HI-01
DISH = dict(system_temperature=25 * u.K, dish_diameter=15 * u.m, aperture_efficiency=0.70)
RS05 = dict(DISH, n_antennas=64, n_polarisations=2, channel_width=10 * u.kHz, integration_time=4 * u.h)


def test_rs02_single_dish_flux_noise():
    # check-values RS-02 (Thompson, Moran & Swenson 2017): SEFD = 558.063 Jy; with 10 kHz, 60 s and
    # two polarisations sigma_S = 0.509 439 Jy.
    rms = single_dish_rms(**DISH, n_polarisations=2, channel_width=10 * u.kHz, integration_time=60 * u.s)
    assert_quantity_allclose(rms, 0.509439 * u.Jy / u.beam, rtol=1e-6)
    one_second = single_dish_rms(**DISH, n_polarisations=1, channel_width=1 * u.Hz, integration_time=1 * u.s)
    assert_quantity_allclose(one_second, 558.063 * u.Jy / u.beam, rtol=1e-6)


@pytest.mark.parametrize(("n_polarisations", "delta_t"), [(2, 0.0228218), (1, 0.0322749)])
def test_rs01_radiometer_equation_in_kelvin(n_polarisations, delta_t):
    # check-values RS-01 (Dicke 1946): dT = T_sys / sqrt(n_pol dnu t) for 25 K, 10 kHz, 60 s. The flux
    # noise times the gain G = A_eff / (2 k_B) (RS-02) is that temperature noise.
    rms = single_dish_rms(**DISH, n_polarisations=n_polarisations, channel_width=10 * u.kHz,
                          integration_time=60 * u.s)
    gain = 0.70 * np.pi * (15 * u.m) ** 2 / 4 / (2 * const.k_B)
    assert_quantity_allclose((rms * u.beam * gain).to(u.K), delta_t * u.K, rtol=1e-5)


def test_rs05_sixty_four_dish_array():
    # check-values RS-05 (from RS-02 and RS-03, Thompson, Moran & Swenson 2017): 0.517 877 mJy/beam
    # per 10 kHz channel in 4 h; 0.5885 mJy/beam with eta_s = 0.88.
    assert_quantity_allclose(interferometer_rms(**RS05, correlator_efficiency=1.0),
                             5.17877e-4 * u.Jy / u.beam, rtol=1e-5)
    assert_quantity_allclose(interferometer_rms(**RS05, correlator_efficiency=0.88),
                             0.5885 * u.mJy / u.beam, rtol=1e-4)


@pytest.mark.parametrize(("fwhm", "sigma_t"), [(30, 0.348556), (60, 0.0871391), (10, 3.13701)])
def test_rs06_flux_noise_to_brightness_temperature(fwhm, sigma_t):
    # check-values RS-06 with the RS-05 noise at nu_0; references: the sheet's numbers, astropy
    # brightness_temperature and radio-beam Beam.jtok.
    rms = interferometer_rms(**RS05, correlator_efficiency=1.0)
    beam = BeamSpec(fwhm * u.arcsec, fwhm * u.arcsec, 0 * u.deg)
    kelvin = (rms * jy_per_beam_to_kelvin(NU0, beam)).to(u.K)
    assert_quantity_allclose(kelvin, sigma_t * u.K, rtol=1e-5)
    radio_beam = Beam(fwhm * u.arcsec)
    assert_quantity_allclose(kelvin, rms.to(u.K, u.brightness_temperature(NU0, beam_area=radio_beam.sr)),
                             rtol=1e-12)
    assert_quantity_allclose(kelvin, radio_beam.jtok(NU0, value=rms.to_value(u.Jy / u.beam) * u.Jy), rtol=1e-12)


def test_rs06_three_sigma_column_density_limit():
    # check-values RS-06: 3 sigma in one 2.110 61 km/s channel, 30" beam -> 4.0006e18 cm^-2 (C_T for
    # A_10 = 2.8843e-15).
    rms = interferometer_rms(**RS05, correlator_efficiency=1.0)
    sigma_t = rms * jy_per_beam_to_kelvin(NU0, BeamSpec(30 * u.arcsec, 30 * u.arcsec, 0 * u.deg))
    limit = column_density_from_brightness(3 * sigma_t * 2.11061 * u.km / u.s)
    assert_quantity_allclose(limit, 4.0006e18 * u.cm**-2, rtol=1e-4)
