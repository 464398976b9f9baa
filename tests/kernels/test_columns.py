"""Column profiles and cumulative column tables against direct quadrature of the 3D kernel."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import quad

from pipeline.kernels import KERNEL_FAMILIES, column_profile, cumulative_column_table, kernel_3d

from naive import DEPOSIT_TABLE_SIZE, MAX_PROJECTED_SLOPE, TABLE_INTERPOLATION_ATOL


def _line_of_sight(family, b):
    """Return the 3D kernel integrated along a chord at impact parameter b, by adaptive quadrature."""
    if b >= 1.0:
        return 0.0
    half_chord = math.sqrt(1.0 - b * b)
    breaks = [math.sqrt(0.25 - b * b)] if b < 0.5 else None
    integrand = lambda z: float(kernel_3d(family, math.hypot(b, z)))  # noqa: E731
    return 2.0 * quad(integrand, 0.0, half_chord, points=breaks, epsabs=1e-15, epsrel=1e-13,
                      limit=200)[0]


def _interpolate(table, x, y):
    """Bilinear interpolation of a cumulative table at (x, y), units of H (as the deposit does)."""
    n = table.shape[0]
    tx, ty = (x + 1.0) * (n - 1) / 2.0, (y + 1.0) * (n - 1) / 2.0
    i, j = min(int(tx), n - 2), min(int(ty), n - 2)
    fx, fy = tx - i, ty - j
    return ((1 - fy) * ((1 - fx) * table[j, i] + fx * table[j, i + 1])
            + fy * ((1 - fx) * table[j + 1, i] + fx * table[j + 1, i + 1]))


def _breakpoints(low, high, offset):
    """Return where a line at ``offset`` from the centre crosses 0 and the circles b = 1/2 (if inside)."""
    points = [0.0]
    if abs(offset) < 0.5:
        points += [-math.sqrt(0.25 - offset * offset), math.sqrt(0.25 - offset * offset)]
    return [p for p in points if low < p < high] or None


def _cumulative_by_quadrature(family, x, y):
    """Return int_{-1}^x int_{-1}^y F dy dx by nested adaptive quadrature, split at the kernel's features."""
    def along_y(u):
        half_chord = math.sqrt(max(1.0 - u * u, 0.0))
        high = min(y, half_chord)
        if high <= -half_chord:
            return 0.0
        profile = lambda v: float(column_profile(family, min(math.hypot(u, v), 1.0)))  # noqa: E731
        return quad(profile, -half_chord, high, points=_breakpoints(-half_chord, high, u),
                    epsabs=1e-11, epsrel=1e-11, limit=200)[0]

    return quad(along_y, -1.0, x, points=_breakpoints(-1.0, x, 0.0), epsabs=1e-11, epsrel=1e-11,
                limit=200)[0]


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
@pytest.mark.parametrize("b", [0.0, 0.05, 0.3, 0.49, 0.5, 0.51, 0.7, 0.9, 0.97])
def test_column_matches_line_of_sight_integral(family, b):
    # Definition (check-values SK-05): F(b) = int W(sqrt(b^2 + z^2)) dz over the chord.
    assert_allclose(column_profile(family, b), _line_of_sight(family, b), rtol=1e-9, atol=1e-15)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_column_integrates_to_one(family):
    # SK-05: int F(b) 2 pi b db = 1.
    total = quad(lambda b: 2.0 * math.pi * b * column_profile(family, b), 0.0, 1.0, points=[0.5],
                 epsabs=1e-15, epsrel=1e-13)[0]
    assert_allclose(total, 1.0, rtol=1e-12)


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
    table = cumulative_column_table(family, 129)
    assert table.shape == (129, 129)
    assert table[-1, -1] == 1.0
    assert np.all(table[0, :] == 0.0) and np.all(table[:, 0] == 0.0)
    assert np.all(np.diff(table, axis=0) >= 0.0) and np.all(np.diff(table, axis=1) >= 0.0)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_table_symmetries(family):
    # F is radial: C(x, y) = C(y, x), C(0, 0) = 1/4 and C(-x, 1) = 1 - C(x, 1).
    table = cumulative_column_table(family, 257)
    assert_allclose(table, table.T, atol=1e-14)
    assert_allclose(table[128, 128], 0.25, atol=1e-14)
    assert_allclose(table[-1, ::-1], 1.0 - table[-1, :], atol=1e-14)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_table_nodes_match_quadrature(family):
    # Node values are cell sums of a Gauss-Legendre rule; compare with adaptive dblquad.
    table = cumulative_column_table(family, 65)
    grid = np.linspace(-1.0, 1.0, 65)
    for i, j in [(10, 40), (50, 20), (64, 5)]:
        assert_allclose(table[j, i], _cumulative_by_quadrature(family, grid[i], grid[j]), atol=1e-9)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_deposit_table_interpolates_within_bound(family, rng):
    # The accuracy the deposit inherits: bilinear interpolation between nodes of the 1025 table.
    table = cumulative_column_table(family, DEPOSIT_TABLE_SIZE)
    for x, y in rng.uniform(-1.0, 1.0, (6, 2)):
        exact = _cumulative_by_quadrature(family, x, y)
        assert abs(_interpolate(table, x, y) - exact) < TABLE_INTERPOLATION_ATOL


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_projected_kernel_slope_bound(family):
    # The premise of TABLE_INTERPOLATION_ATOL: |M'| < MAX_PROJECTED_SLOPE, M(x) = int F dy the 1D
    # projection of the kernel, here by differences of M on a fine grid (M from direct quadrature).
    x = np.linspace(0.0, 1.0, 401)
    projection = np.array([2.0 * quad(lambda v: float(column_profile(family, min(math.hypot(u, v), 1.0))),
                                      0.0, math.sqrt(1.0 - u * u), epsabs=1e-12)[0] if u < 1.0 else 0.0
                           for u in x])
    slope = np.abs(np.diff(projection)) / np.diff(x)
    assert 2.0 < slope.max() < MAX_PROJECTED_SLOPE


def test_table_is_cached_and_read_only():
    first = cumulative_column_table("cubic_spline", 33)
    assert cumulative_column_table("cubic_spline", 33) is first
    with pytest.raises(ValueError, match="read-only"):
        first[1, 1] = 0.5


@pytest.mark.parametrize("n", [2, 4, 1, 5.0, True, "65"])
def test_table_refuses_bad_size(n):
    with pytest.raises(ValueError, match="'n' must be an odd integer >= 3"):
        cumulative_column_table("cubic_spline", n)


def test_table_refuses_unknown_family():
    with pytest.raises(ValueError, match="'family' must be one of"):
        cumulative_column_table("quintic", 65)
