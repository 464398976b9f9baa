"""Field maps: where each snapshot quantity lives, its unit, and the checks on its values."""

import dataclasses
import math

import astropy.units as u
import numpy as np

from ..errors import SnapshotError
from ..units import LENGTH, MASS, TEMPERATURE, VELOCITY

__all__ = ["FieldSource", "FIELD_KINDS", "REQUIRED_FIELDS", "conversion_factor", "find_bad_values",
           "count_values_with"]


@dataclasses.dataclass(frozen=True, kw_only=True)
class FieldSource:
    """Where one snapshot quantity comes from and how to bring it to internal units.

    The value used inside the package is ``stored × unit.to(internal) ×
    little_h**h_power × scale_factor**a_power``, so a Gadget-style comoving
    length in kpc/h has ``unit=u.kpc, h_power=-1, a_power=1``.

    Parameters
    ----------
    dataset : str or None
        HDF5 path of the dataset (e.g. ``"gas/mass"``); None for a constant.
    unit : `~astropy.units.UnitBase` or str
        Unit of the stored numbers before the h and a factors, e.g.
        ``u.Unit("1e10 Msun")`` or ``u.dimensionless_unscaled``; a string is
        parsed with `astropy.units.Unit`.
    h_power : float
        Power of little h the stored value is multiplied by.
    a_power : float
        Power of the scale factor the stored value is multiplied by.
    value : float or None
        Constant used for every particle when ``dataset`` is None, in ``unit``
        (the h and a factors apply to it too).

    Raises
    ------
    ValueError
        If neither or both of ``dataset`` and ``value`` are given, the unit
        cannot be parsed, or a number is not finite.

    Examples
    --------
    >>> import astropy.units as u
    >>> FieldSource(dataset="PartType0/Masses", unit=u.Unit("1e10 Msun"), h_power=-1.0)
    FieldSource(dataset='PartType0/Masses', unit=Unit("1e+10 solMass"), h_power=-1.0, a_power=0.0, value=None)
    """

    dataset: str | None = None
    unit: u.UnitBase
    h_power: float = 0.0
    a_power: float = 0.0
    value: float | None = None

    def __post_init__(self):
        if (self.dataset is None) == (self.value is None):
            given = "both" if self.dataset is not None else "neither"
            raise ValueError(f"a FieldSource needs exactly one of 'dataset' and 'value'; got {given}")
        if self.dataset is not None and (not isinstance(self.dataset, str) or not self.dataset.strip("/")):
            raise ValueError(f"'dataset' must be an HDF5 path such as 'gas/mass'; got {self.dataset!r}")
        try:
            unit = u.Unit(self.unit)
        except (ValueError, TypeError) as err:
            raise ValueError(f"'unit' must be an astropy unit such as 'kpc' or '1e10 Msun'; "
                             f"got {self.unit!r}") from err
        object.__setattr__(self, "unit", unit)
        for name in ("h_power", "a_power", "value"):
            number = getattr(self, name)
            if number is None:
                continue
            if isinstance(number, bool) or not isinstance(number, (int, float, np.integer, np.floating)) \
                    or not math.isfinite(number):
                raise ValueError(f"'{name}' must be a finite number; got {number!r}")
            object.__setattr__(self, name, float(number))


@dataclasses.dataclass(frozen=True)
class _FieldKind:
    """What the reader knows about one quantity."""

    attribute: str
    unit: u.UnitBase
    is_vector: bool
    may_be_constant: bool
    rule: str


_DIMENSIONLESS = u.dimensionless_unscaled

#: Every quantity the reader knows, keyed as in the config's ``snapshot.fields``.
FIELD_KINDS = {
    "position": _FieldKind("position_kpc", LENGTH, True, False, "within_universe"),
    "velocity": _FieldKind("velocity_kms", VELOCITY, True, False, "below_light"),
    "mass": _FieldKind("mass_msun", MASS, False, False, "positive"),
    "smoothing_length": _FieldKind("h_kpc", LENGTH, False, False, "positive"),
    "temperature": _FieldKind("temperature_k", TEMPERATURE, False, True, "positive"),
    "neutral_fraction": _FieldKind("neutral_fraction", _DIMENSIONLESS, False, True, "fraction"),
    "hydrogen_fraction": _FieldKind("hydrogen_fraction", _DIMENSIONLESS, False, True, "fraction"),
    "molecular_fraction": _FieldKind("molecular_fraction", _DIMENSIONLESS, False, True, "fraction"),
    "metallicity": _FieldKind("metallicity", _DIMENSIONLESS, False, True, "non_negative"),
    "density": _FieldKind("density_msun_kpc3", MASS / LENGTH**3, False, False, "positive"),
}

#: Quantities every 21-cm run needs, as a dataset or a constant.
REQUIRED_FIELDS = ("position", "velocity", "mass", "smoothing_length", "temperature",
                   "neutral_fraction", "hydrogen_fraction")

_NON_FINITE = "NaN or infinite"

# Values no snapshot can hold: a corrupt file or a unit slip, refused before they reach the geometry
# (a coordinate of 1e300 kpc overflows every later step).  The comoving radius of the observable
# universe is about 4.4e7 kpc (value from memory); 1e8 kpc leaves room for any box and its periodic copies.
_LIGHT_KMS = 299792.458
_UNIVERSE_KPC = 1.0e8
_FASTER_THAN_LIGHT = f"at or above the speed of light ({_LIGHT_KMS} km/s) in one component"
_BEYOND_UNIVERSE = f"farther than {_UNIVERSE_KPC:.0e} kpc from the origin in one coordinate (larger than the observable universe)"

# What is wrong with a value -> the test that finds it (NaN compares false in every other test).
_PROBLEMS = {
    _NON_FINITE: lambda values: ~np.isfinite(values),
    "zero or negative": lambda values: values <= 0.0,
    "outside [0, 1]": lambda values: (values < 0.0) | (values > 1.0),
    "negative": lambda values: values < 0.0,
    _FASTER_THAN_LIGHT: lambda values: np.abs(values) >= _LIGHT_KMS,
    _BEYOND_UNIVERSE: lambda values: np.abs(values) > _UNIVERSE_KPC,
}

_RULE_PROBLEM = {
    "finite": None,
    "positive": "zero or negative",
    "fraction": "outside [0, 1]",
    "non_negative": "negative",
    "below_light": _FASTER_THAN_LIGHT,
    "within_universe": _BEYOND_UNIVERSE,
}


def conversion_factor(name, source, *, little_h, scale_factor, label):
    """Return the factor taking stored values of field ``name`` to internal units."""
    internal = FIELD_KINDS[name].unit
    if not source.unit.is_equivalent(internal):
        got = _describe_unit(source.unit)
        if source.unit.physical_type == internal.physical_type:
            got += f" but not a multiple of '{internal}' (offset scales such as deg_C are not supported)"
        if internal == _DIMENSIONLESS:
            expected = "a dimensionless unit such as '' or 'percent'"
        else:
            expected = f"a {internal.physical_type} unit such as '{internal}'"
        raise SnapshotError(f"{label}: unit '{source.unit}' of field '{name}' is {got}; expected {expected}")
    factor = source.unit.to(internal)
    if source.h_power:
        factor *= little_h**source.h_power
    if source.a_power:
        factor *= scale_factor**source.a_power
    return float(factor)


def _describe_unit(unit):
    """Return 'a length', 'dimensionless', ... for messages."""
    physical_type = str(unit.physical_type)
    return "dimensionless" if physical_type == "dimensionless" else f"a {physical_type}"


def find_bad_values(values, name):
    """Return (count, first flat index, what is wrong) for values breaking the rule of ``name``, else None."""
    for problem in (_NON_FINITE, _RULE_PROBLEM[FIELD_KINDS[name].rule]):
        if problem is None:
            continue
        bad = _PROBLEMS[problem](values)
        if bad.any():
            return int(np.count_nonzero(bad)), int(np.argmax(bad.ravel())), problem
    return None


def count_values_with(values, problem):
    """Return how many of ``values`` show ``problem`` (a text returned by `find_bad_values`)."""
    return int(np.count_nonzero(_PROBLEMS[problem](values)))
