"""An inclined rotating ring's line width W50 equals 2 v sin i.

A thin ring of N particles uniform in azimuth, turning at speed v and seen at
inclination i, has line-of-sight velocities v sin i cos(phi): the arcsine
("double-horned") profile with horns at +-v sin i.  Each particle is
broadened by a Gaussian of the thermal dispersion sigma = sqrt(k T / m_H)
(check-values HI-09).  The ring goes through the whole geometry chain
(rotation, orientation, projection onto the channel grid, channel widths)
and W50 is measured on the summed profile in channel units.

Tolerance: near a horn the arcsine law behaves as (V - u)^(-1/2); convolved
with a Gaussian of sigma, its half maximum lies 0.698 sigma outside the horn
(derived here by numerical convolution of the arcsine law, a universal
number for sigma << V; common practice, no source), so
W50 = 2 v sin i + 2 * 0.698 sigma.  We assert 2 v sin i + [1.2, 1.5] sigma,
which a cos i for sin i, a wrong channel width or a lost (1 + z) cannot pass.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from pipeline.geometry import (GridSpec, ViewSpec, orient_chunk, project_to_grid, resolve_distances,
                               rotation_for_view, velocity_dispersion_to_channels)
from pipeline.particles import ParticleChunk
from pipeline.units import HI_REST_FREQUENCY

SPEED_KMS = 200.0
N_PARTICLES = 2000
SYSTEMIC_VELOCITY = 1500 * u.km / u.s


def thermal_sigma_kms(temperature):
    """sqrt(k T / m_H) (check-values HI-09: 8.123 99 km/s at 8000 K)."""
    hydrogen_mass = 1.007825032 * u.u  # check-values constants: m_H = 1.007 825 032 u
    return np.sqrt(const.k_B * temperature / hydrogen_mass).to_value(u.km / u.s)


def ring_chunk(rng, temperature_k):
    """A ring of radius 6 kpc in a plane parallel to simulation x-y, turning about +z; and its centre."""
    phase = np.linspace(0.0, 2 * np.pi, N_PARTICLES, endpoint=False) + rng.uniform(0, 2 * np.pi)
    position = 6.0 * np.column_stack([np.cos(phase), np.sin(phase), np.zeros(N_PARTICLES)])
    velocity = SPEED_KMS * np.column_stack([-np.sin(phase), np.cos(phase), np.zeros(N_PARTICLES)])
    offset = np.array([3.0, -1.0, 2.0])  # the ring is not at the simulation origin
    chunk = ParticleChunk(position_kpc=position + offset, velocity_kms=velocity + np.array([40.0, -25.0, 10.0]),
                          mass_msun=np.full(N_PARTICLES, 1.0e5), h_kpc=np.full(N_PARTICLES, 0.3),
                          temperature_k=np.full(N_PARTICLES, temperature_k),
                          neutral_fraction=np.ones(N_PARTICLES), hydrogen_fraction=np.full(N_PARTICLES, 0.76))
    return chunk, offset


def w50_channels(chan, sigma_chan, n_chan):
    """Width between the outermost half-maximum crossings of a sum of unit Gaussians."""
    axis = np.linspace(0.0, n_chan - 1.0, 40 * n_chan)
    profile = np.zeros_like(axis)
    for centre, sigma in zip(chan, sigma_chan):
        profile += np.exp(-0.5 * ((axis - centre) / sigma) ** 2) / sigma
    above = np.nonzero(profile >= 0.5 * profile.max())[0]
    first, last = above[0], above[-1]
    half = 0.5 * profile.max()

    def crossing(inside, outside):
        fraction = (profile[inside] - half) / (profile[inside] - profile[outside])
        return axis[inside] + fraction * (axis[outside] - axis[inside])

    return crossing(last, last + 1) - crossing(first, first - 1)


@pytest.mark.parametrize("spectral_axis", ["FREQ", "VRAD"])
@pytest.mark.parametrize(("inclination", "position_angle"), [(30.0, 10.0), (60.0, 35.0), (80.0, 250.0)])
def test_inclined_ring_w50_is_twice_v_sin_i(rng, inclination, position_angle, spectral_axis):
    distances = resolve_distances(distance=20 * u.Mpc, systemic_velocity=SYSTEMIC_VELOCITY)
    grid = GridSpec.from_channel_width(n_x=64, n_y=48, n_chan=301, pixel_scale=5 * u.arcsec,
                                       ra=150 * u.deg, dec=30 * u.deg,
                                       centre_frequency=HI_REST_FREQUENCY / (1 + distances.systemic_redshift),
                                       channel_width=1.5 * u.km / u.s, spectral_axis=spectral_axis)
    chunk, centre_kpc = ring_chunk(rng, 8000.0)
    view = ViewSpec(inclination=inclination * u.deg, position_angle=position_angle * u.deg,
                    orientation="simulation_axes")
    oriented = orient_chunk(chunk, centre_kpc, np.array([40.0, -25.0, 10.0]), rotation_for_view(view))
    _, _, chan, nu_hz, _ = project_to_grid(oriented.position_kpc, oriented.velocity_kms,
                                           grid=grid, distances=distances)
    sigma_kms = thermal_sigma_kms(8000 * u.K)
    assert sigma_kms == pytest.approx(8.12399, rel=1e-5)  # HI-09
    sigma_chan = velocity_dispersion_to_channels(np.full(N_PARTICLES, sigma_kms), nu_hz, grid=grid)

    # channels are radio-velocity widths about nu_0; a source-rest-frame width is (1 + z) times larger
    # (check-values HI-10: c (1+z) dnu / nu_0)
    w50_kms = (w50_channels(chan, sigma_chan, grid.n_chan) * grid.velocity_channel_width.to_value(u.km / u.s)
               * (1 + distances.systemic_redshift))
    expected_kms = 2 * SPEED_KMS * np.sin(np.radians(inclination))
    assert expected_kms + 1.2 * sigma_kms < w50_kms < expected_kms + 1.5 * sigma_kms


def test_face_on_ring_has_the_thermal_width_only(rng):
    distances = resolve_distances(distance=20 * u.Mpc)
    grid = GridSpec.from_channel_width(n_x=8, n_y=8, n_chan=61, pixel_scale=5 * u.arcsec, ra=150 * u.deg,
                                       dec=30 * u.deg, centre_frequency=HI_REST_FREQUENCY,
                                       channel_width=1.0 * u.km / u.s)
    chunk, centre_kpc = ring_chunk(rng, 100.0)
    view = ViewSpec(inclination=0 * u.deg, position_angle=0 * u.deg, orientation="simulation_axes")
    oriented = orient_chunk(chunk, centre_kpc, np.array([40.0, -25.0, 10.0]), rotation_for_view(view))
    _, _, chan, nu_hz, _ = project_to_grid(oriented.position_kpc, oriented.velocity_kms, grid=grid,
                                           distances=distances)
    sigma_chan = velocity_dispersion_to_channels(np.full(N_PARTICLES, thermal_sigma_kms(100 * u.K)),
                                                 nu_hz, grid=grid)
    w50_kms = w50_channels(chan, sigma_chan, grid.n_chan) * grid.velocity_channel_width.to_value(u.km / u.s)
    # HI-09: thermal FWHM at 100 K = 2.138 86 km/s (interpolation on a 1/40-channel axis: 1e-3 km/s)
    assert w50_kms == pytest.approx(2.13886, abs=2e-3)
