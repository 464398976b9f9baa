"""Every compiled (numba) kernel of the package: the particle deposit and its bookkeeping.

The kernels take plain contiguous float64 arrays in pixel and channel units and
write into a preallocated cube.  Conventions shared by all of them:

* pixel ``i`` is centred at ``i`` and spans ``[i - 0.5, i + 0.5]`` (x = axis 2
  of the cube, y = axis 1); channel ``k`` spans ``[k - 0.5, k + 0.5]``;
* ``support_pix`` is the kernel support radius ``H`` in pixels (the smoothing
  length times ``grid.support_factor``);
* ``table`` is a cumulative column table (``pipeline.kernels``), ``table[j, i]``
  the kernel mass in ``x < -1 + 2 i / (n - 1)``, ``y < -1 + 2 j / (n - 1)``
  (units of ``H``), read with bilinear interpolation;
* the line is a Gaussian of sigma ``chan_sigma`` channels, cut at
  ``_LINE_CUT_SIGMA`` sigma and renormalised so its channel weights sum to 1;
  ``chan_sigma == 0`` puts the whole line in the channel containing its centre.
"""

import contextlib
import math

import numba
import numpy as np
from numba import njit, prange

_JIT_OPTIONS = {"nogil": True, "cache": True, "fastmath": {"contract", "arcp", "nsz"}}

#: Half-width of the line window in sigma; the Gaussian beyond it (2e-9 of the line) is
#: given back to the window by renormalisation.
_LINE_CUT_SIGMA = 6.0

_SQRT_HALF = math.sqrt(0.5)


@njit(**_JIT_OPTIONS)
def _gaussian_interval_kernel(lower, upper):
    """Return the unit Gaussian's mass between ``lower`` and ``upper`` (in sigma), free of cancellation.

    Parameters
    ----------
    lower, upper : float
        Interval bounds in units of sigma, ``lower <= upper``.
    """
    if lower >= 0.0:
        return 0.5 * (math.erfc(lower * _SQRT_HALF) - math.erfc(upper * _SQRT_HALF))
    if upper <= 0.0:
        return 0.5 * (math.erfc(-upper * _SQRT_HALF) - math.erfc(-lower * _SQRT_HALF))
    return 0.5 * (math.erf(upper * _SQRT_HALF) - math.erf(lower * _SQRT_HALF))


@njit(**_JIT_OPTIONS)
def _line_window_kernel(centre, sigma, n_chan):
    """Return the line's channel range inside the cube and the Gaussian mass of its whole window.

    Parameters
    ----------
    centre : float
        Line centre in channel coordinates.
    sigma : float
        Gaussian sigma of the line in channels (0 for a delta line).
    n_chan : int
        Channels in the cube.

    Returns
    -------
    first, last : float
        First and last channel (integers) of the window that lie in the cube;
        ``first > last`` when the line misses the cube.
    norm : float
        Mass of the unit Gaussian over the whole window (channels containing
        ``centre -+ _LINE_CUT_SIGMA sigma``), 1 for a delta line.
    """
    if sigma == 0.0:
        channel = math.floor(centre + 0.5)
        return max(channel, 0.0), min(channel, n_chan - 1.0), 1.0
    window_first = math.floor(centre - _LINE_CUT_SIGMA * sigma + 0.5)
    window_last = math.floor(centre + _LINE_CUT_SIGMA * sigma + 0.5)
    norm = _gaussian_interval_kernel((window_first - 0.5 - centre) / sigma,
                                     (window_last + 0.5 - centre) / sigma)
    return max(window_first, 0.0), min(window_last, n_chan - 1.0), norm


@njit(**_JIT_OPTIONS)
def _channel_window_kernel(centre, sigma, n_chan, weights):
    """Fill the line's weights for the channels inside the cube; return ``(first, stop, norm)``.

    Parameters
    ----------
    centre, sigma, n_chan
        As for ``_line_window_kernel``.
    weights : numpy.ndarray, float64, shape (>= n_chan,)
        Output: ``weights[k - first]`` is the unnormalised weight of channel
        ``k`` for ``first <= k < stop``; divide by ``norm`` (the weight of the
        whole window) to get fractions of the line.  ``stop <= first`` when
        the line misses the cube.
    """
    first, last, norm = _line_window_kernel(centre, sigma, n_chan)
    if first > last:
        return 0, 0, norm
    first_index = int(first)
    stop_index = int(last) + 1
    if sigma == 0.0:
        weights[0] = 1.0
        return first_index, stop_index, norm
    for channel in range(first_index, stop_index):
        weights[channel - first_index] = _gaussian_interval_kernel(
            (channel - 0.5 - centre) / sigma, (channel + 0.5 - centre) / sigma)
    return first_index, stop_index, norm


@njit(**_JIT_OPTIONS)
def _edge_lookup_kernel(first_edge, n_edges, centre, support, n_table, index, fraction):
    """Locate pixel edges ``first_edge + m`` in the table, for ``m < n_edges``.

    Parameters
    ----------
    first_edge : float
        Position of the first edge in pixel coordinates (a half-integer).
    n_edges : int
        Number of consecutive edges.
    centre : float
        Particle position along the same axis, pixels.
    support : float
        Kernel support radius ``H``, pixels.
    n_table : int
        Nodes per axis of the table.
    index, fraction : numpy.ndarray, shape (>= n_edges,), int64 and float64
        Output: table cell and position inside it of ``clip((edge - centre) / H, -1, 1)``.
    """
    scale = 0.5 * (n_table - 1)
    for m in range(n_edges):
        offset = (first_edge + m - centre) / support
        offset = min(max(offset, -1.0), 1.0)
        position = (offset + 1.0) * scale
        cell = min(int(position), n_table - 2)
        index[m] = cell
        fraction[m] = position - cell


@njit(**_JIT_OPTIONS)
def _corner_row_kernel(table, y_index, y_fraction, x_index, x_fraction, n_corners, corners):
    """Interpolate the table bilinearly at one row of pixel corners.

    Parameters
    ----------
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Cumulative column table, ``table[j, i]`` at ``(x_i, y_j)``.
    y_index, y_fraction : int, float
        Table cell and fraction of the corners' common y edge.
    x_index, x_fraction : numpy.ndarray, shape (>= n_corners,)
        Table cells and fractions of the x edges.
    n_corners : int
        Number of corners in the row.
    corners : numpy.ndarray, float64, shape (>= n_corners,)
        Output: kernel mass below and left of each corner (fraction of the particle).
    """
    low = table[y_index]
    high = table[y_index + 1]
    below = 1.0 - y_fraction
    for m in range(n_corners):
        cell = x_index[m]
        right = x_fraction[m]
        left = 1.0 - right
        corners[m] = (below * (left * low[cell] + right * low[cell + 1])
                      + y_fraction * (left * high[cell] + right * high[cell + 1]))


@njit(**_JIT_OPTIONS)
def _deposit_band_kernel(row_start, row_stop, x_pix, y_pix, support_pix, chan_centre, chan_sigma,
                         weight, table, out):
    """Deposit every particle's share into the rows ``row_start <= j < row_stop`` of ``out``.

    Parameters
    ----------
    row_start, row_stop : int
        Rows of the cube (axis 1) owned by this call; nothing else is written.
    x_pix, y_pix : numpy.ndarray, float64, shape (n_particles,)
        Particle positions in pixel coordinates (0-based, pixel centres at integers).
    support_pix : numpy.ndarray, float64, shape (n_particles,)
        Kernel support radius ``H`` in pixels, positive.
    chan_centre : numpy.ndarray, float64, shape (n_particles,)
        Line centre in channel coordinates.
    chan_sigma : numpy.ndarray, float64, shape (n_particles,)
        Gaussian sigma of the line in channels, >= 0 (0 is a delta line).
    weight : numpy.ndarray, float64, shape (n_particles,)
        Weight of each particle (any unit); the cube receives the same unit.
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Cumulative column table of the kernel.
    out : numpy.ndarray, float64, C-contiguous, shape (n_chan, n_y, n_x)
        Cube accumulated into (``+=``).

    Returns
    -------
    int
        Number of voxel contributions made (pixel-channel pairs written).
    """
    n_chan, n_y, n_x = out.shape
    n_table = table.shape[0]
    n_band_rows = row_stop - row_start
    x_index = np.empty(n_x + 1, np.int64)
    x_fraction = np.empty(n_x + 1)
    y_index = np.empty(n_band_rows + 1, np.int64)
    y_fraction = np.empty(n_band_rows + 1)
    lower_corners = np.empty(n_x + 1)
    upper_corners = np.empty(n_x + 1)
    share = np.empty(n_x)
    channel_weights = np.empty(n_chan)
    n_contributions = 0
    for particle in range(x_pix.shape[0]):
        support = support_pix[particle]
        y = y_pix[particle]
        row_first = max(math.floor(y - support + 0.5), float(row_start))
        row_last = min(math.floor(y + support + 0.5), row_stop - 1.0)
        if row_first > row_last:
            continue
        x = x_pix[particle]
        column_first = max(math.floor(x - support + 0.5), 0.0)
        column_last = min(math.floor(x + support + 0.5), n_x - 1.0)
        if column_first > column_last:
            continue
        chan_first, chan_stop, norm = _channel_window_kernel(
            chan_centre[particle], chan_sigma[particle], n_chan, channel_weights)
        if chan_stop <= chan_first:
            continue
        scale = weight[particle] / norm
        j_first = int(row_first)
        n_rows = int(row_last) + 1 - j_first
        i_first = int(column_first)
        n_columns = int(column_last) + 1 - i_first
        _edge_lookup_kernel(i_first - 0.5, n_columns + 1, x, support, n_table, x_index, x_fraction)
        _edge_lookup_kernel(j_first - 0.5, n_rows + 1, y, support, n_table, y_index, y_fraction)
        _corner_row_kernel(table, y_index[0], y_fraction[0], x_index, x_fraction, n_columns + 1,
                           lower_corners)
        for row in range(n_rows):
            _corner_row_kernel(table, y_index[row + 1], y_fraction[row + 1], x_index, x_fraction,
                               n_columns + 1, upper_corners)
            first = n_columns
            last = -1
            for column in range(n_columns):
                value = (upper_corners[column + 1] - upper_corners[column]
                         - lower_corners[column + 1] + lower_corners[column])
                share[column] = value
                if value != 0.0:
                    first = min(first, column)
                    last = column
            lower_corners, upper_corners = upper_corners, lower_corners
            if last < first:
                continue
            j = j_first + row
            # Unsigned offsets skip numba's negative-index wraparound so the loop vectorises.
            out_start = np.uint64(i_first + first)
            share_start = np.uint64(first)
            n_written = last + 1 - first
            for channel in range(chan_first, chan_stop):
                voxel_weight = scale * channel_weights[channel - chan_first]
                plane_row = out[channel, j]
                for m in range(n_written):
                    offset = np.uint64(m)
                    plane_row[out_start + offset] += voxel_weight * share[share_start + offset]
            n_contributions += (chan_stop - chan_first) * n_written
    return n_contributions


@njit(**_JIT_OPTIONS)
def _deposit_serial_kernel(band_edges, x_pix, y_pix, support_pix, chan_centre, chan_sigma, weight,
                           table, out):
    """Deposit all particles into ``out`` on the calling thread, one row band after another.

    Arguments as ``_deposit_parallel_kernel``; bands keep each pass's writes in cache.
    Returns the number of voxel contributions made.
    """
    n_contributions = 0
    for band in range(band_edges.shape[0] - 1):
        n_contributions += _deposit_band_kernel(band_edges[band], band_edges[band + 1], x_pix, y_pix,
                                                support_pix, chan_centre, chan_sigma, weight, table,
                                                out)
    return n_contributions


@njit(parallel=True, **_JIT_OPTIONS)
def _deposit_parallel_kernel(band_edges, x_pix, y_pix, support_pix, chan_centre, chan_sigma,
                             weight, table, out):
    """Deposit all particles into ``out``, one row band per task, bands handed out to threads.

    Parameters
    ----------
    band_edges : numpy.ndarray, int64, shape (n_bands + 1,)
        Increasing row numbers from 0 to ``n_y``; band ``b`` owns rows
        ``band_edges[b] <= j < band_edges[b + 1]`` and is the only writer of them.
    x_pix, y_pix, support_pix, chan_centre, chan_sigma, weight, table, out
        As for ``_deposit_band_kernel``.

    Returns
    -------
    int
        Number of voxel contributions made.
    """
    n_bands = band_edges.shape[0] - 1
    counts = np.zeros(n_bands, np.int64)
    for band in prange(n_bands):
        counts[band] = _deposit_band_kernel(band_edges[band], band_edges[band + 1], x_pix, y_pix,
                                            support_pix, chan_centre, chan_sigma, weight, table, out)
    return counts.sum()


@njit(**_JIT_OPTIONS)
def _cumulative_at_kernel(table, x_offset, y_offset):
    """Return the kernel mass in ``x < x_offset``, ``y < y_offset`` (units of H, clipped to [-1, 1]).

    Parameters
    ----------
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Cumulative column table, ``table[j, i]`` at ``(x_i, y_j)``.
    x_offset, y_offset : float
        Corner position relative to the particle, in units of the support radius.
    """
    scale = 0.5 * (table.shape[0] - 1)
    last_cell = table.shape[0] - 2
    x_position = (min(max(x_offset, -1.0), 1.0) + 1.0) * scale
    y_position = (min(max(y_offset, -1.0), 1.0) + 1.0) * scale
    i = min(int(x_position), last_cell)
    j = min(int(y_position), last_cell)
    right = x_position - i
    above = y_position - j
    return ((1.0 - above) * ((1.0 - right) * table[j, i] + right * table[j, i + 1])
            + above * ((1.0 - right) * table[j + 1, i] + right * table[j + 1, i + 1]))


@njit(**_JIT_OPTIONS)
def _inside_fraction_kernel(x_pix, y_pix, support_pix, chan_centre, chan_sigma, table, n_chan, n_y,
                            n_x, fraction):
    """Compute the fraction of each particle that the deposit writes inside the cube.

    Parameters
    ----------
    x_pix, y_pix, support_pix, chan_centre, chan_sigma, table
        As for ``_deposit_band_kernel``.
    n_chan, n_y, n_x : int
        Shape of the cube.
    fraction : numpy.ndarray, float64, shape (n_particles,)
        Output: the kernel mass inside the cube's sky edges (table differences
        at the edges, which the pixel shares telescope to) times the line's
        weight inside its channel range.
    """
    for particle in range(x_pix.shape[0]):
        sigma = chan_sigma[particle]
        centre = chan_centre[particle]
        first, last, norm = _line_window_kernel(centre, sigma, n_chan)
        if first > last:
            line_inside = 0.0
        elif sigma == 0.0:
            line_inside = 1.0
        else:
            line_inside = _gaussian_interval_kernel((first - 0.5 - centre) / sigma,
                                                    (last + 0.5 - centre) / sigma) / norm
        support = support_pix[particle]
        left = (-0.5 - x_pix[particle]) / support
        right = (n_x - 0.5 - x_pix[particle]) / support
        bottom = (-0.5 - y_pix[particle]) / support
        top = (n_y - 0.5 - y_pix[particle]) / support
        sky_inside = (_cumulative_at_kernel(table, right, top) - _cumulative_at_kernel(table, left, top)
                      - _cumulative_at_kernel(table, right, bottom)
                      + _cumulative_at_kernel(table, left, bottom))
        fraction[particle] = sky_inside * line_inside


def _max_threads() -> int:
    """Return the largest thread count numba can use in this process."""
    return int(numba.config.NUMBA_NUM_THREADS)


def _default_threads() -> int:
    """Return the thread count numba uses when none is asked for."""
    return int(numba.get_num_threads())


@contextlib.contextmanager
def _thread_limit(n_threads):
    """Run the body on ``n_threads`` numba threads handing out one loop step at a time, then restore.

    A chunk size of 1 lets idle threads take the next row band (dynamic
    scheduling), which balances fields whose particles crowd into a few bands.
    """
    previous_threads = numba.get_num_threads()
    previous_chunksize = numba.get_parallel_chunksize()
    numba.set_num_threads(n_threads)
    numba.set_parallel_chunksize(1)
    try:
        yield
    finally:
        numba.set_parallel_chunksize(previous_chunksize)
        numba.set_num_threads(previous_threads)
