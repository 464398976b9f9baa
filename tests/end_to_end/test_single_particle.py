"""One particle through the whole chain lands where astropy.wcs puts its sky position and frequency."""

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import c
from astropy.coordinates import SkyCoord, SpectralCoord
from astropy.tests.helper import assert_quantity_allclose

from pipeline.chain import run
from pipeline.config import config_from_dict
from pipeline.emission import hi_mass_from_flux
from pipeline.analysis import integrated_flux

NU0 = 1_420_405_751.768 * u.Hz
DISTANCE_MPC = 9.0
SYSTEMIC_KMS = 650.0


def _config(snapshot, *, projection, spectral_axis):
    return config_from_dict({
        "snapshot": {"path": str(snapshot)},
        "geometry": {"centre": "explicit", "centre_position": ["0 kpc", "0 kpc", "0 kpc"],
                     "selection_radius": "4 kpc", "frame": "explicit",
                     "frame_velocity": ["0 km/s", "0 km/s", "0 km/s"], "orientation": "explicit",
                     "rotation_matrix": [[1, 0, 0], [0, 1, 0], [0, 0, 1]]},
        "observer": {"distance": f"{DISTANCE_MPC} Mpc", "systemic_velocity": f"{SYSTEMIC_KMS} km/s",
                     "ra": "0.05 deg", "dec": "47.0 deg"},
        "grid": {"n_x": 41, "n_y": 30, "n_chan": 23, "pixel_scale": "8 arcsec", "channel_width": "10 km/s",
                 "projection": projection, "spectral_axis": spectral_axis},
        "beam": {"major": "30 arcsec", "minor": "30 arcsec"},
        "noise": {"mode": "none"},
        "output": {"moment0": False, "preview": False},
    }, source="single-particle test")


@pytest.mark.parametrize("projection, spectral_axis", [("SIN", "FREQ"), ("TAN", "VRAD")])
def test_single_particle_lands_at_the_astropy_wcs_position(make_snapshot, projection, spectral_axis):
    offset_kpc = np.array([2.0, -1.5, 0.0])        # 2 kpc east, 1.5 kpc south of the centre
    v_los_kms = 55.0                                # receding
    snapshot = make_snapshot(1, position=offset_kpc[None, :], velocity=np.array([[0.0, 0.0, v_los_kms]]),
                             smoothing_length=np.array([0.8]))
    result = run(_config(snapshot, projection=projection, spectral_axis=spectral_axis), write=False)
    cube = result.cube

    # Independent prediction: the direction (D, east, north) in the centre's offset frame, via astropy.
    centre = SkyCoord(0.05 * u.deg, 47.0 * u.deg, frame="icrs")
    distance_kpc = DISTANCE_MPC * 1000.0
    lon = np.arctan2(offset_kpc[0], distance_kpc) * u.rad
    lat = np.arctan2(offset_kpc[1], np.hypot(distance_kpc, offset_kpc[0])) * u.rad
    sky = SkyCoord(lon=lon, lat=lat, frame=centre.skyoffset_frame()).transform_to("icrs")
    beta_sys, beta = SYSTEMIC_KMS / c.to_value(u.km / u.s), v_los_kms / c.to_value(u.km / u.s)
    frequency = NU0 / ((1 + beta_sys) * np.sqrt((1 + beta) / (1 - beta)))
    spectral = SpectralCoord(frequency)
    if spectral_axis == "VRAD":
        spectral = frequency.to(u.m / u.s, equivalencies=u.doppler_radio(NU0))
    x_expected, y_expected, chan_expected = cube.wcs.world_to_pixel(sky, spectral)

    data = cube.data
    zz, yy, xx = np.indices(data.shape)
    total = data.sum()
    # The kernel, line and beam are symmetric, so the emission centroid is the particle's position.
    assert (data * xx).sum() / total == pytest.approx(float(x_expected), abs=0.02)
    assert (data * yy).sum() / total == pytest.approx(float(y_expected), abs=0.02)
    assert (data * zz).sum() / total == pytest.approx(float(chan_expected), abs=0.02)

    # HI mass: X f_n m = 0.76 * 0.9 * 1e5 Msun, recovered from the cube's flux (HI-13 frequency form).
    assert_quantity_allclose(hi_mass_from_flux(integrated_flux(cube), DISTANCE_MPC * u.Mpc),
                             0.76 * 0.9 * 1e5 * u.Msun, rtol=1e-6)
