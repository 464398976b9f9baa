"""Moment maps and the global line profile of a cube."""

import astropy.units as u
import numpy as np
from astropy.wcs.utils import proj_plane_pixel_area

from ._spectral import channel_frequencies, channel_radio_velocities

__all__ = ["moment0", "moment0_from_chunks", "global_profile", "integrated_flux", "line_width_w50"]


def _beam_per_pixel(cube) -> float:
    """Pixels per beam area is needed to turn Jy/beam into Jy; return Omega_pix / Omega_beam."""
    if cube.beam is None:
        raise ValueError("the cube must carry a beam to turn Jy/beam into Jy; got beam=None")
    pixel_area = proj_plane_pixel_area(cube.wcs.celestial) * u.deg**2
    return float((pixel_area / cube.beam.solid_angle).to_value(u.dimensionless_unscaled))


def moment0(cube) -> u.Quantity:
    """Return the velocity-integrated map, sum over channels of value × |Δv_radio|.

    Parameters
    ----------
    cube : `~pipeline.cube.Cube`
        Cube in any brightness unit (Jy/beam or K).

    Returns
    -------
    `~astropy.units.Quantity`, shape (n_y, n_x)
        In ``cube.unit`` × km/s (e.g. Jy/beam km/s).
    """
    return moment0_from_chunks([cube.data], cube.wcs, cube.unit)


def moment0_from_chunks(chunks, wcs, unit) -> u.Quantity:
    """Return the moment-0 map of a cube that comes a few channels at a time (e.g. read from a file).

    Parameters
    ----------
    chunks : iterable of numpy.ndarray, each of shape (n, n_y, n_x)
        Consecutive channel ranges that together hold every channel of ``wcs``, in order.
    wcs : `~astropy.wcs.WCS`
        Three-axis WCS of the whole cube.
    unit : `~astropy.units.UnitBase`
        Unit of the values (Jy/beam or K).

    Returns
    -------
    `~astropy.units.Quantity`, shape (n_y, n_x)
        The map `moment0` gives for the whole cube (the same sum, in the same order).

    Raises
    ------
    ValueError
        If the chunks hold more or fewer channels than ``wcs``.
    """
    widths = np.abs(np.gradient(channel_radio_velocities(wcs).to_value(u.km / u.s)))
    total, n_done = None, 0
    for chunk in chunks:
        for plane in chunk:   # channel by channel: no float64 copy of the chunk
            if total is None:
                total = np.zeros(np.shape(plane))
            if n_done < widths.size:
                total += widths[n_done] * np.asarray(plane, dtype=np.float64)
            n_done += 1
    if n_done != widths.size:
        raise ValueError(f"the chunks must hold the {widths.size} channels of 'wcs'; got {n_done}")
    return total * unit * (u.km / u.s)


def global_profile(cube) -> tuple[u.Quantity, u.Quantity]:
    """Return the spatially integrated spectrum of a Jy/beam cube.

    Returns
    -------
    velocity : `~astropy.units.Quantity` ['speed'], shape (n_chan,)
        Radio velocity of each channel (km/s).
    flux_density : `~astropy.units.Quantity` ['spectral flux density'], shape (n_chan,)
        Sum over pixels of S [Jy/beam] × Omega_pixel / Omega_beam (check-values BM-03).
    """
    if not cube.unit.is_equivalent(u.Jy / u.beam):
        raise ValueError(f"the cube must be in Jy/beam for a global profile; got {cube.unit}")
    scale = _beam_per_pixel(cube) * cube.unit.to(u.Jy / u.beam)
    flux = np.sum(cube.data, axis=(1, 2), dtype=np.float64) * scale * u.Jy
    return channel_radio_velocities(cube.wcs), flux


def integrated_flux(cube) -> u.Quantity:
    """Return the frequency-integrated flux ∫S dnu of a Jy/beam cube, in Jy Hz."""
    _, flux = global_profile(cube)
    widths_hz = np.abs(np.gradient(channel_frequencies(cube.wcs).to_value(u.Hz)))
    return float(np.sum(flux.to_value(u.Jy) * widths_hz)) * u.Jy * u.Hz


def line_width_w50(velocity: u.Quantity, flux_density: u.Quantity) -> u.Quantity:
    """Return the width of a line profile at 50% of its peak.

    The profile is walked inwards from each end to the first channel at or above
    half the peak, and the crossing is interpolated linearly between channels
    (common practice for W50, no single source).

    Parameters
    ----------
    velocity : `~astropy.units.Quantity` ['speed'], shape (n_chan,)
        Monotonic channel velocities.
    flux_density : `~astropy.units.Quantity`, shape (n_chan,)

    Returns
    -------
    `~astropy.units.Quantity` ['speed']
    """
    v = velocity.to_value(u.km / u.s)
    s = np.asarray(flux_density.value, dtype=np.float64)
    if v.shape != s.shape or v.size < 2:
        raise ValueError(f"'velocity' and 'flux_density' must be equal-length 1-D arrays; got {v.shape} and {s.shape}")
    half = 0.5 * np.max(s)
    if not half > 0:
        raise ValueError("'flux_density' must have a positive peak to measure W50")
    above = np.flatnonzero(s >= half)
    low, high = above[0], above[-1]

    def crossing(inside, outside):
        if outside < 0 or outside >= s.size:
            return v[inside]
        fraction = (s[inside] - half) / (s[inside] - s[outside])
        return v[inside] + fraction * (v[outside] - v[inside])

    return abs(crossing(high, high + 1) - crossing(low, low - 1)) * u.km / u.s
