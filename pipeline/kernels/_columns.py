"""Line-of-sight (column) kernel profiles and the quadrant tables that integrate them over pixels.

All lengths are in units of the support radius ``H = support_factor * h``
(config key ``grid.support_factor``; see
:func:`~pipeline.kernels.default_support_factor`).
"""

import functools
import math

import numpy as np

from ._families import GAUSSIAN_SIGMA_OVER_SUPPORT, _as_radius, _Family, _get_family

__all__ = ["column_profile", "quadrant_column_table"]

# Gauss-Legendre points per cell and per axis used to integrate F over one table cell.
_CELL_QUADRATURE_ORDER = 4

# Rows of table cells evaluated at once while building a table (bounds the temporaries).
_ROWS_PER_BLOCK = 64

# Impact parameter (units of H) from which column_profile integrates the polynomial kernels by
# Gauss-Legendre quadrature along the chord instead of the closed form: out there the column is
# small and the closed form's cancellation (absolute error ~1e-14 times the coefficients) would
# dominate its relative error.
_EDGE_START = 0.5

# Gauss-Legendre nodes per chord segment in that quadrature.  With b >= 1/2 the integrand is
# analytic within 1/2 of each segment (at most 0.87 long), so the rule converges to round-off.
_CHORD_QUADRATURE_ORDER = 24


def _column_piece(b: np.ndarray, support: float, coefficients: tuple[float, ...]) -> np.ndarray:
    """Return the chord integral of ``sum(c_n q**n)`` over ``q < support`` at impact parameter b."""
    b2 = b * b
    inside = b < support
    half_chord = np.sqrt(np.where(inside, support * support - b2, 0.0))
    # b^2 asinh(Z/b); its limit at b -> 0 is 0 (b below 1e-150 makes b^2 underflow anyway).
    has_b = b > 1.0e-150
    b2_log = np.where(has_b, b2 * np.arcsinh(half_chord / np.where(has_b, b, 1.0)), 0.0)
    # I_n = int_0^Z q^n dz with q = sqrt(b^2 + z^2): I_n = (Z a^n + n b^2 I_{n-2}) / (n + 1),
    # where a = q(Z) = support, I_0 = Z and b^2 I_{-1} = b^2 asinh(Z/b).
    integrals = [half_chord, 0.5 * (half_chord * support + b2_log)]
    for n in range(2, len(coefficients)):
        integrals.append((half_chord * support**n + n * b2 * integrals[n - 2]) / (n + 1))
    total = np.zeros_like(b)
    for c_n, integral in zip(coefficients, integrals):
        if c_n != 0.0:
            total += c_n * integral
    return np.where(inside, 2.0 * total, 0.0)


def _column_closed_form(record: _Family, b: np.ndarray) -> np.ndarray:
    """Return ``F H**2`` in closed form, accurate to ~1e-12 absolute (the tables use this)."""
    if not record.pieces:
        # Truncated Gaussian: int_{-Z}^{Z} exp(-(b^2 + z^2) / 2 s^2) dz, Z = sqrt(1 - b^2).
        from scipy.special import erf

        s = GAUSSIAN_SIGMA_OVER_SUPPORT
        half_chord = np.sqrt(np.maximum(1.0 - b * b, 0.0))
        chord = math.sqrt(2.0 * math.pi) * s * erf(half_chord / (math.sqrt(2.0) * s))
        return record.norm_3d * np.exp(-0.5 * (b / s) ** 2) * chord
    total = np.zeros_like(b)
    for support, coefficients in record.pieces:
        total += _column_piece(b, support, coefficients)
    return record.norm_3d * total


def _column_by_chord_quadrature(record: _Family, b: np.ndarray) -> np.ndarray:
    """Return ``F H**2`` by Gauss-Legendre quadrature of w along the chord, split where w changes piece."""
    nodes, weights = np.polynomial.legendre.leggauss(_CHORD_QUADRATURE_ORDER)
    b = b[:, None]
    half_chord = np.sqrt(np.maximum(1.0 - b * b, 0.0))
    # Chord segments [z_k, z_{k+1}]: 0, the crossings of the piece breaks inside the chord, Z.
    crossings = [np.sqrt(np.maximum(a * a - b * b, 0.0)) for a in sorted(record.breaks)]
    ends = [np.zeros_like(b), *crossings, half_chord]
    total = np.zeros(b.shape[0])
    for low, high in zip(ends[:-1], ends[1:]):
        z = 0.5 * (low + high) + 0.5 * (high - low) * nodes
        q = np.minimum(np.sqrt(b * b + z * z), 1.0)
        total += 0.5 * (high - low)[:, 0] * (record.shape(q) @ weights)
    return 2.0 * record.norm_3d * np.where(b[:, 0] < 1.0, total, 0.0)


def column_profile(family: str, b) -> np.ndarray:
    """Return the line-of-sight integrated kernel times ``H**2``, ``F(b H) * H**2``.

    Parameters
    ----------
    family : str
        One of :data:`~pipeline.kernels.KERNEL_FAMILIES`.
    b : float or array_like
        Impact parameter (projected distance from the particle) in units of
        the support radius ``H``; ``F`` is zero for ``b >= 1``.

    Returns
    -------
    numpy.ndarray
        ``H**2 * integral of W(sqrt(b^2 + z^2)) dz``, same shape as ``b``;
        ``F`` integrates to 1 over the plane.

    Raises
    ------
    ValueError
        If ``family`` is unknown or ``b`` is negative or not finite.

    Notes
    -----
    For ``b < 1/2`` the polynomial kernels (sums of truncated polynomials
    ``sum(c_n q^n)`` for ``q < a``) are integrated along the chord
    ``|z| < Z = sqrt(a^2 - b^2)`` in closed form with the recurrence
    ``I_n = (Z a^n + n b^2 I_{n-2}) / (n + 1)``, ``I_0 = Z``,
    ``I_{-1} = asinh(Z / b)``.  For ``b >= 1/2``, where the column is small
    and that sum would lose relative accuracy to cancellation, the factored
    ``w`` is integrated along the chord by Gauss-Legendre quadrature split at
    the piece boundaries.  The truncated Gaussian has the closed form
    ``C exp(-b^2 / 2 s^2) s sqrt(2 pi) erf(Z / (s sqrt 2))``, ``Z = sqrt(1 - b^2)``.
    Relative accuracy is about 1e-12 everywhere inside the support.

    Examples
    --------
    >>> round(float(column_profile("cubic_spline", 0.0)), 6)  # 6/pi, check-values SK-05
    1.909859
    """
    record = _get_family(family)
    b = _as_radius(b, name="b")
    flat = b.reshape(-1)
    values = _column_closed_form(record, flat)
    edge = (flat >= _EDGE_START) & (flat < 1.0)
    if record.pieces and edge.any():
        values[edge] = _column_by_chord_quadrature(record, flat[edge])
    return np.maximum(values, 0.0).reshape(b.shape)


@functools.lru_cache(maxsize=8)
def quadrant_column_table(family: str, n: int) -> np.ndarray:
    """Return the column profile integrated from the particle's centre, on an ``n`` x ``n`` grid.

    Parameters
    ----------
    family : str
        One of :data:`~pipeline.kernels.KERNEL_FAMILIES`.
    n : int
        Nodes per axis, at least 2; node ``i`` is at ``u_i = i / (n - 1)``
        (units of the support radius ``H``), so the grid is
        ``numpy.linspace(0, 1, n)``.

    Returns
    -------
    numpy.ndarray, float64, shape (n, n), read-only
        ``table[j, i] = Q(u_i, u_j) = int_0^{u_i} int_0^{u_j} F dy dx`` with
        ``F`` the column profile in units of ``H**-2``: the kernel mass in
        the rectangle between the centre and ``(u_i, u_j)``.  The edges
        ``i = 0`` and ``j = 0`` are exactly 0 and the corner is exactly 1/4.
        ``Q`` is symmetric, ``Q(u, v) = Q(v, u)``.

    Raises
    ------
    ValueError
        If ``family`` is unknown or ``n`` is not an integer >= 2.

    Notes
    -----
    The profile is radial, so ``G(x, y) = sign(x) sign(y) Q(|x|, |y|)`` (the
    mass between the centre and ``(x, y)``, signed) gives the kernel mass of
    any rectangle ``[x0, x1] x [y0, y1]`` as the mixed difference
    ``G(x1, y1) - G(x0, y1) - G(x1, y0) + G(x0, y0)``; one quadrant holds
    everything.  Each table cell's share of ``F`` is integrated with a 4 x 4
    Gauss-Legendre rule and the cells are summed cumulatively.  The total
    before normalisation differs from 1/4 by the quadrature error (below
    1e-9 for ``n >= 129``); dividing by it makes the corner exactly 1/4, so
    pixel shares taken as mixed differences sum to exactly 1 over the
    support.  Results are cached; the array is shared, hence read-only.

    Examples
    --------
    >>> table = quadrant_column_table("wendland_c2", 33)
    >>> float(table[-1, -1]), float(table[0, 10]), table.shape
    (0.25, 0.0, (33, 33))
    """
    record = _get_family(family)
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 2:
        raise ValueError(f"'n' must be an integer >= 2 (e.g. 513); got {n!r}")
    n_cells = int(n) - 1
    nodes, weights = np.polynomial.legendre.leggauss(_CELL_QUADRATURE_ORDER)
    # Quadrature abscissae in every cell along one axis: shape (n_cells, order).
    abscissae = (np.arange(n_cells)[:, None] + 0.5 * (nodes[None, :] + 1.0)) / n_cells
    weight_2d = np.outer(weights, weights) * (0.5 / n_cells) ** 2
    cells = np.empty((n_cells, n_cells))
    for start in range(0, n_cells, _ROWS_PER_BLOCK):
        y = abscissae[start:start + _ROWS_PER_BLOCK]
        radius = np.sqrt(y[:, None, :, None] ** 2 + abscissae[None, :, None, :] ** 2)
        values = np.maximum(_column_closed_form(record, np.minimum(radius, 1.0)), 0.0)
        cells[start:start + _ROWS_PER_BLOCK] = np.einsum("yxkl,kl->yx", values, weight_2d)
    table = np.zeros((n_cells + 1, n_cells + 1))
    table[1:, 1:] = np.cumsum(np.cumsum(cells, axis=0), axis=1)
    table *= 0.25 / table[-1, -1]
    table.setflags(write=False)
    return table
