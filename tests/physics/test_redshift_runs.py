"""Redshifted 21-cm runs end to end, against astropy.cosmology and check-values HI-12 to HI-14.

The galaxy is placed at z = 0.003, 0.1 and 0.5 with the pixel scale and channel width chosen to
sample the same physical kpc and rest-frame km/s as a run at z = 0, so an exact code must recover
the same galaxy: the HI mass with the luminosity distance, the map with the angular-diameter
distance, the rest-frame W50, and one column-density map whatever the output unit.
"""

import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.cosmology import Planck18

from cli_calls import run_cli
from pipeline.chain import run
from pipeline.config import load_config

PIXEL_KPC = 0.6              # physical pixel size of every run
CHANNEL_KMS = 12.0           # rest-frame channel width of every run


def _galaxy(make_snapshot, small_run_config, rng):
    """A compact, slowly moving galaxy that lies well inside the field and the band."""
    n_particles = 400
    config = small_run_config()
    make_snapshot(n_particles, position=rng.normal(0.0, 1.0, (n_particles, 3)),
                  velocity=rng.normal(0.0, 20.0, (n_particles, 3)),
                  smoothing_length=rng.uniform(0.2, 0.6, n_particles))
    return config


def _at(config_path, *, redshift):
    """The small config placed at ``redshift`` (0: a plain distance with no systemic velocity)."""
    if redshift == 0:
        distance = 10 * u.Mpc
        place = [f"observer.distance={distance.value} Mpc", "observer.systemic_velocity=0 km/s"]
    else:
        distance = Planck18.angular_diameter_distance(redshift).to(u.Mpc)
        place = [f"observer.redshift={redshift}", "observer.cosmology=Planck18"]
    pixel_arcsec = float((PIXEL_KPC * u.kpc / distance).to_value(u.dimensionless_unscaled) * u.rad.to(u.arcsec))
    observed_kms = CHANNEL_KMS / (1 + redshift)   # radio velocity about nu0: widths shrink by 1 + z
    overrides = place + [f"grid.pixel_scale={pixel_arcsec!r} arcsec",
                         f"beam.major={3.6 * pixel_arcsec!r} arcsec", f"beam.minor={3 * pixel_arcsec!r} arcsec",
                         f"grid.channel_width={observed_kms!r} km/s", "grid.n_chan=41", "noise.mode=none"]
    return load_config(config_path, overrides=overrides)


def _observe(config):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        return run(config, write=False)


@pytest.fixture
def galaxy(make_snapshot, small_run_config, rng):
    return _galaxy(make_snapshot, small_run_config, rng)


@pytest.mark.parametrize("redshift", [0.003, 0.1, 0.5])
def test_redshifted_run_recovers_mass_size_and_rest_frame_width(galaxy, redshift):
    reference = _observe(_at(galaxy, redshift=0))
    result = _observe(_at(galaxy, redshift=redshift))
    summary = result.summary
    assert summary["outside_fraction"] < 1e-9
    # HI mass from the flux with D_L (check-values HI-13): the deposit and the inversion must agree.
    assert u.isclose(summary["hi_mass_recovered"], summary["hi_mass_selected"], rtol=1e-4)
    # Same physical pixel => same normalised map, which holds only if kpc -> arcsec uses D_A
    # (astropy Planck18); with D_L the galaxy would be (1 + z)^2 smaller on the sky.
    shape = result.moment0.value / result.moment0.value.sum()
    shape_0 = reference.moment0.value / reference.moment0.value.sum()
    np.testing.assert_allclose(shape, shape_0, rtol=0, atol=1e-3 * shape_0.max())   # float32 cube, projection
    # Rest-frame W50 = (1 + z) x the observed radio-velocity width, equal to the z = 0 width.
    assert u.isclose(summary["w50_rest"], reference.summary["w50_rest"], rtol=1e-4)
    assert u.isclose(summary["w50"] * (1 + redshift), summary["w50_rest"], rtol=1e-12)
    # The centre's line sits at nu0 / (1 + z) on the written spectral axis.
    frequencies = result.cube.wcs.spectral.pixel_to_world_values(np.arange(41)) * u.Hz
    centre = frequencies[20] if result.cube.wcs.wcs.ctype[2].startswith("FREQ") else None
    if centre is not None:
        assert u.isclose(centre, 1420.405751768 * u.MHz / (1 + redshift), rtol=1e-9)


@pytest.mark.parametrize("redshift", [0, 0.1])
def test_column_density_map_is_one_map_in_any_unit_and_holds_the_hi_mass(galaxy, redshift):
    config = _at(galaxy, redshift=redshift)
    in_jy = _observe(config)
    in_k = _observe(config.replace(["emission.unit=K"]))
    assert in_k.moment0.unit == u.K * u.km / u.s
    np.testing.assert_allclose(in_k.column_density.to_value(u.cm**-2), in_jy.column_density.to_value(u.cm**-2),
                               rtol=1e-6, atol=1e-6 * in_jy.column_density.to_value(u.cm**-2).max())
    # Sum of N_HI m_H over the physical pixel area D_A^2 Omega_pix is the HI mass: the (1 + z)^4
    # dimming of HI-14 is what makes this hold at z > 0 (D_L = (1 + z)^2 D_A, Etherington relation).
    d_a = (10 * u.Mpc) if redshift == 0 else Planck18.angular_diameter_distance(redshift)
    pixel_area = (config["grid.pixel_scale"].to_value(u.rad) * d_a) ** 2
    mass = (in_jy.column_density.sum() * pixel_area * const.m_p * 1.00794 / 1.007276).to(u.Msun)
    # m_H = 1.00794 u; m_p = 1.007276 u (CODATA, from memory); the beam spills nothing here.
    assert u.isclose(mass, in_jy.summary["hi_mass_recovered"], rtol=2e-3)


def test_redshift_zero_is_refused_in_one_line(galaxy, capsys):
    code, _, err = run_cli(capsys, "check", galaxy, "--set", "observer.redshift=0")
    assert code == 2
    assert "observer.redshift: expected a value greater than 0; got 0" in err
    assert "Traceback" not in err


def test_check_and_batch_dry_run_accept_a_redshift(galaxy, capsys, tmp_path):
    code, out, err = run_cli(capsys, "check", galaxy, "--set", "observer.redshift=0.1")
    assert code == 0, err
    assert "z = 0.100000" in out
