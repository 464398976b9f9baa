"""Sky projection agrees with the written WCS (astropy.wcs and WCSLIB's wcsware).

Particles are built from geometry in the observer frame; their RA/Dec are
computed independently with astropy SkyCoord great-circle offsets and their
frequencies with astropy's Doppler equivalencies, then placed on pixels by
astropy.wcs (which wraps WCSLIB) and by WCSLIB's own ``wcsware``.
"""

import shutil
import subprocess

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord, SpectralCoord
from astropy.io import fits

from pipeline.geometry import (GridSpec, make_cube_wcs, make_image_wcs, project_to_grid,
                               resolve_distances)
from pipeline.units import HI_REST_FREQUENCY

SKY_POSITIONS = [(150.0, 30.0), (359.99, 12.0), (0.02, -40.0), (200.0, 88.5), (20.0, -87.0)]
DISTANCE = 1.5 * u.Mpc
SYSTEMIC_VELOCITY = 800 * u.km / u.s


def make_grid(ra_deg, dec_deg, projection, spectral_axis, distances):
    """A non-square grid centred on the galaxy's line frequency."""
    centre = HI_REST_FREQUENCY / (1 + distances.systemic_redshift)
    return GridSpec.from_channel_width(n_x=41, n_y=26, n_chan=13, pixel_scale=20 * u.arcsec,
                                       ra=ra_deg * u.deg, dec=dec_deg * u.deg, centre_frequency=centre,
                                       channel_width=5 * u.km / u.s, projection=projection,
                                       spectral_axis=spectral_axis)


def make_particles(rng, n_particles=200):
    """Observer-frame particles out to 40 kpc (about 2 deg at 1.5 Mpc, where SIN and TAN differ)."""
    position_kpc = rng.uniform(-40.0, 40.0, (n_particles, 3))
    velocity_kms = rng.uniform(-300.0, 300.0, (n_particles, 3))
    return position_kpc, velocity_kms


def independent_sky(grid, distances, position_kpc):
    """RA/Dec of each particle's direction by a great-circle offset from the centre (astropy SkyCoord)."""
    distance_kpc = distances.angular_diameter_distance.to_value(u.kpc)
    x, y, z = position_kpc.T
    centre = SkyCoord(grid.ra, grid.dec, frame="icrs")
    # direction (x, y, D + z): position angle east of north atan2(x, y), separation atan2(|(x, y)|, D + z)
    return centre.directional_offset_by(np.arctan2(x, y) * u.rad,
                                        np.arctan2(np.hypot(x, y), distance_kpc + z) * u.rad)


def independent_frequency(distances, velocity_kms):
    """nu_0 Doppler-shifted by v_z (astropy relativistic equivalency), then by the systemic redshift."""
    peculiar = (velocity_kms[:, 2] * u.km / u.s).to(u.Hz, equivalencies=u.doppler_relativistic(HI_REST_FREQUENCY))
    return peculiar / (1 + distances.systemic_redshift)  # 1 + z_obs = (1 + z_sys)(1 + z_pec), CO-04


@pytest.mark.parametrize("spectral_axis", ["FREQ", "VRAD"])
@pytest.mark.parametrize("projection", ["SIN", "TAN"])
@pytest.mark.parametrize(("ra_deg", "dec_deg"), SKY_POSITIONS)
def test_particles_land_where_astropy_wcs_puts_their_world_coordinates(rng, ra_deg, dec_deg, projection,
                                                                       spectral_axis):
    distances = resolve_distances(distance=DISTANCE, systemic_velocity=SYSTEMIC_VELOCITY)
    grid = make_grid(ra_deg, dec_deg, projection, spectral_axis, distances)
    position_kpc, velocity_kms = make_particles(rng)
    x_pix, y_pix, chan, nu_hz, _ = project_to_grid(position_kpc, velocity_kms, grid=grid, distances=distances)

    sky = independent_sky(grid, distances, position_kpc)
    nu = independent_frequency(distances, velocity_kms)
    expected_x, expected_y, expected_chan = make_cube_wcs(grid).world_to_pixel(sky, SpectralCoord(nu))
    # astropy.wcs world_to_pixel (WCSLIB); 1e-6 pixel is far below any physical effect
    np.testing.assert_allclose(x_pix, expected_x, rtol=0, atol=1e-6)
    np.testing.assert_allclose(y_pix, expected_y, rtol=0, atol=1e-6)
    np.testing.assert_allclose(chan, expected_chan, rtol=0, atol=1e-6)
    np.testing.assert_allclose(nu_hz, nu.to_value(u.Hz), rtol=1e-13, atol=0)


def test_sin_and_tan_differ_for_this_field_so_the_agreement_test_can_tell_them_apart(rng):
    distances = resolve_distances(distance=DISTANCE)
    position_kpc, velocity_kms = make_particles(rng)
    sin = project_to_grid(position_kpc, velocity_kms, distances=distances,
                          grid=make_grid(150.0, 30.0, "SIN", "FREQ", distances))
    tan = project_to_grid(position_kpc, velocity_kms, distances=distances,
                          grid=make_grid(150.0, 30.0, "TAN", "FREQ", distances))
    assert np.max(np.hypot(sin[0] - tan[0], sin[1] - tan[1])) > 0.1


def test_cosmological_placement_agrees_with_astropy_wcs(rng):
    distances = resolve_distances(redshift=0.1)
    grid = make_grid(33.0, -12.0, "SIN", "VRAD", distances)
    position_kpc, velocity_kms = make_particles(rng, 50)
    x_pix, y_pix, chan, _, _ = project_to_grid(position_kpc, velocity_kms, grid=grid, distances=distances)
    expected = make_cube_wcs(grid).world_to_pixel(independent_sky(grid, distances, position_kpc),
                                                  SpectralCoord(independent_frequency(distances, velocity_kms)))
    np.testing.assert_allclose(np.stack([x_pix, y_pix, chan]), np.stack(expected), rtol=0, atol=1e-6)


def test_redshifted_line_frequencies_match_check_values():
    position_kpc = np.zeros((1, 3))
    at_rest = np.zeros((1, 3))
    grid = make_grid(150.0, 30.0, "SIN", "FREQ", resolve_distances(redshift=0.1))
    nu_hz = project_to_grid(position_kpc, at_rest, grid=grid, distances=resolve_distances(redshift=0.1))[3]
    assert nu_hz[0] / 1e6 == pytest.approx(1291.277956, abs=1e-6)  # HI-11: z = 0.1, 1e-6 MHz
    # CO-04: z_cos = 0.01 with v_pec = +300 km/s -> 1404.9357 MHz (quoted to 1e-4 MHz)
    receding = np.array([[0.0, 0.0, 300.0]])
    nu_hz = project_to_grid(position_kpc, receding, grid=grid, distances=resolve_distances(redshift=0.01))[3]
    assert nu_hz[0] / 1e6 == pytest.approx(1404.9357, abs=5e-5)


@pytest.mark.parametrize("spectral_axis", ["FREQ", "VRAD"])
def test_spectral_axis_matches_astropy_spectral_coord(spectral_axis):
    distances = resolve_distances(distance=DISTANCE, systemic_velocity=SYSTEMIC_VELOCITY)
    grid = make_grid(150.0, 30.0, "SIN", spectral_axis, distances)
    velocity_kms = np.column_stack([np.zeros(7), np.zeros(7), np.linspace(-30.0, 30.0, 7)])
    chan = project_to_grid(np.zeros((7, 3)), velocity_kms, grid=grid, distances=distances)[2]
    nu = independent_frequency(distances, velocity_kms)
    # astropy SpectralCoord through the spectral sub-WCS (WCSLIB spectral transformation)
    np.testing.assert_allclose(chan, make_cube_wcs(grid).spectral.world_to_pixel(SpectralCoord(nu)),
                               rtol=0, atol=1e-6)


def test_image_wcs_agrees_with_cube_wcs_on_the_sky(rng):
    distances = resolve_distances(distance=DISTANCE)
    grid = make_grid(359.99, 12.0, "TAN", "FREQ", distances)
    position_kpc, velocity_kms = make_particles(rng, 20)
    x_pix, y_pix = project_to_grid(position_kpc, velocity_kms, grid=grid, distances=distances)[:2]
    expected = make_image_wcs(grid).world_to_pixel(independent_sky(grid, distances, position_kpc))
    np.testing.assert_allclose(np.stack([x_pix, y_pix]), np.stack(expected), rtol=0, atol=1e-6)


needs_wcsware = pytest.mark.skipif(shutil.which("wcsware") is None, reason="WCSLIB's wcsware is not on PATH")


def write_cube_header(path, grid):
    """A FITS file with the cube WCS and a zero array of the grid's shape."""
    fits.PrimaryHDU(np.zeros(grid.array_shape, dtype=np.float32),
                    header=make_cube_wcs(grid).to_header()).writeto(path)


@needs_wcsware
@pytest.mark.parametrize("spectral_axis", ["FREQ", "VRAD"])
@pytest.mark.parametrize("projection", ["SIN", "TAN"])
@pytest.mark.parametrize(("ra_deg", "dec_deg"), [(359.99, 12.0), (200.0, 88.5)])
def test_wcsware_maps_projected_pixels_back_to_the_particles(tmp_path, rng, ra_deg, dec_deg, projection,
                                                             spectral_axis):
    distances = resolve_distances(distance=DISTANCE, systemic_velocity=SYSTEMIC_VELOCITY)
    grid = make_grid(ra_deg, dec_deg, projection, spectral_axis, distances)
    position_kpc, velocity_kms = make_particles(rng, 12)
    x_pix, y_pix, chan, _, _ = project_to_grid(position_kpc, velocity_kms, grid=grid, distances=distances)
    path = tmp_path / "cube.fits"
    write_cube_header(path, grid)
    # wcsware -x reads FITS 1-based pixel coordinates from stdin and prints "World: ra dec spec"
    pixels = "".join(f"{x + 1:.9f} {y + 1:.9f} {c + 1:.9f}\n" for x, y, c in zip(x_pix, y_pix, chan))
    result = subprocess.run(["wcsware", "-x", str(path)], input=pixels, capture_output=True, text=True,
                            check=True, timeout=60)
    world = np.array([[float(value) for value in line.replace(",", " ").split()[1:4]]
                      for line in result.stdout.splitlines() if line.startswith("World:")])
    assert world.shape == (len(x_pix), 3)

    sky = independent_sky(grid, distances, position_kpc)
    separation = SkyCoord(world[:, 0] * u.deg, world[:, 1] * u.deg).separation(sky)
    # wcsware prints 6 decimals of a degree; 2e-6 deg covers that rounding (20" pixels: 1e-4 pixel)
    assert np.max(separation.to_value(u.deg)) < 2e-6
    nu = independent_frequency(distances, velocity_kms)
    if spectral_axis == "FREQ":
        # 9 significant digits printed (10 Hz at 1.4 GHz): half a unit of the last one
        np.testing.assert_allclose(world[:, 2], nu.to_value(u.Hz), rtol=0, atol=5.0)
    else:
        radio_ms = nu.to_value(u.m / u.s, equivalencies=u.doppler_radio(HI_REST_FREQUENCY))  # HI-10
        np.testing.assert_allclose(world[:, 2], radio_ms, rtol=0, atol=0.01)  # 2 decimals printed


@needs_wcsware
@pytest.mark.parametrize("spectral_axis", ["FREQ", "VRAD"])
@pytest.mark.parametrize("projection", ["SIN", "TAN"])
def test_wcsware_lint_finds_no_invalid_wcs_keyword(tmp_path, projection, spectral_axis):
    distances = resolve_distances(distance=DISTANCE)
    path = tmp_path / "cube.fits"
    write_cube_header(path, make_grid(150.0, 30.0, projection, spectral_axis, distances))
    # wcsware -l: WCSLIB's strict check of the WCS keyrecords against the standard (report on stderr)
    result = subprocess.run(["wcsware", "-l", str(path)], capture_output=True, text=True, check=True,
                            timeout=60)
    assert "No invalid WCS keyrecords were found." in result.stdout + result.stderr
