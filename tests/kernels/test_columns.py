"""Column profiles and quadrant column tables against direct quadrature of the 3D kernel."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import quad

from pipeline.kernels import KERNEL_FAMILIES, column_profile, kernel_3d, quadrant_column_table

from naive import DEPOSIT_TABLE_SIZE, MAX_PROJECTED_SLOPE, TABLE_INTERPOLATION_ATOL


# Radii where a family changes piece.
BREAKS = (1.0 / 3.0, 0.5, 2.0 / 3.0)


def _line_of_sight(family, b):
    """Return the 3D kernel integrated along a chord at impact parameter b, by adaptive quadrature."""
    if b >= 1.0:
        return 0.0
    half_chord = math.sqrt(1.0 - b * b)
    breaks = [math.sqrt(a * a - b * b) for a in BREAKS if a > b] or None
    integrand = lambda z: float(kernel_3d(family, math.hypot(b, z)))  # noqa: E731
    return 2.0 * quad(integrand, 0.0, half_chord, points=breaks, epsabs=1e-300, epsrel=1e-13,
                      limit=200)[0]


def _interpolate(table, x, y):
    """Signed mass G(x, y) by bilinear interpolation of a quadrant table (as the deposit does)."""
    n = table.shape[0]
    tx, ty = min(abs(x), 1.0) * (n - 1), min(abs(y), 1.0) * (n - 1)
    i, j = min(int(tx), n - 2), min(int(ty), n - 2)
    fx, fy = tx - i, ty - j
    return math.copysign(1.0, x) * math.copysign(1.0, y) * (
        (1 - fy) * ((1 - fx) * table[j, i] + fx * table[j, i + 1])
        + fy * ((1 - fx) * table[j + 1, i] + fx * table[j + 1, i + 1]))


# Gauss-Legendre nodes per smooth segment of the reference quadratures below.
_ORDER = 48


def _legendre_sum(function, low, high, cuts):
    """Integrate a vectorised ``function`` over [low, high] with Gauss-Legendre, split at ``cuts``."""
    nodes, weights = np.polynomial.legendre.leggauss(_ORDER)
    ends = [low, *sorted(c for c in cuts if low < c < high), high]
    total = 0.0
    for start, stop in zip(ends[:-1], ends[1:]):
        points = 0.5 * (start + stop) + 0.5 * (stop - start) * nodes
        total += 0.5 * (stop - start) * float(weights @ function(points))
    return total


def _strip(family, u, high):
    """Return int_0^high F(u, v) dv, split where the chord at u crosses the pieces and the support."""
    high = min(high, math.sqrt(max(1.0 - u * u, 0.0)))
    if high <= 0.0:
        return 0.0
    cuts = [math.sqrt(a * a - u * u) for a in BREAKS if a > u]
    return _legendre_sum(lambda v: column_profile(family, np.minimum(np.hypot(u, v), 1.0)), 0.0, high,
                         cuts)


def _mass_by_quadrature(family, x, y):
    """Return int_0^x int_0^y F dy dx (x, y >= 0) by nested Gauss-Legendre quadrature split at the features.

    The integrand is smooth between the piece circles and the support edge, so each segment
    converges to ~1e-12 (agreed with scipy's adaptive dblquad to 3e-10 or better when this test
    was written).
    """
    cuts = [a for a in (*BREAKS, 1.0)] + [math.sqrt(max(a * a - y * y, 0.0)) for a in (*BREAKS, 1.0)
                                          if a > y]
    return _legendre_sum(lambda us: np.array([_strip(family, u, y) for u in us]), 0.0, min(x, 1.0),
                         cuts)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
@pytest.mark.parametrize("b", [0.0, 0.05, 0.3, 0.34, 0.49, 0.5, 0.51, 0.7, 0.9, 0.97, 0.995])
def test_column_matches_line_of_sight_integral(family, b):
    # Definition (check-values SK-05): F(b) = int W(sqrt(b^2 + z^2)) dz over the chord, here by
    # direct numerical integration of the 3D kernel; relative accuracy even near the support edge.
    assert_allclose(column_profile(family, b), _line_of_sight(family, b), rtol=1e-9, atol=1e-300)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_column_integrates_to_one(family):
    # SK-05: int F(b) 2 pi b db = 1.
    total = quad(lambda b: 2.0 * math.pi * b * column_profile(family, b), 0.0, 1.0, points=BREAKS,
                 epsabs=1e-15, epsrel=1e-13)[0]
    assert_allclose(total, 1.0, rtol=1e-12)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_column_switch_to_chord_quadrature_is_seamless(family):
    # The two evaluation methods meet at b = 1/2 (pipeline/kernels/_columns.py _EDGE_START).
    below, above = column_profile(family, [0.5 - 1e-12, 0.5])
    assert_allclose(below, above, rtol=1e-10)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_column_is_zero_outside_and_never_negative(family):
    b = np.linspace(0.0, 2.0, 20001)
    values = column_profile(family, b)
    assert np.all(values >= 0.0)
    assert np.all(values[b >= 1.0] == 0.0)
    assert np.all(np.diff(values) <= 1e-14)


def test_column_handles_tiny_impact_parameters():
    # b -> 0 is a limit of the b^2 asinh(Z/b) term; no warning, no NaN, continuous at 0.
    b = np.array([0.0, 1e-320, 1e-200, 1e-12])
    assert_allclose(column_profile("cubic_spline", b), 6.0 / math.pi, rtol=1e-12)


def test_column_refuses_negative_impact_parameter():
    with pytest.raises(ValueError, match="'b' must be finite and non-negative"):
        column_profile("cubic_spline", -0.5)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_table_edges_and_corner_are_exact(family):
    table = quadrant_column_table(family, 129)
    assert table.shape == (129, 129)
    assert table[-1, -1] == 0.25
    assert np.all(table[0, :] == 0.0) and np.all(table[:, 0] == 0.0)
    assert np.all(np.diff(table, axis=0) >= 0.0) and np.all(np.diff(table, axis=1) >= 0.0)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_table_is_symmetric(family):
    # F is radial: Q(u, v) = Q(v, u).
    table = quadrant_column_table(family, 129)
    assert_allclose(table, table.T, atol=1e-14)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_table_nodes_match_quadrature(family):
    # Node values are cell sums of a 4 x 4 Gauss-Legendre rule; compare with an independent
    # quadrature split at the kernel's features.
    table = quadrant_column_table(family, 33)
    grid = np.linspace(0.0, 1.0, 33)
    for i, j in [(5, 20), (25, 10), (32, 3)]:
        assert_allclose(table[j, i], _mass_by_quadrature(family, grid[i], grid[j]), atol=1e-9)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_deposit_table_interpolates_within_bound(family, rng):
    # The accuracy the deposit inherits: bilinear interpolation between nodes of its 513 table,
    # at points in all four quadrants (G is odd in x and in y).
    table = quadrant_column_table(family, DEPOSIT_TABLE_SIZE)
    for x, y in rng.uniform(-1.0, 1.0, (4, 2)):
        exact = math.copysign(1.0, x) * math.copysign(1.0, y) * _mass_by_quadrature(family, abs(x), abs(y))
        assert abs(_interpolate(table, x, y) - exact) < TABLE_INTERPOLATION_ATOL


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_projected_kernel_slope_bound(family):
    # The premise of TABLE_INTERPOLATION_ATOL: |M'| < MAX_PROJECTED_SLOPE, M(x) = int F dy the 1D
    # projection of the kernel, here by differences of M on a fine grid (M from Gauss-Legendre quadrature).
    x = np.linspace(0.0, 1.0, 401)
    projection = np.array([2.0 * _strip(family, u, 1.0) for u in x])
    slope = np.abs(np.diff(projection)) / np.diff(x)
    assert 2.0 < slope.max() < MAX_PROJECTED_SLOPE


def test_table_is_cached_and_read_only():
    first = quadrant_column_table("cubic_spline", 33)
    assert quadrant_column_table("cubic_spline", 33) is first
    with pytest.raises(ValueError, match="read-only"):
        first[1, 1] = 0.5


@pytest.mark.parametrize("n", [1, 0, 5.0, True, "65"])
def test_table_refuses_bad_size(n):
    with pytest.raises(ValueError, match="'n' must be an integer >= 2"):
        quadrant_column_table("cubic_spline", n)


def test_table_refuses_unknown_family():
    with pytest.raises(ValueError, match="'family' must be one of"):
        quadrant_column_table("quintic", 65)
