"""The 21-cm functions: accepted forms, refusals, and agreement between the forms."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose

from pipeline.emission import (EINSTEIN_A_HI, column_density_from_brightness, column_density_from_flux,
                               hi_flux_integral, hi_mass, hi_mass_from_flux, hi_weights_jy_hz,
                               thermal_dispersion)
from pipeline.instrument import BeamSpec

NU0 = 1_420_405_751.768 * u.Hz  # check-values HI-01
JY_KMS = u.Jy * u.km / u.s
BEAM = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 10 * u.deg)


def test_einstein_a_is_the_adopted_gould_value():
    # check-values HI-02: A_10 = 2.8843e-15 s^-1 (Gould 1994).
    assert_quantity_allclose(EINSTEIN_A_HI, 2.8843e-15 / u.s, rtol=1e-15)


# --- hi_mass ----------------------------------------------------------------------------------------


def test_hi_mass_broadcasts_fractions_and_treats_missing_molecules_as_none(rng):
    mass = rng.uniform(1e4, 1e6, 50) * u.Msun
    neutral = rng.uniform(0, 1, 50)
    without = hi_mass(mass, hydrogen_fraction=0.76, neutral_fraction=neutral)
    zero = hi_mass(mass, hydrogen_fraction=0.76, neutral_fraction=neutral, molecular_fraction=0.0)
    assert without.shape == (50,) and without.unit == u.Msun
    assert_quantity_allclose(without, zero, rtol=0)
    assert_quantity_allclose(without, 0.76 * neutral * mass, rtol=1e-14)


def test_hi_mass_accepts_other_mass_units_and_dimensionless_quantities():
    result = hi_mass(1.98840987e30 * u.kg, hydrogen_fraction=76 * u.percent, neutral_fraction=1.0,
                     molecular_fraction=0.25 * u.dimensionless_unscaled)
    assert_quantity_allclose(result, 0.76 * 0.75 * u.Msun, rtol=1e-8)
    assert np.ndim(result) == 0


@pytest.mark.parametrize(("name", "value", "match"), [
    ("hydrogen_fraction", 1.2, r"'hydrogen_fraction' must lie in \[0, 1\], e.g. 0.76; got 1.2"),
    ("neutral_fraction", np.array([0.5, -0.1, 2.0]), "'neutral_fraction' .* got -0.1 and 1 more"),
    ("molecular_fraction", np.nan, "'molecular_fraction' must lie in"),
])
def test_hi_mass_refuses_fractions_outside_zero_one(name, value, match):
    fractions = {"hydrogen_fraction": 0.76, "neutral_fraction": 1.0, "molecular_fraction": 0.0, name: value}
    with pytest.raises(ValueError, match=match):
        hi_mass(np.ones(3) * u.Msun, **fractions)


def test_hi_mass_refuses_bare_numbers_and_unit_mistakes():
    with pytest.raises(u.UnitsError, match="'mass'"):
        hi_mass(1e5, hydrogen_fraction=0.76, neutral_fraction=1.0)
    with pytest.raises(u.UnitsError, match="'neutral_fraction'"):
        hi_mass(1e5 * u.Msun, hydrogen_fraction=0.76, neutral_fraction=0.5 * u.m)


# --- fluxes and masses ----------------------------------------------------------------------------


def test_flux_and_mass_round_trip_in_both_forms(rng):
    mass = rng.uniform(1e7, 1e10, 20) * u.Msun
    distance = 17.3 * u.Mpc
    flux_hz = hi_flux_integral(mass, distance)
    assert flux_hz.unit.is_equivalent(u.Jy * u.Hz)
    assert_quantity_allclose(hi_mass_from_flux(flux_hz, distance), mass, rtol=1e-13)
    assert_quantity_allclose(hi_mass_from_flux(flux_hz.to(u.mJy * u.MHz), distance.to(u.kpc)), mass, rtol=1e-13)


def test_velocity_form_uses_radio_velocity_about_the_rest_frequency():
    # astropy doppler_radio: a radio-velocity width dv is nu_0 dv / c in observed frequency at any
    # redshift, so 1 Jy km/s equals 1 Jy times that width (check-values HI-10, HI-13).
    width_hz = abs(np.diff((np.array([0.0, 1e4]) * u.km / u.s).to(u.Hz, u.doppler_radio(NU0))))[0] / 1e4
    assert_quantity_allclose(hi_mass_from_flux(1 * JY_KMS, 250 * u.Mpc),
                             hi_mass_from_flux(1 * u.Jy * width_hz, 250 * u.Mpc), rtol=1e-12)


def test_mass_from_flux_refuses_other_units_and_distances():
    with pytest.raises(u.UnitsError, match="'integrated_flux' must be in Jy km/s .* or Jy Hz"):
        hi_mass_from_flux(1 * u.Jy, 10 * u.Mpc)
    with pytest.raises(u.UnitsError, match="'integrated_flux'"):
        hi_mass_from_flux(1.0, 10 * u.Mpc)
    with pytest.raises(ValueError, match="'distance' must be finite and positive"):
        hi_mass_from_flux(1 * JY_KMS, 0 * u.Mpc)
    with pytest.raises(ValueError, match="'luminosity_distance' must be finite and positive"):
        hi_flux_integral(1e9 * u.Msun, -3 * u.Mpc)
    with pytest.raises(u.UnitsError, match="'hi_mass'"):
        hi_flux_integral(1e9, 3 * u.Mpc)


# --- column densities -----------------------------------------------------------------------------


def test_column_from_flux_agrees_between_velocity_and_frequency_forms():
    # astropy doppler_radio gives the frequency width of 1 km/s of radio velocity.
    width_hz = abs(np.diff((np.array([0.0, 1e4]) * u.km / u.s).to(u.Hz, u.doppler_radio(NU0))))[0] / 1e4
    velocity_form = column_density_from_flux(np.full((3, 4), 0.2) * u.Jy / u.beam * u.km / u.s, BEAM)
    frequency_form = column_density_from_flux(np.full((3, 4), 0.2) * u.Jy / u.beam * width_hz, BEAM)
    assert velocity_form.shape == (3, 4)
    assert_quantity_allclose(velocity_form, frequency_form, rtol=1e-12)


def test_column_from_flux_brightens_as_one_plus_z_to_the_fourth():
    # check-values HI-12: frequency-integrated surface brightness dims as (1 + z)^-4 (Tolman 1930).
    moment0 = 0.1 * u.Jy / u.beam * u.MHz
    ratio = column_density_from_flux(moment0, BEAM, redshift=0.5) / column_density_from_flux(moment0, BEAM)
    assert_quantity_allclose(ratio, 1.5**4, rtol=1e-13)


def test_column_from_flux_equals_brightness_route_at_z0():
    # astropy brightness_temperature (Rayleigh-Jeans, check-values HI-07) turns Jy/beam into K;
    # the two column-density routes must then agree (HI-08 = HI-07 x HI-03).
    t_b = (1 * u.Jy / u.beam).to(u.K, u.brightness_temperature(NU0, beam_area=BEAM.to_radio_beam().sr))
    assert_quantity_allclose(column_density_from_flux(2.5 * u.Jy / u.beam * u.km / u.s, BEAM),
                             column_density_from_brightness(2.5 * t_b * u.km / u.s), rtol=1e-12)


@pytest.mark.parametrize(("kwargs", "error", "match"), [
    ({"moment0": 1 * u.Jy * u.km / u.s}, u.UnitsError, "'moment0' must be in Jy/beam km/s"),
    ({"redshift": -0.1}, ValueError, "'redshift' must be a finite number >= 0"),
    ({"redshift": np.nan}, ValueError, "'redshift' must be a finite number >= 0"),
    ({"redshift": [0.1, 0.2]}, ValueError, "'redshift' must be a finite number >= 0"),
])
def test_column_from_flux_refuses_bad_input(kwargs, error, match):
    values = {"moment0": 1 * u.Jy / u.beam * u.km / u.s, "redshift": 0.0, **kwargs}
    with pytest.raises(error, match=match):
        column_density_from_flux(values["moment0"], BEAM, redshift=values["redshift"])


def test_column_from_brightness_refuses_other_units():
    with pytest.raises(u.UnitsError, match="'integrated_tb'"):
        column_density_from_brightness(1 * u.Jy / u.beam * u.km / u.s)


# --- thermal width ------------------------------------------------------------------------------------


def test_thermal_dispersion_takes_arrays_and_scales_as_root_temperature():
    sigma = thermal_dispersion([100.0, 400.0, 0.0] * u.K)
    assert sigma.unit == u.km / u.s
    assert_quantity_allclose(sigma[1], 2 * sigma[0], rtol=1e-14)
    assert sigma[2] == 0 * u.km / u.s


def test_thermal_dispersion_refuses_negative_and_bare_temperatures():
    with pytest.raises(ValueError, match="'temperature' must be finite and >= 0 K"):
        thermal_dispersion([100.0, -1.0] * u.K)
    with pytest.raises(u.UnitsError, match="'temperature'"):
        thermal_dispersion(100.0)


# --- per-particle weights -------------------------------------------------------------------------


def test_weights_equal_mass_then_flux_integral(rng):
    n_particles = 1000
    mass = rng.uniform(1e4, 1e6, n_particles)
    hydrogen = rng.uniform(0.7, 0.76, n_particles)
    neutral = rng.uniform(0, 1, n_particles)
    molecular = rng.uniform(0, 0.5, n_particles)
    weights = hi_weights_jy_hz(mass, hydrogen, neutral, molecular, 12.5)
    expected = hi_flux_integral(hi_mass(mass * u.Msun, hydrogen_fraction=hydrogen, neutral_fraction=neutral,
                                        molecular_fraction=molecular), 12.5 * u.Mpc)
    assert weights.dtype == np.float64 and weights.flags.c_contiguous and weights.shape == (n_particles,)
    assert_allclose(weights, expected.to_value(u.Jy * u.Hz), rtol=1e-13)
    assert_allclose(hi_weights_jy_hz(mass, 0.76, 1.0, None, 12.5),
                    hi_weights_jy_hz(mass, np.full(n_particles, 0.76), 1.0, 0.0, 12.5), rtol=0)


@pytest.mark.parametrize(("args", "match"), [
    ((np.ones(3), 0.76, 1.0, None, 0.0), "'luminosity_distance_mpc' must be finite and positive"),
    ((np.ones(3), 0.76, 1.0, None, np.inf), "'luminosity_distance_mpc' must be finite and positive"),
    ((np.ones(3), 0.76, np.array([1.0, 1.5, 0.2]), None, 10.0), "'neutral_fraction' must lie in"),
    ((np.ones(3), 0.76, 1.0, np.array([0.1, -0.2, 0.0]), 10.0), "'molecular_fraction' must lie in"),
])
def test_weights_refuse_bad_fractions_and_distances(args, match):
    with pytest.raises(ValueError, match=match):
        hi_weights_jy_hz(*args)
