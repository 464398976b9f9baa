"""Internal unit system and the helpers that strip and attach units.

Inside the package, arrays are plain float64 in fixed units: kpc, km/s, Msun, K
and Hz.  Quantities are converted once, at the public edge, with
:func:`strip_units`.
"""

import astropy.units as u
import numpy as np

__all__ = ["LENGTH", "VELOCITY", "MASS", "TEMPERATURE", "FREQUENCY", "HI_REST_FREQUENCY", "strip_units",
           "format_memory"]

LENGTH = u.kpc
VELOCITY = u.km / u.s
MASS = u.Msun
TEMPERATURE = u.K
FREQUENCY = u.Hz


def strip_units(value, unit, *, name, equivalencies=None):
    """Return ``value`` in ``unit`` as a contiguous float64 array.

    Parameters
    ----------
    value : `~astropy.units.Quantity`
        The quantity to convert; a bare number is refused.
    unit : `~astropy.units.UnitBase`
        Target unit.
    name : str
        Parameter name used in the error message.
    equivalencies : list, optional
        Astropy equivalencies for the conversion (e.g. ``u.temperature()``).

    Returns
    -------
    numpy.ndarray
        float64 array (0-d for a scalar).

    Raises
    ------
    astropy.units.UnitsError
        If ``value`` is not a Quantity or has the wrong physical type.
    """
    if not isinstance(value, u.Quantity):
        raise u.UnitsError(f"'{name}' must be a Quantity in units of {unit}; got {value!r}")
    try:
        converted = value.to_value(unit, equivalencies=equivalencies or [])
    except u.UnitConversionError as err:
        raise u.UnitsError(
            f"'{name}' must be convertible to {unit}; got {value.unit}"
        ) from err
    return np.array(converted, dtype=np.float64, order="C")

#: Rest frequency of the hydrogen 21-cm line (Hellwig et al. 1970; check-values HI-01).
HI_REST_FREQUENCY = 1_420_405_751.768 * u.Hz


def format_memory(amount) -> str:
    """Return an amount of memory or disk for people: KiB, MiB or GiB (IEC binary prefixes).

    Parameters
    ----------
    amount : `~astropy.units.Quantity` ['information']

    Returns
    -------
    str

    Examples
    --------
    >>> format_memory(51 * u.kB), format_memory(731.14 * u.MiB), format_memory(3 * u.GiB)
    ('49.8 KiB', '731.1 MiB', '3.00 GiB')
    """
    n_bytes = amount.to_value(u.byte)
    if n_bytes >= 2**30:
        return f"{n_bytes / 2**30:.2f} GiB"
    if n_bytes >= 2**20:
        return f"{n_bytes / 2**20:.1f} MiB"
    return f"{n_bytes / 2**10:.1f} KiB"
