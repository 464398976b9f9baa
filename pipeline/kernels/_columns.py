"""Line-of-sight (column) kernel profiles and their cumulative pixel-integration tables.

All lengths are in units of the support radius ``H = support_factor * h``
(config key ``grid.support_factor``; 2 for Monaghan/Price smoothing lengths, 1
when the snapshot stores the support radius itself).
"""

import functools

import numpy as np

from ._families import _as_radius, _get_family

__all__ = ["column_profile", "cumulative_column_table"]

# Gauss-Legendre points per cell and per axis used to integrate F over one table cell.
_CELL_QUADRATURE_ORDER = 4

# Rows of table cells evaluated at once while building a table (bounds the temporaries).
_ROWS_PER_BLOCK = 64


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
    The kernel is a sum of truncated polynomials ``sum(c_n q^n)`` for
    ``q < a``; each power is integrated along the chord ``|z| < Z =
    sqrt(a^2 - b^2)`` in closed form with the recurrence
    ``I_n = (Z a^n + n b^2 I_{n-2}) / (n + 1)``, ``I_0 = Z``,
    ``I_{-1} = asinh(Z / b)``.  Absolute accuracy is about 1e-14 (cancellation
    between the polynomial terms), so values within ~1e-3 of the support edge
    carry a larger relative error; negative round-off is clipped to zero.

    Examples
    --------
    >>> round(float(column_profile("cubic_spline", 0.0)), 6)  # 6/pi, check-values SK-05
    1.909859
    """
    record = _get_family(family)
    b = _as_radius(b, name="b")
    total = np.zeros_like(b)
    for support, coefficients in record.pieces:
        total += _column_piece(b, support, coefficients)
    return np.maximum(record.norm_3d * total, 0.0)


@functools.lru_cache(maxsize=8)
def cumulative_column_table(family: str, n: int) -> np.ndarray:
    """Return the cumulative integral of the column profile on an ``n`` x ``n`` grid.

    Parameters
    ----------
    family : str
        One of :data:`~pipeline.kernels.KERNEL_FAMILIES`.
    n : int
        Nodes per axis, odd and at least 3; node ``i`` is at
        ``-1 + 2 i / (n - 1)`` (units of the support radius ``H``), so the
        grid is ``numpy.linspace(-1, 1, n)`` and includes 0.

    Returns
    -------
    numpy.ndarray, shape (n, n), read-only
        ``table[j, i] = C(x_i, y_j) = int_{-1}^{x_i} int_{-1}^{y_j} F dy dx``
        with ``F`` the column profile in units of ``H**-2``.  The low edges
        (``i = 0`` or ``j = 0``) are exactly 0 and the corner ``[-1, -1]`` is
        exactly 1.  ``C`` is symmetric, ``C(x, y) = C(y, x)``.

    Raises
    ------
    ValueError
        If ``family`` is unknown or ``n`` is not an odd integer >= 3.

    Notes
    -----
    Each table cell's share of ``F`` is integrated with a 4 x 4
    Gauss-Legendre rule on one quadrant (the profile is radial, so the other
    quadrants are mirror images) and the cells are summed cumulatively.  The
    total before normalisation differs from 1 by the quadrature error (below
    1e-9 for ``n >= 257``); dividing by it makes the corner exactly 1, so
    pixel shares taken as corner differences sum to exactly 1 over the
    support.  Results are cached; the array is shared, hence read-only.

    Examples
    --------
    >>> table = cumulative_column_table("wendland_c2", 65)
    >>> float(table[-1, -1]), float(table[0, 10]), round(float(table[32, 32]), 12)
    (1.0, 0.0, 0.25)
    """
    _get_family(family)
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 3 or n % 2 == 0:
        raise ValueError(f"'n' must be an odd integer >= 3 (e.g. 1025); got {n!r}")
    n = int(n)
    n_half = (n - 1) // 2
    nodes, weights = np.polynomial.legendre.leggauss(_CELL_QUADRATURE_ORDER)
    # Quadrature abscissae in every quadrant cell along one axis: shape (n_half, order).
    abscissae = (np.arange(n_half)[:, None] + 0.5 * (nodes[None, :] + 1.0)) / n_half
    weight_2d = np.outer(weights, weights) * (0.5 / n_half) ** 2
    quadrant = np.empty((n_half, n_half))
    for start in range(0, n_half, _ROWS_PER_BLOCK):
        y = abscissae[start:start + _ROWS_PER_BLOCK]
        radius = np.sqrt(y[:, None, :, None] ** 2 + abscissae[None, :, None, :] ** 2)
        values = column_profile(family, np.minimum(radius, 1.0))
        quadrant[start:start + _ROWS_PER_BLOCK] = np.einsum("yxkl,kl->yx", values, weight_2d)
    # Cells of the full grid, low y and low x first: the quadrant mirrored about both axes.
    cells = np.block([[quadrant[::-1, ::-1], quadrant[::-1, :]], [quadrant[:, ::-1], quadrant]])
    table = np.zeros((n, n))
    table[1:, 1:] = np.cumsum(np.cumsum(cells, axis=0), axis=1)
    table /= table[-1, -1]
    table.setflags(write=False)
    return table
