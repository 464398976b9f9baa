"""Tests for pipeline.geometry._sky: GridSpec, the written WCS and the particle projection."""

import dataclasses

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from pipeline.geometry import (GridSpec, make_cube_wcs, make_image_wcs, project_to_grid,
                               resolve_distances, velocity_dispersion_to_channels)
from pipeline.units import HI_REST_FREQUENCY


def small_grid(**changes):
    """A non-square grid with an odd channel count (style guide, habit 12)."""
    values = dict(n_x=37, n_y=24, n_chan=11, pixel_scale=3 * u.arcsec, ra=150 * u.deg, dec=30 * u.deg,
                  centre_frequency=1.4 * u.GHz, channel_width=10 * u.kHz)
    return GridSpec(**(values | changes))


def fw05_grid(projection="SIN", spectral_axis="FREQ"):
    """The header of check-values FW-05 (101 x 101 x 64, 5 arcsec, 10 kHz from 1.4 GHz at channel 0)."""
    # FW-05 puts 1.4e9 Hz at FITS pixel 1; our reference is the central channel, 31.5 channels higher.
    return small_grid(n_x=101, n_y=101, n_chan=64, pixel_scale=5 * u.arcsec,
                      centre_frequency=1.4e9 * u.Hz + 31.5 * 10 * u.kHz,
                      projection=projection, spectral_axis=spectral_axis)


def test_radio_velocity_channel_width_matches_check_values_hi10():
    grid = GridSpec.from_channel_width(n_x=37, n_y=24, n_chan=11, pixel_scale=3 * u.arcsec,
                                       ra=150 * u.deg, dec=30 * u.deg, centre_frequency=1.4 * u.GHz,
                                       channel_width=2.11061141 * u.km / u.s)
    # HI-10: 10 kHz <-> 2.110 611 41 km/s about nu_0 (1e-6 km/s absolute -> 5e-3 Hz)
    assert_quantity_allclose(grid.channel_width, 10 * u.kHz, atol=5e-3 * u.Hz)
    assert_quantity_allclose(small_grid().velocity_channel_width, 2.11061141 * u.km / u.s,
                             atol=1e-6 * u.km / u.s)  # HI-10


def test_frequency_channel_width_is_used_as_given():
    grid = GridSpec.from_channel_width(n_x=3, n_y=3, n_chan=3, pixel_scale=1 * u.arcsec, ra=0 * u.deg,
                                       dec=0 * u.deg, centre_frequency=1 * u.GHz, channel_width=25 * u.kHz)
    assert grid.channel_width == 25 * u.kHz


def test_array_shape_is_numpy_order():
    assert small_grid().array_shape == (11, 24, 37)


@pytest.mark.parametrize("n_chan", [11, 12])
def test_channel_frequencies_centre_on_centre_frequency_and_follow_the_axis(n_chan):
    freq = small_grid(n_chan=n_chan).channel_frequencies
    vrad = small_grid(n_chan=n_chan, spectral_axis="VRAD").channel_frequencies
    assert freq.shape == (n_chan,)
    assert_quantity_allclose(freq.mean(), 1.4 * u.GHz, rtol=1e-15)
    assert_quantity_allclose(np.diff(freq), 10 * u.kHz, rtol=1e-9)
    assert_quantity_allclose(vrad, freq[::-1], rtol=1e-15)


def test_ra_is_wrapped_and_angles_stored_in_degrees():
    grid = small_grid(ra=-0.5 * u.deg, dec=0.5 * u.rad)
    assert_quantity_allclose(grid.ra, 359.5 * u.deg)
    assert grid.dec.unit == u.deg


def test_replace_revalidates():
    with pytest.raises(ValueError, match="'n_x' must be an integer >= 1"):
        dataclasses.replace(small_grid(), n_x=0)


@pytest.mark.parametrize(("changes", "match"), [
    ({"n_x": 0}, "'n_x' must be an integer >= 1"),
    ({"n_y": 2.0}, "'n_y' must be an integer >= 1"),
    ({"n_chan": True}, "'n_chan' must be an integer >= 1"),
    ({"pixel_scale": 3.0}, "'pixel_scale' must be a positive angle"),
    ({"pixel_scale": -3 * u.arcsec}, "'pixel_scale' must be a positive angle"),
    ({"ra": 150.0}, "'ra' must be a finite angle"),
    ({"dec": 91 * u.deg}, r"'dec' must lie in \[-90, 90\] deg"),
    ({"centre_frequency": 4 * u.km / u.s}, "'centre_frequency' must be a positive frequency"),
    ({"channel_width": 4 * u.km / u.s}, "'channel_width' must be a positive frequency"),
    ({"projection": "CAR"}, "'projection' must be one of"),
    ({"spectral_axis": "VOPT"}, "'spectral_axis' must be one of"),
])
def test_grid_spec_refuses_bad_values(changes, match):
    with pytest.raises(ValueError, match=match):
        small_grid(**changes)


@pytest.mark.parametrize("width", [4.0, 4 * u.arcsec, -2 * u.km / u.s])
def test_from_channel_width_refuses_other_kinds(width):
    with pytest.raises(ValueError, match="'channel_width' must be"):
        GridSpec.from_channel_width(n_x=3, n_y=3, n_chan=3, pixel_scale=1 * u.arcsec, ra=0 * u.deg,
                                    dec=0 * u.deg, centre_frequency=1 * u.GHz, channel_width=width)


@pytest.mark.parametrize("projection", ["SIN", "TAN"])
def test_cube_wcs_keywords_follow_the_conventions(projection):
    grid = small_grid(projection=projection)
    header = make_cube_wcs(grid).to_header()
    assert (header["CTYPE1"], header["CTYPE2"], header["CTYPE3"]) == (
        f"RA---{projection}", f"DEC--{projection}", "FREQ")
    assert (header["CRPIX1"], header["CRPIX2"], header["CRPIX3"]) == (19.0, 12.5, 6.0)  # (n + 1) / 2
    assert header["CDELT1"] == pytest.approx(-3 / 3600, rel=1e-15)
    assert header["CDELT2"] == pytest.approx(3 / 3600, rel=1e-15)
    assert header["CDELT3"] == pytest.approx(1e4, rel=1e-15)
    assert (header["CUNIT1"], header["CUNIT2"], header["CUNIT3"]) == ("deg", "deg", "Hz")
    assert header["RESTFRQ"] == HI_REST_FREQUENCY.to_value(u.Hz)
    assert header["SPECSYS"] == "BARYCENT"
    assert header["RADESYS"] == "ICRS"
    assert header["LONPOLE"] == 180.0


def test_cube_wcs_carries_the_grid_shape_and_image_wcs_is_its_sky_part():
    grid = small_grid()
    assert make_cube_wcs(grid).pixel_shape == (37, 24, 11)
    image = make_image_wcs(grid)
    assert image.naxis == 2
    assert image.pixel_shape == (37, 24)
    assert image.wcs.ctype[0] == "RA---SIN"


def test_vrad_wcs_radio_velocity_of_1400_mhz_matches_check_values_hi10():
    header = make_cube_wcs(small_grid(spectral_axis="VRAD")).to_header()
    assert header["CTYPE3"] == "VRAD"
    assert header["CUNIT3"] == "m s-1"
    # HI-10: v_rad(1400 MHz) = 4306.861 24 km/s, quoted to 1e-5 km/s, so allow its rounding
    assert header["CRVAL3"] == pytest.approx(4306861.24, abs=5e-3)
    assert header["CRVAL3"] == pytest.approx(4306861.2418, abs=1e-4)  # FW-07 CRVAL, 1e-4 m/s
    assert header["CDELT3"] == pytest.approx(2110.61141, abs=1e-3)  # HI-10, velocity increases


# check-values FW-05 (astropy.wcs / WCSLIB): FITS 1-based pixel -> (RA deg, Dec deg, Hz); 1e-8 deg, 1e-3 Hz.
@pytest.mark.parametrize(("pixel", "world"), [
    ((51, 51, 1), (150.0, 30.0, 1.40000e9)),
    ((61, 51, 1), (149.98396249, 29.99999903, 1.40000e9)),
    ((51, 61, 1), (150.0, 30.01388889, 1.40000e9)),
    ((61, 61, 11), (149.98396025, 30.01388792, 1.40010e9)),
    ((1, 1, 64), (150.08013153, 29.93053126, 1.40063e9)),
])
def test_cube_wcs_reproduces_check_values_fw05(pixel, world):
    ra, dec, nu = make_cube_wcs(fw05_grid()).all_pix2world([pixel], 1)[0]
    # FW-05 quotes 8 decimals, so allow their rounding (5e-9 deg) on top of the 1e-8 deg tolerance
    assert ra == pytest.approx(world[0], abs=1.5e-8)
    assert dec == pytest.approx(world[1], abs=1.5e-8)
    assert nu == pytest.approx(world[2], abs=1e-3)


def test_tan_wcs_reproduces_check_values_fw05():
    ra, dec = make_image_wcs(fw05_grid("TAN")).all_pix2world([[1, 1]], 1)[0]
    assert ra == pytest.approx(150.08013141, abs=1.5e-8)  # FW-05, TAN
    assert dec == pytest.approx(29.93053136, abs=1.5e-8)


def test_vrad_wcs_reproduces_check_values_fw07():
    wcs = make_cube_wcs(fw05_grid(spectral_axis="VRAD"))
    # FW-07 channels 10 and 63 (frequency increasing) are our channels 53 and 0 (velocity increasing)
    velocity = wcs.spectral.all_pix2world([53, 0], 0)[0]
    assert velocity[0] == pytest.approx(4285755.1277, abs=1e-4)  # FW-07, 1e-4 m/s
    assert velocity[1] == pytest.approx(4173892.7232, abs=1e-4)  # FW-07


@pytest.mark.parametrize("spectral_axis", ["FREQ", "VRAD"])
def test_particle_at_rest_at_the_centre_lands_at_the_grid_centre(spectral_axis):
    distances = resolve_distances(redshift=0.1)
    # HI-11: z = 0.1 -> 1291.277 956 MHz (1e-6 MHz)
    grid = small_grid(centre_frequency=1291.277956 * u.MHz, spectral_axis=spectral_axis)
    x_pix, y_pix, chan, nu_hz, _ = project_to_grid(np.zeros((1, 3)), np.zeros((1, 3)),
                                                   grid=grid, distances=distances)
    assert nu_hz[0] == pytest.approx(1291.277956e6, abs=1.0)
    assert (x_pix[0], y_pix[0]) == (18.0, 11.5)
    assert chan[0] == pytest.approx(5.0, abs=1e-4)


def test_east_is_left_north_is_up_and_receding_is_lower_frequency():
    distances = resolve_distances(distance=10 * u.Mpc)
    position = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 0.0]])
    velocity = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 50.0]])
    freq = small_grid(centre_frequency=HI_REST_FREQUENCY)
    x_pix, y_pix, chan, nu_hz, _ = project_to_grid(position, velocity, grid=freq, distances=distances)
    assert x_pix[0] < 18.0 and y_pix[0] == pytest.approx(11.5)  # east: RA grows to the left
    assert y_pix[1] > 11.5 and x_pix[1] == pytest.approx(18.0)
    assert nu_hz[2] < HI_REST_FREQUENCY.to_value(u.Hz) and chan[2] < 5.0
    vrad = small_grid(centre_frequency=HI_REST_FREQUENCY, spectral_axis="VRAD")
    assert project_to_grid(position, velocity, grid=vrad, distances=distances)[2][2] > 5.0


def test_pixels_per_kpc_match_check_values_co02_scale():
    distances = resolve_distances(redshift=0.1)
    grid = small_grid(pixel_scale=1 * u.arcsec)
    kpc_to_pix = project_to_grid(np.zeros((1, 3)), np.zeros((1, 3)), grid=grid, distances=distances)[4]
    assert kpc_to_pix == pytest.approx(1 / 1.90649, rel=1e-5)  # CO-02: 1.906 49 kpc/arcsec at z = 0.1


@pytest.mark.parametrize(("position", "velocity", "match"), [
    (np.zeros((2, 2)), np.zeros((2, 3)), r"'position_kpc' must have shape \(n_particles, 3\)"),
    (np.zeros((2, 3)), np.zeros(3), r"'velocity_kms' must have shape \(n_particles, 3\)"),
    (np.zeros((2, 3)), np.zeros((3, 3)), "must have the same shape"),
    (np.array([[0.0, 0.0, -2.0e4]]), np.zeros((1, 3)), "must lie in front of the observer"),
    (np.zeros((1, 3)), np.array([[0.0, 0.0, 3.0e5]]), "below the speed of light"),
])
def test_project_to_grid_refuses_bad_particles(position, velocity, match):
    with pytest.raises(ValueError, match=match):
        project_to_grid(position, velocity, grid=small_grid(), distances=resolve_distances(distance=20 * u.kpc))


def test_velocity_dispersion_of_one_radio_channel_width_is_one_channel_at_rest():
    grid = small_grid()
    nu0_hz = HI_REST_FREQUENCY.to_value(u.Hz)
    # HI-10: 10 kHz is 2.110 611 41 km/s at nu_0; sigma_nu = nu sigma_v / c
    sigma = velocity_dispersion_to_channels(np.array([2.11061141]), np.array([nu0_hz]), grid=grid)
    assert sigma[0] == pytest.approx(1.0, abs=1e-6 / 2.11061141)
    redshifted = velocity_dispersion_to_channels(2.11061141, np.array([nu0_hz / 1.1]), grid=grid)
    assert redshifted[0] == pytest.approx(1 / 1.1, rel=1e-6)


def test_velocity_dispersion_scales_with_frequency_and_speed_of_light():
    nu_hz = np.array([1.0e9, 1.4e9])
    sigma_kms = np.array([8.0, 3.0])
    expected = (nu_hz * u.Hz * sigma_kms * u.km / u.s / const.c / (10 * u.kHz)).decompose().value
    assert np.allclose(velocity_dispersion_to_channels(sigma_kms, nu_hz, grid=small_grid()), expected,
                       rtol=1e-14, atol=0)
