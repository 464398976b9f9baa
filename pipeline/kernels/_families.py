"""SPH kernel families in the Dehnen & Aly (2012) form, with support radius H.

A kernel is ``W(r) = C w(r / H) / H**3`` in three dimensions, where ``H`` is the
radius at which the kernel reaches zero (the support radius) and ``w(q)`` is a
function of ``q = r / H`` on ``[0, 1]``.  The smoothing length ``h`` stored in a
snapshot maps to ``H = support_factor * h`` (config key ``grid.support_factor``);
each family has a usual factor, :func:`default_support_factor`, used when the
key is unset.
"""

import dataclasses
import math
from collections.abc import Callable

import numpy as np

__all__ = ["KERNEL_FAMILIES", "kernel_3d", "default_support_factor"]

#: Width of the truncated Gaussian in units of its support radius, ``sigma / H``:
#: ``W ∝ exp(-r^2 / h^2)`` (so ``sigma = h / sqrt(2)``) cut at ``H = 3 h``.
GAUSSIAN_SIGMA_OVER_SUPPORT = 1.0 / (3.0 * math.sqrt(2.0))


@dataclasses.dataclass(frozen=True)
class _Family:
    """One kernel family: w(q), its pieces or closed-form column, 3D norm and usual support factor.

    ``shape`` evaluates w on ``[0, 1]`` in factored form (no cancellation near
    the support edge).  ``pieces`` holds ``(a, coefficients)`` pairs for the
    piecewise-polynomial families; the piece adds ``sum(c_n q**n)`` for
    ``q < a`` (increasing powers), the form the closed-form column integrals
    use.  It is empty for the Gaussian, whose column is closed-form itself.
    ``breaks`` are the radii inside ``(0, 1)`` where w changes piece.
    """

    name: str
    norm_3d: float
    shape: Callable[[np.ndarray], np.ndarray]
    pieces: tuple[tuple[float, tuple[float, ...]], ...]
    breaks: tuple[float, ...]
    support_factor: float


def _expand(scale: float, root: float, power: int, extra=(1.0,)) -> tuple[float, ...]:
    """Return the increasing-power coefficients of ``scale (root - q)**power * extra(q)``."""
    poly = np.polynomial.polynomial
    return tuple(float(c) for c in scale * poly.polymul(poly.polypow([root, -1.0], power), extra))


def _spline_shape(terms):
    """Return w(q) = sum of ``scale (root - q)^power_+`` over ``terms``, evaluated term by term."""
    def shape(q):
        return sum(scale * np.maximum(root - q, 0.0) ** power for scale, root, power in terms)
    return shape


def _spline(name, norm_3d, terms, support_factor):
    """Build a B-spline family from its truncated-power terms ``(scale, root, power)``."""
    return _Family(name=name, norm_3d=norm_3d, shape=_spline_shape(terms),
                   pieces=tuple((root, _expand(scale, root, power)) for scale, root, power in terms),
                   breaks=tuple(root for _, root, _ in terms if root < 1.0),
                   support_factor=support_factor)


def _wendland(name, norm_3d, power, factor, support_factor):
    """Build a Wendland family ``w = (1 - q)^power * factor(q)`` (factor: increasing coefficients)."""
    polynomial = np.polynomial.polynomial.Polynomial(factor)
    return _Family(name=name, norm_3d=norm_3d,
                   shape=lambda q: (1.0 - q) ** power * polynomial(q),
                   pieces=((1.0, _expand(1.0, 1.0, power, factor)),), breaks=(),
                   support_factor=support_factor)


def _gaussian_norm(s: float) -> float:
    """Return C with 4 pi C int_0^1 exp(-q^2 / 2 s^2) q^2 dq = 1 (closed form of the truncated integral)."""
    a = 1.0 / (math.sqrt(2.0) * s)
    radial = s**3 * (math.sqrt(0.5 * math.pi) * math.erf(a) - math.sqrt(2.0) * a * math.exp(-a * a))
    return 1.0 / (4.0 * math.pi * radial)


_FAMILY_LIST = (
    # Dehnen & Aly 2012, Table 1 (check-values SK-01): w = (1 - q)^3_+ - 4 (1/2 - q)^3_+, C = 16/pi.
    # Usual support 2h: Monaghan & Lattanzio 1985 (SK-01, Monaghan form).
    _spline("cubic_spline", 16.0 / math.pi, ((1.0, 1.0, 3), (-4.0, 0.5, 3)), 2.0),
    # Dehnen & Aly 2012, Table 1 (SK-02): w = (1 - q)^5_+ - 6 (2/3 - q)^5_+ + 15 (1/3 - q)^5_+,
    # C = 2187/(40 pi).  Usual support 3h: Price 2012 (SK-02, Price form).
    _spline("quintic_spline", 2187.0 / (40.0 * math.pi),
            ((1.0, 1.0, 5), (-6.0, 2.0 / 3.0, 5), (15.0, 1.0 / 3.0, 5)), 3.0),
    # Wendland 1995; Dehnen & Aly 2012, Table 1 (SK-03): C2 w = (1 - q)^4 (1 + 4q), C = 21/(2 pi).
    # Usual support 2h: the support-2h form of SK-03.
    _wendland("wendland_c2", 21.0 / (2.0 * math.pi), 4, (1.0, 4.0), 2.0),
    # SK-03: C4 w = (1 - q)^6 (1 + 6q + 35q^2/3), C = 495/(32 pi).  Support 2h as for C2 (from memory:
    # codes that use the support-2h C2 use the same factor for C4 and C6).
    _wendland("wendland_c4", 495.0 / (32.0 * math.pi), 6, (1.0, 6.0, 35.0 / 3.0), 2.0),
    # SK-03: C6 w = (1 - q)^8 (1 + 8q + 25q^2 + 32q^3), C = 1365/(64 pi).  Support 2h (from memory).
    _wendland("wendland_c6", 1365.0 / (64.0 * math.pi), 8, (1.0, 8.0, 25.0, 32.0), 2.0),
    # Gaussian exp(-r^2/h^2) / (pi^(3/2) h^3) (Monaghan 1992, from memory) cut at r = 3h (the usual
    # truncation, Price 2012, from memory) and renormalised: w = exp(-q^2 / (2 s^2)), s = sigma/H.
    _Family(name="gaussian", norm_3d=_gaussian_norm(GAUSSIAN_SIGMA_OVER_SUPPORT),
            shape=lambda q: np.exp(-0.5 * (q / GAUSSIAN_SIGMA_OVER_SUPPORT) ** 2),
            pieces=(), breaks=(), support_factor=3.0),
)

_FAMILIES = {family.name: family for family in _FAMILY_LIST}

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


def default_support_factor(family: str) -> float:
    """Return the usual support radius of a family in units of the smoothing length, ``H / h``.

    Parameters
    ----------
    family : str
        One of :data:`KERNEL_FAMILIES`.

    Returns
    -------
    float
        2 for ``cubic_spline`` (Monaghan & Lattanzio 1985) and the Wendland
        kernels (the support-2h form of C2; the same factor for C4 and C6 is
        from memory), 3 for ``quintic_spline`` (Price 2012) and for the
        truncated ``gaussian`` (cut at 3h, from memory).  Used when
        ``grid.support_factor`` is unset; set it to 1 when a snapshot stores
        the support radius itself (Gadget-style codes), or to the
        Dehnen & Aly (2012) Table 1 ratio ``H / h`` for their ``h = 2 sigma``.

    Raises
    ------
    ValueError
        If ``family`` is unknown.

    Examples
    --------
    >>> default_support_factor("quintic_spline")
    3.0
    """
    return _get_family(family).support_factor


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
    Dehnen & Aly (2012, MNRAS 425, 1068), Table 1, with ``(x)_+ = max(x, 0)``:

    * ``cubic_spline``: ``w = (1 - q)^3_+ - 4 (1/2 - q)^3_+``, ``C = 16 / pi``;
    * ``quintic_spline``: ``w = (1 - q)^5_+ - 6 (2/3 - q)^5_+ + 15 (1/3 - q)^5_+``,
      ``C = 2187 / (40 pi)``;
    * ``wendland_c2``: ``w = (1 - q)^4 (1 + 4 q)``, ``C = 21 / (2 pi)``;
    * ``wendland_c4``: ``w = (1 - q)^6 (1 + 6 q + 35 q^2 / 3)``, ``C = 495 / (32 pi)``;
    * ``wendland_c6``: ``w = (1 - q)^8 (1 + 8 q + 25 q^2 + 32 q^3)``, ``C = 1365 / (64 pi)``.

    ``gaussian`` is ``exp(-q^2 / (2 s^2))`` with ``s = sigma / H = 1 / (3
    sqrt 2)``: the kernel ``exp(-r^2 / h^2)`` cut at ``r = 3 h`` (``H = 3 h``
    by default, i.e. at ``3 sqrt(2) = 4.243`` sigma, where ``4.4e-4`` of the
    uncut mass lies beyond), renormalised so the cut kernel integrates to 1
    (``C = 1 / (4 pi s^3 [sqrt(pi/2) erf(a) - sqrt(2) a exp(-a^2)])``,
    ``a = 1 / (s sqrt 2) = 3``).  It drops to zero at ``q = 1`` by a jump of
    ``exp(-9) = 1.2e-4`` of its central value.

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
