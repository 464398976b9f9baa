"""SPH kernel families in the Dehnen & Aly (2012) form, with support radius H.

A kernel is ``W(r) = C w(r / H) / H**3`` in three dimensions, where ``H`` is the
radius at which the kernel reaches zero (the support radius) and ``w(q)`` is a
piecewise polynomial in ``q = r / H`` on ``[0, 1]``.  The smoothing length ``h``
stored in a snapshot maps to ``H = support_factor * h`` (config key
``grid.support_factor``): 2 for codes that write the Monaghan/Price smoothing
length, 1 for codes that write the support radius itself.
"""

import dataclasses
import math
from collections.abc import Callable

import numpy as np

__all__ = ["KERNEL_FAMILIES", "kernel_3d"]


@dataclasses.dataclass(frozen=True)
class _Family:
    """One kernel family: w(q) in factored form, as truncated polynomial pieces, and its 3D norm.

    ``shape`` evaluates w on ``[0, 1]`` in factored form (no cancellation near
    the support edge).  ``pieces`` holds ``(a, coefficients)`` pairs; the piece
    adds ``sum(c_n q**n)`` for ``q < a`` (increasing powers), the form the
    column integrals use.
    """

    name: str
    norm_3d: float
    shape: Callable[[np.ndarray], np.ndarray]
    pieces: tuple[tuple[float, tuple[float, ...]], ...]


# Dehnen & Aly 2012, Table 1 (check-values SK-01): w = (1 - q)^3_+ - 4 (1/2 - q)^3_+, C = 16/pi.
# (1 - q)^3 = 1 - 3q + 3q^2 - q^3 and -4 (1/2 - q)^3 = -1/2 + 3q - 6q^2 + 4q^3.
_CUBIC_SPLINE = _Family(
    name="cubic_spline",
    norm_3d=16.0 / math.pi,
    shape=lambda q: (1.0 - q) ** 3 - 4.0 * np.maximum(0.5 - q, 0.0) ** 3,
    pieces=((1.0, (1.0, -3.0, 3.0, -1.0)), (0.5, (-0.5, 3.0, -6.0, 4.0))),
)

# Wendland 1995; Dehnen & Aly 2012, Table 1 (check-values SK-03): w = (1 - q)^4 (1 + 4q), C = 21/(2 pi).
# Expanded: 1 - 10 q^2 + 20 q^3 - 15 q^4 + 4 q^5.
_WENDLAND_C2 = _Family(
    name="wendland_c2",
    norm_3d=21.0 / (2.0 * math.pi),
    shape=lambda q: (1.0 - q) ** 4 * (1.0 + 4.0 * q),
    pieces=((1.0, (1.0, 0.0, -10.0, 20.0, -15.0, 4.0)),),
)

_FAMILIES = {family.name: family for family in (_CUBIC_SPLINE, _WENDLAND_C2)}

#: Names of the kernel families, as accepted by the ``grid.kernel`` config key.
KERNEL_FAMILIES = tuple(_FAMILIES)


def _get_family(family: str) -> _Family:
    """Return the family record for a name, or raise ValueError naming the choices."""
    try:
        return _FAMILIES[family]
    except (KeyError, TypeError):
        raise ValueError(
            f"'family' must be one of {', '.join(KERNEL_FAMILIES)}; got {family!r}"
        ) from None


def _as_radius(values, *, name: str) -> np.ndarray:
    """Return ``values`` as a float64 array after checking they are finite and non-negative."""
    array = np.asarray(values, dtype=np.float64)
    if not np.all(np.isfinite(array)) or np.any(array < 0.0):
        raise ValueError(f"'{name}' must be finite and non-negative (in units of H); got {values!r}")
    return array


def kernel_3d(family: str, q) -> np.ndarray:
    """Return the 3D kernel times the cube of the support radius, ``W(q H) * H**3``.

    Parameters
    ----------
    family : str
        One of :data:`KERNEL_FAMILIES`.
    q : float or array_like
        Distance from the particle in units of the support radius ``H``
        (``H = support_factor * h``; the kernel is zero for ``q >= 1``).

    Returns
    -------
    numpy.ndarray
        ``C w(q)``, same shape as ``q``; ``W = C w(q) / H**3`` integrates to 1
        over all space.

    Raises
    ------
    ValueError
        If ``family`` is unknown or ``q`` is negative or not finite.

    Notes
    -----
    Dehnen & Aly (2012, MNRAS 425, 1068), Table 1:
    cubic spline ``w = (1 - q)^3_+ - 4 (1/2 - q)^3_+`` with ``C = 16 / pi``;
    Wendland C2 ``w = (1 - q)^4_+ (1 + 4 q)`` with ``C = 21 / (2 pi)``.

    Examples
    --------
    >>> round(float(kernel_3d("cubic_spline", 0.0)), 6)  # 8/pi
    2.546479
    >>> float(kernel_3d("wendland_c2", 1.0))
    0.0
    """
    record = _get_family(family)
    q = _as_radius(q, name="q")
    return record.norm_3d * np.where(q < 1.0, record.shape(np.minimum(q, 1.0)), 0.0)
