"""Tests for pipeline.geometry._distance: distances from a redshift or a plain distance."""

import astropy.constants as const
import astropy.units as u
import pytest
from astropy.cosmology import WMAP9, FlatLambdaCDM
from astropy.tests.helper import assert_quantity_allclose

from pipeline.geometry import DistanceSpec, resolve_distances

# check-values CO-02 (astropy 8.0 Planck18): z -> (D_L, D_A) in Mpc, rtol 1e-5.
CO_02 = [(0.01, 44.6471, 43.7674), (0.1, 475.8223, 393.2415),
         (0.5, 2919.6250, 1297.6111), (1.0, 6791.2689, 1697.8172)]


@pytest.mark.parametrize(("redshift", "d_l_mpc", "d_a_mpc"), CO_02)
def test_planck18_distances_match_check_values_co02(redshift, d_l_mpc, d_a_mpc):
    spec = resolve_distances(redshift=redshift)
    assert_quantity_allclose(spec.luminosity_distance, d_l_mpc * u.Mpc, rtol=1e-5)  # CO-02
    assert_quantity_allclose(spec.angular_diameter_distance, d_a_mpc * u.Mpc, rtol=1e-5)  # CO-02
    assert spec.redshift == redshift
    assert spec.systemic_redshift == redshift


@pytest.mark.parametrize("redshift", [0.01, 0.3, 2.0])
def test_luminosity_and_angular_distance_obey_etherington_identity(redshift):
    spec = resolve_distances(redshift=redshift, cosmology="WMAP9")
    # CO-02 identity D_L = (1+z)^2 D_A (Etherington reciprocity; Hogg 1999)
    assert_quantity_allclose(spec.luminosity_distance,
                             (1 + redshift) ** 2 * spec.angular_diameter_distance, rtol=1e-12)
    # astropy.cosmology WMAP9 realisation, called directly
    assert_quantity_allclose(spec.luminosity_distance, WMAP9.luminosity_distance(redshift), rtol=1e-12)


# check-values CO-03: H0 = 70, Omega_m = 0.3, no radiation; z -> (D_L, D_A) Mpc, rtol 1e-7 (Hogg 1999).
@pytest.mark.parametrize(("redshift", "d_l_mpc", "d_a_mpc"),
                         [(0.01, 43.1582, 42.3078), (0.1, 460.2999, 380.4132), (0.5, 2832.9381, 1259.0836)])
def test_cosmology_instance_is_accepted_and_matches_check_values_co03(redshift, d_l_mpc, d_a_mpc):
    model = FlatLambdaCDM(H0=70, Om0=0.3, Tcmb0=0)
    spec = resolve_distances(redshift=redshift, cosmology=model)
    # CO-03 numbers are quoted to 4 decimals, so the tolerance is their rounding (5e-5 Mpc)
    assert_quantity_allclose(spec.luminosity_distance, d_l_mpc * u.Mpc, atol=5e-5 * u.Mpc)
    assert_quantity_allclose(spec.angular_diameter_distance, d_a_mpc * u.Mpc, atol=5e-5 * u.Mpc)


def test_plain_distance_sets_both_distances_and_optical_systemic_redshift():
    spec = resolve_distances(distance=44.3393 * u.Mpc, systemic_velocity=3000 * u.km / u.s)
    assert_quantity_allclose(spec.luminosity_distance, 44.3393 * u.Mpc)
    assert_quantity_allclose(spec.angular_diameter_distance, 44.3393 * u.Mpc)
    assert spec.redshift == 0.0
    # optical convention v = c z (check-values HI-10), c from astropy.constants
    assert spec.systemic_redshift == pytest.approx((3000 * u.km / u.s / const.c).decompose().value, rel=1e-15)


def test_plain_distance_without_systemic_velocity_has_zero_redshift():
    spec = resolve_distances(distance=3 * u.Mpc)
    assert spec.systemic_redshift == 0.0


@pytest.mark.parametrize(("kwargs", "match"), [
    ({}, "exactly one of 'distance' and 'redshift'"),
    ({"distance": 10 * u.Mpc, "redshift": 0.1}, "exactly one of 'distance' and 'redshift'"),
    ({"redshift": 0.0}, "'redshift' must be a number > 0"),
    ({"redshift": -0.1}, "'redshift' must be a number > 0"),
    ({"redshift": True}, "'redshift' must be a number > 0"),
    ({"redshift": 0.1, "cosmology": "Planck99"}, "'cosmology' must be an astropy.cosmology realisation"),
    ({"redshift": 0.1, "systemic_velocity": 100 * u.km / u.s}, "'systemic_velocity' applies only with 'distance'"),
    ({"distance": 10.0}, "'distance' must be a positive length"),
    ({"distance": -1 * u.Mpc}, "'distance' must be a positive length"),
    ({"distance": 10 * u.Mpc, "systemic_velocity": 100.0}, "'systemic_velocity' must be a velocity"),
    ({"distance": 10 * u.Mpc, "systemic_velocity": 3e5 * u.km / u.s}, "slower than light"),
])
def test_resolve_distances_refuses_bad_input(kwargs, match):
    with pytest.raises(ValueError, match=match):
        resolve_distances(**kwargs)


@pytest.mark.parametrize(("changes", "match"), [
    ({"luminosity_distance": 0 * u.Mpc}, "'luminosity_distance' must be a positive length"),
    ({"angular_diameter_distance": 5 * u.s}, "'angular_diameter_distance' must be a positive length"),
    ({"redshift": -1.0}, "'redshift' must be a finite number >= 0"),
    ({"systemic_redshift": -1.0}, "'systemic_redshift' must be a finite number > -1"),
])
def test_distance_spec_refuses_bad_values(changes, match):
    values = {"luminosity_distance": 10 * u.Mpc, "angular_diameter_distance": 10 * u.Mpc,
              "redshift": 0.0, "systemic_redshift": 0.001} | changes
    with pytest.raises(ValueError, match=match):
        DistanceSpec(**values)
