"""Slow, obviously-correct twins of the compiled kernels in pipeline/grid/_jit.py.

Each twin uses plain Python loops and direct numerical integration, so the
compiled code can be compared against it on small seeded inputs.
"""

import functools
import math

import numpy as np

from pipeline.kernels import column_profile, default_support_factor

# Gauss-Legendre nodes per axis for one pixel's integral of the column profile (accurate to
# ~3e-8 of the particle against adaptive dblquad, far below the table's error).
_PIXEL_QUADRATURE_ORDER = 48

#: Nodes per axis of the quadrant table the deposit uses (pipeline/grid/_deposit.py).
DEPOSIT_TABLE_SIZE = 513

#: Upper bound of |M'| for every kernel, M the 1D projection (checked in tests/kernels/test_columns.py;
#: the steepest is Wendland C6 at 5.55).
MAX_PROJECTED_SLOPE = 6.0

#: Bilinear-interpolation error bound of the deposit's table, in units of the particle's weight:
#: (dx^2 / 8)(max|G_xx| + max|G_yy|) with dx = 1 / (n - 1); |G_xx(x, y)| <= max|M'| because F' has
#: one sign along a line.  About 5.7e-6 for 513 nodes.
TABLE_INTERPOLATION_ATOL = (1.0 / (DEPOSIT_TABLE_SIZE - 1)) ** 2 / 8.0 * 2.0 * MAX_PROJECTED_SLOPE

#: A pixel share is a mixed difference of four interpolated corners.
PIXEL_SHARE_ATOL = 4.0 * TABLE_INTERPOLATION_ATOL


@functools.lru_cache(maxsize=4)
def _legendre(order):
    """Return Gauss-Legendre nodes and weights on [-1, 1]."""
    return np.polynomial.legendre.leggauss(order)


def pixel_share(family, x0, x1, y0, y1, *, order=_PIXEL_QUADRATURE_ORDER):
    """Return the column profile integrated over ``[x0, x1] x [y0, y1]`` (units of H).

    The rectangle is clipped to the support square ``[-1, 1]^2`` and the
    integral is an ``order`` x ``order`` Gauss-Legendre sum of
    :func:`pipeline.kernels.column_profile`.
    """
    x0, x1 = max(x0, -1.0), min(x1, 1.0)
    y0, y1 = max(y0, -1.0), min(y1, 1.0)
    if x1 <= x0 or y1 <= y0:
        return 0.0
    nearest_x = 0.0 if x0 <= 0.0 <= x1 else min(abs(x0), abs(x1))
    nearest_y = 0.0 if y0 <= 0.0 <= y1 else min(abs(y0), abs(y1))
    if math.hypot(nearest_x, nearest_y) >= 1.0:
        return 0.0
    nodes, weights = _legendre(order)
    x = 0.5 * (x0 + x1) + 0.5 * (x1 - x0) * nodes
    y = 0.5 * (y0 + y1) + 0.5 * (y1 - y0) * nodes
    values = column_profile(family, np.minimum(np.hypot(x[None, :], y[:, None]), 1.0))
    return float(weights @ values @ weights) * 0.25 * (x1 - x0) * (y1 - y0)


def channel_share(centre, sigma, channel):
    """Return the part of a Gaussian line (or a delta line if ``sigma == 0``) in one channel."""
    if sigma == 0.0:
        return 1.0 if math.floor(centre + 0.5) == channel else 0.0
    scale = 1.0 / (math.sqrt(2.0) * sigma)
    return 0.5 * (math.erf((channel + 0.5 - centre) * scale) - math.erf((channel - 0.5 - centre) * scale))


def naive_deposit(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, *, shape,
                  kernel="cubic_spline", support_factor=None):
    """Return the cube that ``pipeline.grid.deposit_particles`` should produce from zeros.

    Every particle, pixel and channel is visited in plain loops: the pixel
    share is :func:`pixel_share` over the pixel's edges in units of the
    support radius ``H = support_factor * h_pix``, the channel share is the
    Gaussian line integrated over the channel's edges with ``math.erf`` (no
    cut in sigma).  ``support_factor=None`` is the family's usual factor.
    """
    if support_factor is None:
        support_factor = default_support_factor(kernel)
    n_chan, n_y, n_x = shape
    out = np.zeros(shape)
    for p in range(len(x_pix)):
        support = support_factor * h_pix[p]
        line = [channel_share(chan_centre[p], chan_sigma[p], k) for k in range(n_chan)]
        for j in range(n_y):
            y0 = (j - 0.5 - y_pix[p]) / support
            y1 = (j + 0.5 - y_pix[p]) / support
            for i in range(n_x):
                x0 = (i - 0.5 - x_pix[p]) / support
                x1 = (i + 0.5 - x_pix[p]) / support
                share = pixel_share(kernel, x0, x1, y0, y1)
                if share == 0.0:
                    continue
                for k in range(n_chan):
                    out[k, j, i] += weight[p] * share * line[k]
    return out


def sort_by_tile(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, *, support_factor, shape,
                 tile_rows, tile_columns):
    """Return what ``_sort_by_tile_kernel`` should produce, with numpy's stable argsort.

    Returns ``(particles, tile_start, band_row_range, band_cost)``: the particles
    reaching at least one voxel as rows (x, y, support, centre, sigma, weight)
    ordered by tile (row-major, tile rows = bands) and by input order within a
    tile; the first index of each tile plus the total; per band the lowest and
    highest rows reached by its particles; per band the contributions it will get.
    """
    n_chan, n_y, n_x = shape
    n_bands = -(-n_y // tile_rows)
    n_tile_columns = -(-n_x // tile_columns)
    support = h_pix * support_factor
    keys, rows = [], []
    band_row_range = np.tile([n_y, -1], (n_bands, 1))
    band_cost = np.zeros(n_bands)
    for p in range(len(x_pix)):
        row_first = max(math.floor(y_pix[p] - support[p] + 0.5), 0)
        row_last = min(math.floor(y_pix[p] + support[p] + 0.5), n_y - 1)
        column_first = max(math.floor(x_pix[p] - support[p] + 0.5), 0)
        column_last = min(math.floor(x_pix[p] + support[p] + 0.5), n_x - 1)
        cut = 0.0 if chan_sigma[p] == 0.0 else 6.0 * chan_sigma[p]
        chan_first = max(math.floor(chan_centre[p] - cut + 0.5), 0)
        chan_last = min(math.floor(chan_centre[p] + cut + 0.5), n_chan - 1)
        if row_first > row_last or column_first > column_last or chan_first > chan_last:
            continue
        band = min(max(math.floor((y_pix[p] + 0.5) / tile_rows), 0), n_bands - 1)
        column = min(max(math.floor((x_pix[p] + 0.5) / tile_columns), 0), n_tile_columns - 1)
        keys.append(band * n_tile_columns + column)
        rows.append([x_pix[p], y_pix[p], support[p], chan_centre[p], chan_sigma[p], weight[p]])
        band_row_range[band] = [min(band_row_range[band, 0], row_first),
                                max(band_row_range[band, 1], row_last)]
        for row in range(row_first, row_last + 1):
            band_cost[row // tile_rows] += (column_last - column_first + 1) * (chan_last - chan_first + 1)
    keys = np.array(keys, dtype=np.int64)
    order = np.argsort(keys, kind="stable")
    particles = np.array(rows).reshape(-1, 6)[order]
    tile_start = np.searchsorted(keys[order], np.arange(n_bands * n_tile_columns + 1))
    return particles, tile_start, band_row_range, band_cost
