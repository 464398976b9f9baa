"""Twin tests: the compiled kernels of pipeline/grid/_jit.py against tests/naive.py."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import norm

from pipeline.grid import _deposit, _jit, deposit_particles
from pipeline.kernels import KERNEL_FAMILIES, default_support_factor, quadrant_column_table

import naive

# Naive's own quadrature error (48-point Gauss-Legendre per pixel, ~3e-8) plus the line cut
# at 6 sigma, which moves 2e-9 of a line between channels.
NAIVE_ATOL = 1e-7

SHAPE = (9, 11, 13)  # (n_chan, n_y, n_x): odd and unequal so axis swaps cannot hide


def _case(rng, n, h_range, *, sigma_choices=(0.0, 0.2, 1.5, 4.0)):
    """Particles scattered over and beyond a SHAPE cube, log-uniform h in ``h_range`` (pixels)."""
    n_chan, n_y, n_x = SHAPE
    return dict(
        x_pix=rng.uniform(-3.0, n_x + 2.0, n),
        y_pix=rng.uniform(-3.0, n_y + 2.0, n),
        h_pix=np.exp(rng.uniform(math.log(h_range[0]), math.log(h_range[1]), n)),
        chan_centre=rng.uniform(-2.0, n_chan + 1.0, n),
        chan_sigma=rng.choice(sigma_choices, n),
        weight=rng.uniform(0.5, 2.0, n),
    )


def _compare_one_by_one(case, kernel, support_factor=None):
    """Deposit each particle alone and compare with the naive twin to the table's accuracy."""
    for p in range(len(case["x_pix"])):
        single = {name: values[p:p + 1] for name, values in case.items()}
        compiled = np.zeros(SHAPE)
        report = deposit_particles(**single, out=compiled, kernel=kernel, support_factor=support_factor)
        expected = naive.naive_deposit(**single, shape=SHAPE, kernel=kernel,
                                       support_factor=support_factor)
        atol = single["weight"][0] * (naive.PIXEL_SHARE_ATOL + NAIVE_ATOL)
        assert_allclose(compiled, expected, rtol=0.0, atol=atol, err_msg=f"particle {p}: {single}")
        # The outside fraction is the complement of what naive puts in the cube.
        assert_allclose(report.outside_fraction, 1.0 - expected.sum() / single["weight"][0],
                        atol=naive.PIXEL_SHARE_ATOL + NAIVE_ATOL)


@pytest.mark.parametrize("kernel", KERNEL_FAMILIES)
@pytest.mark.parametrize("h_range", [(0.05, 0.3), (0.3, 3.0), (3.0, 50.0)],
                         ids=["h-below-pixel", "h-near-pixel", "h-above-pixel"])
def test_deposit_matches_naive(kernel, h_range, rng):
    _compare_one_by_one(_case(rng, 6, h_range), kernel)


def test_deposit_matches_naive_with_support_factor_one(rng):
    # Gadget-style h (the support radius itself).
    _compare_one_by_one(_case(rng, 6, (0.1, 10.0)), "wendland_c2", support_factor=1.0)


def test_deposit_matches_naive_on_edges(rng):
    # Particles centred exactly on pixel edges, on the field edge and just beyond it, on channel edges.
    n_chan, n_y, n_x = SHAPE
    case = dict(
        x_pix=np.array([-0.5, 3.5, n_x - 0.5, -1.2, 6.0, 12.7]),
        y_pix=np.array([4.0, -0.5, 2.5, 5.0, n_y - 0.5, -0.9]),
        h_pix=np.array([0.05, 0.4, 2.0, 0.7, 20.0, 0.3]),
        chan_centre=np.array([4.5, 0.0, -0.5, 8.5, 3.0, 9.2]),
        chan_sigma=np.array([0.0, 0.0, 0.7, 0.0, 9.0, 0.5]),
        weight=np.array([1.0, 2.0, 0.5, 1.5, 1.0, 3.0]),
    )
    _compare_one_by_one(case, "cubic_spline")


def test_many_particles_accumulate_as_the_sum_of_single_ones(rng):
    case = _case(rng, 40, (0.05, 20.0))
    together = np.zeros(SHAPE)
    deposit_particles(**case, out=together)
    separate = np.zeros(SHAPE)
    for p in range(40):
        single = np.zeros(SHAPE)
        deposit_particles(**{name: values[p:p + 1] for name, values in case.items()}, out=single)
        separate += single
    assert_allclose(together, separate, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("t", [-9.0, -8.5, -7.3, -3.0, -1.234, -0.01, 0.0, 0.5, 2.7, 8.49, 40.0])
def test_gaussian_cdf_matches_scipy(t):
    # Reference: scipy.stats.norm; the Hermite table is accurate to 8.5e-11 absolute.
    assert_allclose(_jit._gaussian_cdf_kernel(t), norm.cdf(t), rtol=0.0, atol=1e-10)


def test_gaussian_cdf_is_accurate_between_nodes():
    # The worst case of cubic Hermite interpolation lies mid-way between nodes, where phi''' peaks.
    t = np.linspace(-3.0, 3.0, 20001)
    compiled = np.array([_jit._gaussian_cdf_kernel(value) for value in t])
    assert np.abs(compiled - norm.cdf(t)).max() < 1e-10


@pytest.mark.parametrize(("centre", "sigma"), [(4.2, 1.3), (0.1, 3.0), (8.7, 0.25), (4.5, 0.0),
                                               (-0.6, 0.0), (-30.0, 2.0), (3.0, 1e-12)])
def test_channel_window_matches_naive(centre, sigma):
    n_chan = 9
    weights = np.empty(n_chan + 1)
    first, stop, total = _jit._channel_window_kernel(centre, sigma, n_chan, weights)
    compiled = np.zeros(n_chan)
    compiled[first:stop] = weights[:max(stop - first, 0)] / total
    expected = np.array([naive.channel_share(centre, sigma, k) for k in range(n_chan)])
    # Cut at 6 sigma, renormalised: channels differ from the uncut line by ~2e-9 of it.
    assert_allclose(compiled, expected, rtol=0.0, atol=5e-9)


@pytest.mark.parametrize("kernel", ["cubic_spline", "gaussian"])
def test_inside_fraction_matches_naive(kernel, rng):
    case = _case(rng, 12, (0.05, 30.0))
    table = quadrant_column_table(kernel, _deposit._TABLE_SIZE)
    factor = default_support_factor(kernel)
    for p in range(12):
        fraction = _jit._inside_fraction_kernel(case["x_pix"][p], case["y_pix"][p],
                                                factor * case["h_pix"][p], case["chan_centre"][p],
                                                case["chan_sigma"][p], table, *SHAPE)
        single = {name: values[p:p + 1] for name, values in case.items()}
        expected = naive.naive_deposit(**dict(single, weight=np.ones(1)), shape=SHAPE, kernel=kernel).sum()
        assert_allclose(fraction, expected, atol=naive.PIXEL_SHARE_ATOL + NAIVE_ATOL)


def test_inside_weight_sums_and_counts(rng):
    case = _case(rng, 200, (0.05, 30.0))
    table = quadrant_column_table("cubic_spline", _deposit._TABLE_SIZE)
    inside, outside, n_larger = _jit._inside_weight_kernel(*case.values(), 2.0, table, *SHAPE, 11.0)
    fractions = np.array([_jit._inside_fraction_kernel(case["x_pix"][p], case["y_pix"][p],
                                                       2.0 * case["h_pix"][p], case["chan_centre"][p],
                                                       case["chan_sigma"][p], table, *SHAPE)
                          for p in range(200)])
    assert_allclose(inside, np.sum(case["weight"] * fractions), rtol=1e-13)
    assert_allclose(outside, np.sum(case["weight"] * (1.0 - fractions)), rtol=1e-13)
    assert n_larger == np.count_nonzero(4.0 * case["h_pix"] > 11.0)


def test_compensated_sum_keeps_small_terms():
    total, error = 0.0, 0.0
    for value in (1e16, 1.0, -1e16, 1.0):
        total, error = _jit._neumaier_add_kernel(total, error, value)
    assert total + error == 2.0


@pytest.mark.parametrize(("tile_rows", "tile_columns"), [(16, 16), (4, 5), (3, 100)])
def test_sort_by_tile_matches_naive(tile_rows, tile_columns, rng):
    shape = (9, 37, 29)
    n = 300
    case = dict(x_pix=rng.uniform(-6, 35, n), y_pix=rng.uniform(-6, 43, n),
                h_pix=np.exp(rng.uniform(np.log(0.05), np.log(8.0), n)),
                chan_centre=rng.uniform(-4, 12, n), chan_sigma=rng.choice([0.0, 0.3, 2.0], n),
                weight=rng.uniform(0.1, 1.0, n))
    n_bands = -(-shape[1] // tile_rows)
    n_tiles = n_bands * -(-shape[2] // tile_columns)
    particles = np.empty((n, 6))
    counts = np.empty(n_tiles + 1, np.int64)
    band_row_range = np.empty((n_bands, 2), np.int64)
    band_cost = np.empty(n_bands)
    n_kept = _jit._sort_by_tile_kernel(*case.values(), 2.0, *shape, tile_rows, tile_columns,
                                       np.empty(n, np.int64), counts, particles, band_row_range,
                                       band_cost)
    expected = naive.sort_by_tile(*case.values(), support_factor=2.0, shape=shape, tile_rows=tile_rows,
                                  tile_columns=tile_columns)
    assert 0 < n_kept < n
    assert np.array_equal(particles[:n_kept], expected[0])
    assert np.array_equal(counts, expected[1])
    assert np.array_equal(band_row_range, expected[2])
    assert_allclose(band_cost, expected[3], rtol=1e-15)


def test_table_size_matches_the_one_naive_assumes():
    assert _deposit._TABLE_SIZE == naive.DEPOSIT_TABLE_SIZE
