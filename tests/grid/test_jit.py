"""Twin tests: the compiled kernels of pipeline/grid/_jit.py against tests/naive.py."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import norm

from pipeline.grid import _deposit, _jit, deposit_particles
from pipeline.kernels import KERNEL_FAMILIES, cumulative_column_table

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


def _compare_one_by_one(case, kernel, support_factor=2.0):
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
    _compare_one_by_one(_case(rng, 8, h_range), kernel)


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


@pytest.mark.parametrize(("lower", "upper"), [(-0.3, 0.4), (2.0, 2.5), (-7.0, -6.0), (-40.0, 40.0),
                                              (9.0, 12.0), (0.0, 0.0)])
def test_gaussian_interval_matches_scipy(lower, upper):
    # Reference: scipy.stats.norm; the tails are taken without cancellation (relative accuracy).
    expected = norm.cdf(upper) - norm.cdf(lower) if upper <= 0 else norm.sf(lower) - norm.sf(upper)
    assert_allclose(_jit._gaussian_interval_kernel(lower, upper), expected, rtol=1e-13, atol=1e-300)


@pytest.mark.parametrize(("centre", "sigma"), [(4.2, 1.3), (0.1, 3.0), (8.7, 0.25), (4.5, 0.0),
                                               (-0.6, 0.0), (-30.0, 2.0), (3.0, 1e-12)])
def test_channel_window_matches_naive(centre, sigma):
    n_chan = 9
    weights = np.empty(n_chan)
    first, stop, total = _jit._channel_window_kernel(centre, sigma, n_chan, weights)
    compiled = np.zeros(n_chan)
    compiled[first:stop] = weights[:max(stop - first, 0)] / total
    expected = np.array([naive.channel_share(centre, sigma, k) for k in range(n_chan)])
    # Cut at 6 sigma, renormalised: channels differ from the uncut line by ~2e-9 of it.
    assert_allclose(compiled, expected, rtol=0.0, atol=5e-9)


def test_inside_fraction_matches_naive(rng):
    case = _case(rng, 12, (0.05, 30.0))
    case.pop("weight")
    table = cumulative_column_table("cubic_spline", _deposit._TABLE_SIZE)
    fraction = np.empty(12)
    _jit._inside_fraction_kernel(case["x_pix"], case["y_pix"], 2.0 * case["h_pix"], case["chan_centre"],
                                 case["chan_sigma"], table, *SHAPE, fraction)
    for p in range(12):
        single = {name: values[p:p + 1] for name, values in case.items()}
        expected = naive.naive_deposit(**single, weight=np.ones(1), shape=SHAPE).sum()
        assert_allclose(fraction[p], expected, atol=naive.PIXEL_SHARE_ATOL + NAIVE_ATOL)


def test_table_size_matches_the_one_naive_assumes():
    assert _deposit._TABLE_SIZE == naive.DEPOSIT_TABLE_SIZE
