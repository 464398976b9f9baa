"""Quantity-valued config entries: parsing with a physical-type check, and display units.

A quantity is written as a string, a number followed by a unit (``"12 arcsec"``);
astropy reads it.  A bare number is refused: units are never assumed.  Each
kind accepts one or more families of units; each family has the display unit
that :meth:`RunConfig.to_toml` writes (a key may name its own in the schema).
"""

import math

import astropy.units as u
import numpy as np

from ._messages import EXPECTED, Problem, show

__all__ = ["QUANTITY_KINDS", "VECTOR_KINDS", "is_number", "parse_quantity", "parse_vector", "display_unit",
           "to_display", "format_quantity"]

#: Scalar quantity kinds -> display units, one per accepted family of units.
QUANTITY_KINDS = {
    "angle": ("arcsec",),
    "length": ("kpc",),
    "velocity": ("km/s",),
    "frequency": ("Hz",),
    "spectral": ("km/s", "kHz"),
    "time": ("s",),
    "temperature": ("K",),
    "flux_density": ("Jy/beam", "Jy"),
    "memory": ("GiB",),
}

#: Three-vector kinds -> the scalar kind of each element.
VECTOR_KINDS = {"length3": "length", "velocity3": "velocity"}


def is_number(value) -> bool:
    """True for an int or float (numpy ones too), False for a bool."""
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def parse_quantity(raw, kind: str) -> u.Quantity:
    """Return ``raw`` (a quantity string or a scalar Quantity) as a Quantity of ``kind``.

    Parameters
    ----------
    raw : str or `~astropy.units.Quantity`
        The config value, e.g. ``"4 km/s"``.
    kind : str
        A key of `QUANTITY_KINDS`.

    Returns
    -------
    `~astropy.units.Quantity`
        A finite scalar in the unit the user gave.

    Raises
    ------
    Problem
        If ``raw`` is not a finite scalar quantity with a unit of ``kind``.

    Examples
    --------
    >>> parse_quantity("20 kHz", "spectral")
    <Quantity 20. kHz>
    """
    expected = EXPECTED[kind]
    if isinstance(raw, u.Quantity):
        quantity = raw.copy()
    elif isinstance(raw, str):
        try:
            quantity = u.Quantity(raw)
        except (ValueError, TypeError) as err:
            raise Problem(f"expected {expected}; got {show(raw)}, which astropy cannot read as a "
                          "number followed by a unit") from err
    elif is_number(raw):
        raise Problem(f"expected {expected}; got {show(raw)}, a bare number (units are never assumed)")
    else:
        raise Problem(f"expected {expected}; got {show(raw)}")
    if quantity.ndim != 0:
        raise Problem(f"expected {expected}; got {show(raw)}, which is not a single value")
    if not any(quantity.unit.is_equivalent(family) for family in QUANTITY_KINDS[kind]):
        detail = " (no unit)" if quantity.unit == u.dimensionless_unscaled else ""
        raise Problem(f"expected {expected}; got {show(raw)}{detail}")
    if not math.isfinite(quantity.value):
        raise Problem(f"expected {expected}; got {show(raw)}, which is not finite")
    return quantity


def parse_vector(raw, kind: str) -> u.Quantity:
    """Return ``raw`` (three quantity strings, or a shape-(3,) Quantity) as a Quantity of shape (3,).

    Parameters
    ----------
    raw : list of str or `~astropy.units.Quantity`
        The config value, e.g. ``["1 kpc", "500 pc", "0 kpc"]``.
    kind : str
        A key of `VECTOR_KINDS`.

    Returns
    -------
    `~astropy.units.Quantity`, shape (3,)
        In the unit of the first element.

    Raises
    ------
    Problem
        If ``raw`` is not three finite quantities of the element kind.

    Examples
    --------
    >>> parse_vector(["1 kpc", "500 pc", "0 kpc"], "length3")
    <Quantity [1. , 0.5, 0. ] kpc>
    """
    element_kind = VECTOR_KINDS[kind]
    if isinstance(raw, u.Quantity) and raw.shape == (3,):
        elements = list(raw)
    elif isinstance(raw, (list, tuple)) and len(raw) == 3:
        elements = list(raw)
    else:
        raise Problem(f"expected {EXPECTED[kind]}; got {show(raw)}")
    try:
        parsed = [parse_quantity(element, element_kind) for element in elements]
    except Problem as err:
        raise Problem(f"expected {EXPECTED[kind]}; got {show(raw)}: {err}") from err
    return u.Quantity(parsed)


def display_unit(kind: str, unit: u.UnitBase, *, override: str | None = None) -> str:
    """Return the display unit (as written in TOML) for a value of ``kind`` now in ``unit``.

    Parameters
    ----------
    kind : str
        A key of `QUANTITY_KINDS` or `VECTOR_KINDS`.
    unit : `~astropy.units.UnitBase`
        The value's current unit, which picks the family for multi-family kinds.
    override : str, optional
        The key's own display unit from the schema.

    Returns
    -------
    str
        A unit string astropy reads, e.g. ``"km/s"`` or ``"GiB"``.

    Examples
    --------
    >>> display_unit("spectral", u.MHz)
    'kHz'
    """
    if override is not None:
        return override
    families = QUANTITY_KINDS[VECTOR_KINDS.get(kind, kind)]
    return next(family for family in families if unit.is_equivalent(family))


def to_display(quantity: u.Quantity, kind: str, *, override: str | None = None) -> tuple[u.Quantity, str]:
    """Return ``quantity`` converted to its display unit, and that unit's string."""
    unit_string = display_unit(kind, quantity.unit, override=override)
    return quantity.to(u.Unit(unit_string)), unit_string


def format_quantity(quantity: u.Quantity, kind: str, *, override: str | None = None) -> str | list[str]:
    """Return ``quantity`` as config text in its display unit (a list of strings for a vector).

    Examples
    --------
    >>> format_quantity(u.Quantity("0.5 arcmin"), "angle")
    '30.0 arcsec'
    >>> format_quantity(u.Quantity("512 MiB"), "memory")
    '0.5 GiB'
    """
    converted, unit_string = to_display(quantity, kind, override=override)
    if converted.ndim == 0:
        return f"{float(converted.value)!r} {unit_string}"
    return [f"{float(value)!r} {unit_string}" for value in converted.value]
