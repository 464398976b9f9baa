"""Spectral-axis helpers shared by the analysis functions."""

import astropy.units as u
import numpy as np

from pipeline.units import HI_REST_FREQUENCY

__all__ = ["channel_frequencies", "channel_radio_velocities"]


def channel_frequencies(wcs) -> u.Quantity:
    """Return the frequency of each channel centre of a 3-axis cube WCS.

    Parameters
    ----------
    wcs : `~astropy.wcs.WCS`
        Cube WCS whose third axis is FREQ (Hz) or VRAD (radio velocity).

    Returns
    -------
    `~astropy.units.Quantity` ['frequency'], shape (n_chan,)
    """
    spectral = wcs.spectral
    n_chan = wcs.pixel_shape[2] if wcs.pixel_shape is not None else wcs.array_shape[0]
    world = spectral.pixel_to_world_values(np.arange(n_chan, dtype=float))
    ctype = spectral.wcs.ctype[0].upper()
    unit = u.Unit(spectral.wcs.cunit[0]) if spectral.wcs.cunit[0] else None
    if ctype.startswith("FREQ"):
        return (np.asarray(world) * (unit or u.Hz)).to(u.Hz)
    if ctype.startswith("VRAD"):
        rest = spectral.wcs.restfrq * u.Hz if spectral.wcs.restfrq else HI_REST_FREQUENCY
        velocity = np.asarray(world) * (unit or u.m / u.s)
        return velocity.to(u.Hz, equivalencies=u.doppler_radio(rest))
    raise ValueError(f"the spectral axis must be FREQ or VRAD; got CTYPE3 = {ctype!r}")


def channel_radio_velocities(wcs) -> u.Quantity:
    """Return each channel's radio velocity about the HI rest frequency, in km/s.

    Notes
    -----
    Radio convention v = c (nu_0 - nu) / nu_0 (Greisen et al. 2006, WCS Paper III),
    so channels equally spaced in frequency are equally spaced in velocity.
    """
    return channel_frequencies(wcs).to(u.km / u.s, equivalencies=u.doppler_radio(HI_REST_FREQUENCY))
