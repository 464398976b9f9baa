"""Every compiled (numba) kernel of the package: the particle deposit and its bookkeeping.

The kernels take plain contiguous float64/int64 arrays in pixel and channel
units and write into preallocated outputs.  Conventions shared by all of them:

* pixel ``i`` is centred at ``i`` and spans ``[i - 0.5, i + 0.5]`` (x = axis 2
  of the cube, y = axis 1); channel ``k`` spans ``[k - 0.5, k + 0.5]``;
* ``support`` is the kernel support radius ``H`` in pixels (the smoothing
  length times ``grid.support_factor``);
* ``table`` is a quadrant column table (``pipeline.kernels.quadrant_column_table``),
  ``table[j, i] = Q(i / (n - 1), j / (n - 1))``, the kernel mass between the
  centre and that point (units of ``H``), read with bilinear interpolation; the
  signed mass ``G(x, y) = sign(x) sign(y) Q(|x|, |y|)`` gives any rectangle's
  share as a mixed difference of its four corners;
* the line is a Gaussian of sigma ``chan_sigma`` channels, cut at
  ``_LINE_CUT_SIGMA`` sigma and renormalised so its channel weights sum to 1;
  channel weights are differences of the Gaussian's cumulative distribution at
  the channel edges (cubic Hermite interpolation of a table, accurate to 1e-10),
  so they telescope to the window's mass exactly; ``chan_sigma == 0`` puts the
  whole line in the channel containing its centre;
* sorted particles travel as one array ``particles`` of shape (n, 6) whose
  columns are ``PARTICLE_COLUMNS`` (x, y, support, line centre, line sigma,
  weight), one cache line per particle;
* row bands are ``band_rows`` rows of the cube; band ``b`` owns rows
  ``b * band_rows <= j < (b + 1) * band_rows`` and is the only writer of them.
  The kernels release the GIL; ``pipeline.grid._deposit`` runs
  ``_deposit_bands_kernel`` on several Python threads, each filling one band at
  a time (numba's own ``prange`` scheduling balanced these uneven bands poorly).
"""

import math

import numba
import numpy as np
from numba import njit

_JIT_OPTIONS = {"nogil": True, "cache": True, "fastmath": {"contract", "arcp", "nsz"}}

#: Half-width of the line window in sigma; the Gaussian beyond it (2e-9 of the line) is
#: given back to the window by renormalisation.
_LINE_CUT_SIGMA = 6.0

#: Columns of the sorted particle array.
PARTICLE_COLUMNS = ("x_pix", "y_pix", "support_pix", "chan_centre", "chan_sigma", "weight")
_X, _Y, _SUPPORT, _CENTRE, _SIGMA, _WEIGHT = range(6)

# The unit Gaussian's cumulative distribution and density (times the step) at nodes
# -_CDF_LIMIT + i * _CDF_STEP (math.erfc and exp), read by cubic Hermite interpolation: error
# <= max|phi^(3)| step^4 / 384 = 0.55 step^4 / 384 = 8.5e-11.  Beyond +-_CDF_LIMIT the
# distribution is 0 or 1 (the tail there is 9.5e-18).
_CDF_STEP = 1.0 / 64.0
_CDF_LIMIT = 8.5
_CDF_TABLE = np.array([[0.5 * math.erfc(-t / math.sqrt(2.0)),
                        _CDF_STEP * math.exp(-0.5 * t * t) / math.sqrt(2.0 * math.pi)]
                       for t in (-_CDF_LIMIT + i * _CDF_STEP
                                 for i in range(round(2 * _CDF_LIMIT / _CDF_STEP) + 1))])


@njit(**_JIT_OPTIONS)
def _gaussian_cdf_kernel(t):
    """Return the unit Gaussian's cumulative distribution at ``t`` (sigma), to 1e-10 absolute.

    Parameters
    ----------
    t : float
        Position in units of sigma from the centre.
    """
    if t <= -_CDF_LIMIT:
        return 0.0
    if t >= _CDF_LIMIT:
        return 1.0
    position = (t + _CDF_LIMIT) * (1.0 / _CDF_STEP)
    node = min(int(position), _CDF_TABLE.shape[0] - 2)
    s = position - node
    s2 = s * s
    s3 = s2 * s
    return ((2.0 * s3 - 3.0 * s2 + 1.0) * _CDF_TABLE[node, 0] + (s3 - 2.0 * s2 + s) * _CDF_TABLE[node, 1]
            + (3.0 * s2 - 2.0 * s3) * _CDF_TABLE[node + 1, 0] + (s3 - s2) * _CDF_TABLE[node + 1, 1])


@njit(**_JIT_OPTIONS)
def _window_range_kernel(centre, sigma):
    """Return the first and last channel (floats holding integers) of a line's whole window.

    Parameters
    ----------
    centre : float
        Line centre in channel coordinates.
    sigma : float
        Gaussian sigma of the line in channels (0 for a delta line).
    """
    if sigma == 0.0:
        channel = math.floor(centre + 0.5)
        return channel, channel
    return (math.floor(centre - _LINE_CUT_SIGMA * sigma + 0.5),
            math.floor(centre + _LINE_CUT_SIGMA * sigma + 0.5))


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
    window_first, window_last = _window_range_kernel(centre, sigma)
    first, last = max(window_first, 0.0), min(window_last, n_chan - 1.0)
    if sigma == 0.0:
        return first, last, 1.0
    norm = (_gaussian_cdf_kernel((window_last + 0.5 - centre) / sigma)
            - _gaussian_cdf_kernel((window_first - 0.5 - centre) / sigma))
    return first, last, norm


@njit(**_JIT_OPTIONS)
def _channel_window_kernel(centre, sigma, n_chan, weights):
    """Fill the line's weights for the channels inside the cube; return ``(first, stop, norm)``.

    Parameters
    ----------
    centre, sigma, n_chan
        As for ``_line_window_kernel``.
    weights : numpy.ndarray, float64, shape (>= n_chan + 1,)
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
    inverse = 1.0 / sigma
    lower = _gaussian_cdf_kernel((first_index - 0.5 - centre) * inverse)
    for channel in range(first_index, stop_index):
        upper = _gaussian_cdf_kernel((channel + 0.5 - centre) * inverse)
        weights[channel - first_index] = upper - lower
        lower = upper
    return first_index, stop_index, norm


@njit(**_JIT_OPTIONS)
def _edge_lookup_kernel(first_edge, n_edges, centre, support, n_table, index, fraction, sign):
    """Locate pixel edges ``first_edge + m`` in the quadrant table, for ``m < n_edges``.

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
    index, fraction, sign : numpy.ndarray, shape (>= n_edges,), int64, float64, float64
        Output: table cell and position inside it of ``|u|``, and the sign of
        ``u``, for ``u = clip((edge - centre) / H, -1, 1)``.
    """
    scale = n_table - 1.0
    for m in range(n_edges):
        offset = (first_edge + m - centre) / support
        sign[m] = 1.0 if offset >= 0.0 else -1.0
        position = min(abs(offset), 1.0) * scale
        cell = min(int(position), n_table - 2)
        index[m] = cell
        fraction[m] = position - cell


@njit(**_JIT_OPTIONS)
def _corner_row_kernel(table, y_index, y_fraction, y_sign, x_index, x_fraction, x_sign, n_corners,
                       corners):
    """Interpolate the signed mass ``G`` bilinearly at one row of pixel corners.

    Parameters
    ----------
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Quadrant column table, ``table[j, i] = Q(u_i, u_j)``.
    y_index, y_fraction, y_sign : int, float, float
        Table cell, fraction and sign of the corners' common y edge.
    x_index, x_fraction, x_sign : numpy.ndarray, shape (>= n_corners,)
        Table cells, fractions and signs of the x edges.
    n_corners : int
        Number of corners in the row.
    corners : numpy.ndarray, float64, shape (>= n_corners,)
        Output: ``G`` at each corner, the kernel mass between the particle and
        the corner, signed (fraction of the particle).
    """
    low = table[y_index]
    high = table[y_index + 1]
    below = 1.0 - y_fraction
    for m in range(n_corners):
        cell = x_index[m]
        right = x_fraction[m]
        left = 1.0 - right
        corners[m] = x_sign[m] * y_sign * (below * (left * low[cell] + right * low[cell + 1])
                                           + y_fraction * (left * high[cell] + right * high[cell + 1]))


@njit(**_JIT_OPTIONS)
def _sky_range_kernel(position, support, n_pixels):
    """Return the first and last pixel (floats holding integers) a support reaches, clipped to the field.

    Parameters
    ----------
    position : float
        Particle position along one axis, pixels.
    support : float
        Kernel support radius ``H``, pixels.
    n_pixels : int
        Pixels along that axis; ``first > last`` when the support misses the field.
    """
    return (max(math.floor(position - support + 0.5), 0.0),
            min(math.floor(position + support + 0.5), n_pixels - 1.0))


@njit(**_JIT_OPTIONS)
def _sort_by_tile_kernel(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, support_factor,
                         n_chan, n_y, n_x, tile_rows, tile_columns, keys, counts, particles,
                         band_row_range, band_cost):
    """Sort the particles that reach the cube by sky tile into ``particles``; drop the others.

    Parameters
    ----------
    x_pix, y_pix : numpy.ndarray, float64, shape (n_particles,)
        Particle positions in pixel coordinates.
    h_pix : numpy.ndarray, float64, shape (n_particles,)
        Smoothing lengths in pixels, positive.
    chan_centre, chan_sigma, weight : numpy.ndarray, float64, shape (n_particles,)
        Line centre and sigma (channels) and weight (any unit) of each particle.
    support_factor : float
        Support radius in units of the smoothing length, ``H = support_factor * h``.
    n_chan, n_y, n_x : int
        Shape of the cube.
    tile_rows, tile_columns : int
        Tile size in pixels; tile rows are the row bands (``band_rows = tile_rows``).
    keys : numpy.ndarray, int64, shape (n_particles,)
        Scratch: tile number of each particle, -1 for particles that reach no voxel.
    counts : numpy.ndarray, int64, shape (n_tiles + 1,)
        Output: ``counts[t]`` is the position in ``particles`` of the first
        particle of tile ``t`` (tiles numbered row-major, ``t = band * n_tile_columns + column``),
        ``counts[n_tiles]`` the number of particles kept.
    particles : numpy.ndarray, float64, shape (>= n_particles, 6)
        Output: the kept particles (columns ``PARTICLE_COLUMNS``), tile by
        tile, each tile's particles in their input order (a stable counting sort).
    band_row_range : numpy.ndarray, int64, shape (n_bands, 2)
        Output: lowest first row and highest last row reached by the
        particles centred in each band (first > last for an empty band).
    band_cost : numpy.ndarray, float64, shape (n_bands,)
        Output: voxel contributions each band will receive (its share of every
        particle's rows times columns times channels), the work estimate used to
        order bands among threads.

    Returns
    -------
    int
        Number of particles kept.
    """
    n_tile_columns = (n_x + tile_columns - 1) // tile_columns
    n_bands = band_row_range.shape[0]
    counts[:] = 0
    band_row_range[:, 0] = n_y
    band_row_range[:, 1] = -1
    band_cost[:] = 0.0
    for p in range(x_pix.shape[0]):
        keys[p] = -1
        support = h_pix[p] * support_factor
        row_first, row_last = _sky_range_kernel(y_pix[p], support, n_y)
        column_first, column_last = _sky_range_kernel(x_pix[p], support, n_x)
        window_first, window_last = _window_range_kernel(chan_centre[p], chan_sigma[p])
        chan_first, chan_last = max(window_first, 0.0), min(window_last, n_chan - 1.0)
        if row_first > row_last or column_first > column_last or chan_first > chan_last:
            continue
        band = min(max(int(math.floor((y_pix[p] + 0.5) / tile_rows)), 0), n_bands - 1)
        column = min(max(int(math.floor((x_pix[p] + 0.5) / tile_columns)), 0), n_tile_columns - 1)
        key = band * n_tile_columns + column
        keys[p] = key
        counts[key + 1] += 1
        band_row_range[band, 0] = min(band_row_range[band, 0], int(row_first))
        band_row_range[band, 1] = max(band_row_range[band, 1], int(row_last))
        per_row = (column_last - column_first + 1.0) * (chan_last - chan_first + 1.0)
        for reached in range(int(row_first) // tile_rows, int(row_last) // tile_rows + 1):
            rows = (min(row_last, (reached + 1.0) * tile_rows - 1.0)
                    - max(row_first, float(reached * tile_rows)) + 1.0)
            band_cost[reached] += rows * per_row
    for tile in range(1, counts.shape[0]):
        counts[tile] += counts[tile - 1]
    for p in range(x_pix.shape[0]):
        key = keys[p]
        if key < 0:
            continue
        slot = counts[key]
        counts[key] = slot + 1
        particles[slot, _X] = x_pix[p]
        particles[slot, _Y] = y_pix[p]
        particles[slot, _SUPPORT] = h_pix[p] * support_factor
        particles[slot, _CENTRE] = chan_centre[p]
        particles[slot, _SIGMA] = chan_sigma[p]
        particles[slot, _WEIGHT] = weight[p]
    # The scatter moved each tile's start to the next tile's start; shift back.
    for tile in range(counts.shape[0] - 1, 0, -1):
        counts[tile] = counts[tile - 1]
    counts[0] = 0
    return counts[counts.shape[0] - 1]


@njit(**_JIT_OPTIONS)
def _deposit_band_kernel(band, band_rows, band_start, band_row_range, particles, table, out):
    """Deposit every sorted particle's share into the rows of one band of ``out``.

    Parameters
    ----------
    band : int
        The band written: rows ``band * band_rows <= j < (band + 1) * band_rows``
        of the cube (axis 1); nothing else is written.
    band_rows : int
        Rows per band.
    band_start : numpy.ndarray, int64, shape (n_bands + 1,)
        Particles centred in band ``c`` are ``particles[band_start[c]:band_start[c + 1]]``.
    band_row_range : numpy.ndarray, int64, shape (n_bands, 2)
        Rows reached by the particles of each band (see ``_sort_by_tile_kernel``);
        bands whose particles cannot reach this band are skipped.
    particles : numpy.ndarray, float64, shape (n, 6)
        Sorted particles, columns ``PARTICLE_COLUMNS``: x, y (pixel
        coordinates), support radius ``H`` (pixels, positive), line centre and
        sigma (channels, sigma >= 0), weight (any unit; the cube receives it).
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Quadrant column table of the kernel.
    out : numpy.ndarray, float64, C-contiguous, shape (n_chan, n_y, n_x)
        Cube accumulated into (``+=``).

    Returns
    -------
    int
        Number of voxel contributions made (pixel-channel pairs written).
    """
    n_chan, n_y, n_x = out.shape
    n_table = table.shape[0]
    flat = out.reshape(-1)
    plane = n_y * n_x
    cell = 1.0 / (n_table - 1.0)
    row_start = band * band_rows
    row_stop = min(row_start + band_rows, n_y)
    x_index = np.empty(n_x + 1, np.int64)
    x_fraction = np.empty(n_x + 1)
    x_sign = np.empty(n_x + 1)
    y_index = np.empty(band_rows + 1, np.int64)
    y_fraction = np.empty(band_rows + 1)
    y_sign = np.empty(band_rows + 1)
    lower_corners = np.empty(n_x + 1)
    upper_corners = np.empty(n_x + 1)
    share = np.empty(n_x)
    channel_weights = np.empty(n_chan + 1)
    n_contributions = 0
    for source in range(band_row_range.shape[0]):
        if band_row_range[source, 0] >= row_stop or band_row_range[source, 1] < row_start:
            continue
        for p in range(band_start[source], band_start[source + 1]):
            support = particles[p, _SUPPORT]
            y = particles[p, _Y]
            row_first = max(math.floor(y - support + 0.5), float(row_start))
            row_last = min(math.floor(y + support + 0.5), row_stop - 1.0)
            if row_first > row_last:
                continue
            x = particles[p, _X]
            column_first, column_last = _sky_range_kernel(x, support, n_x)
            chan_first, chan_stop, norm = _channel_window_kernel(
                particles[p, _CENTRE], particles[p, _SIGMA], n_chan, channel_weights)
            scale = particles[p, _WEIGHT] / norm
            j_first = int(row_first)
            n_rows = int(row_last) + 1 - j_first
            i_first = int(column_first)
            n_columns = int(column_last) + 1 - i_first
            _edge_lookup_kernel(i_first - 0.5, n_columns + 1, x, support, n_table, x_index,
                                x_fraction, x_sign)
            _edge_lookup_kernel(j_first - 0.5, n_rows + 1, y, support, n_table, y_index, y_fraction,
                                y_sign)
            _corner_row_kernel(table, y_index[0], y_fraction[0], y_sign[0], x_index, x_fraction,
                               x_sign, n_columns + 1, lower_corners)
            for row in range(n_rows):
                _corner_row_kernel(table, y_index[row + 1], y_fraction[row + 1], y_sign[row + 1],
                                   x_index, x_fraction, x_sign, n_columns + 1, upper_corners)
                j = j_first + row
                # Columns the support circle reaches in this row, widened by one table cell: the
                # pixels beyond hold no kernel mass, only round-off of the corner differences.
                nearest = max(min(abs(j - 0.5 - y), abs(j + 0.5 - y)) / support - cell, 0.0)
                if j - 0.5 <= y <= j + 0.5:
                    nearest = 0.0
                if nearest >= 1.0:
                    lower_corners, upper_corners = upper_corners, lower_corners
                    continue
                reach = min(math.sqrt(1.0 - nearest * nearest) + cell, 1.0) * support
                first = max(int(math.floor(x - reach + 0.5)) - i_first, 0)
                last = min(int(math.floor(x + reach + 0.5)) - i_first, n_columns - 1)
                for column in range(first, last + 1):
                    share[column] = (upper_corners[column + 1] - upper_corners[column]
                                     - lower_corners[column + 1] + lower_corners[column])
                lower_corners, upper_corners = upper_corners, lower_corners
                if last < first:
                    continue
                # Unsigned offsets into the flat cube skip numba's negative-index wraparound so the
                # loop vectorises; ``voxel`` steps one channel plane at a time.
                voxel = np.uint64(chan_first * plane + j * n_x + i_first + first)
                share_start = np.uint64(first)
                n_written = last + 1 - first
                for channel in range(chan_first, chan_stop):
                    voxel_weight = scale * channel_weights[channel - chan_first]
                    for m in range(n_written):
                        offset = np.uint64(m)
                        flat[voxel + offset] += voxel_weight * share[share_start + offset]
                    voxel += np.uint64(plane)
                n_contributions += (chan_stop - chan_first) * n_written
    return n_contributions


@njit(**_JIT_OPTIONS)
def _deposit_bands_kernel(bands, band_rows, band_start, band_row_range, particles, table, out):
    """Deposit all sorted particles into the given row bands of ``out``, one band after another.

    Parameters
    ----------
    bands : numpy.ndarray, int64, shape (n_tasks,)
        Bands to fill, in order.  Calls on disjoint sets of bands may run at
        the same time on different threads (the kernel releases the GIL).
    band_rows, band_start, band_row_range, particles, table, out
        As for ``_deposit_band_kernel``.

    Returns
    -------
    int
        Number of voxel contributions made.
    """
    n_contributions = 0
    for task in range(bands.shape[0]):
        n_contributions += _deposit_band_kernel(bands[task], band_rows, band_start, band_row_range,
                                                particles, table, out)
    return n_contributions


@njit(**_JIT_OPTIONS)
def _signed_mass_kernel(table, x_offset, y_offset):
    """Return ``G``, the kernel mass between the centre and ``(x_offset, y_offset)``, signed.

    Parameters
    ----------
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Quadrant column table, ``table[j, i] = Q(u_i, u_j)``.
    x_offset, y_offset : float
        Corner position relative to the particle, in units of the support
        radius (clipped to [-1, 1]).
    """
    scale = table.shape[0] - 1.0
    last_cell = table.shape[0] - 2
    x_position = min(abs(x_offset), 1.0) * scale
    y_position = min(abs(y_offset), 1.0) * scale
    i = min(int(x_position), last_cell)
    j = min(int(y_position), last_cell)
    right = x_position - i
    above = y_position - j
    sign = (1.0 if x_offset >= 0.0 else -1.0) * (1.0 if y_offset >= 0.0 else -1.0)
    return sign * ((1.0 - above) * ((1.0 - right) * table[j, i] + right * table[j, i + 1])
                   + above * ((1.0 - right) * table[j + 1, i] + right * table[j + 1, i + 1]))


@njit(**_JIT_OPTIONS)
def _inside_fraction_kernel(x, y, support, centre, sigma, table, n_chan, n_y, n_x):
    """Return the fraction of one particle that the deposit writes inside the cube.

    Parameters
    ----------
    x, y, support, centre, sigma : float
        Position (pixels), support radius ``H`` (pixels), line centre and sigma (channels).
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Quadrant column table of the kernel.
    n_chan, n_y, n_x : int
        Shape of the cube.

    Returns
    -------
    float
        The kernel mass inside the cube's sky edges (mixed difference of
        ``G`` at the field corners, which the pixel shares telescope to) times
        the line's weight inside its channel range; exactly 1 for a particle
        whose support and line window lie inside the cube.
    """
    window_first, window_last = _window_range_kernel(centre, sigma)
    first, last = max(window_first, 0.0), min(window_last, n_chan - 1.0)
    if first > last:
        return 0.0
    line_inside = 1.0
    if sigma != 0.0 and (first > window_first or last < window_last):
        line_inside = ((_gaussian_cdf_kernel((last + 0.5 - centre) / sigma)
                        - _gaussian_cdf_kernel((first - 0.5 - centre) / sigma))
                       / (_gaussian_cdf_kernel((window_last + 0.5 - centre) / sigma)
                          - _gaussian_cdf_kernel((window_first - 0.5 - centre) / sigma)))
    left = (-0.5 - x) / support
    right = (n_x - 0.5 - x) / support
    bottom = (-0.5 - y) / support
    top = (n_y - 0.5 - y) / support
    if left <= -1.0 and right >= 1.0 and bottom <= -1.0 and top >= 1.0:
        return line_inside
    sky_inside = (_signed_mass_kernel(table, right, top) - _signed_mass_kernel(table, left, top)
                  - _signed_mass_kernel(table, right, bottom)
                  + _signed_mass_kernel(table, left, bottom))
    return sky_inside * line_inside


@njit(**_JIT_OPTIONS)
def _neumaier_add_kernel(total, error, value):
    """Return ``(total, error)`` after adding ``value`` to a compensated sum (Neumaier 1974).

    Parameters
    ----------
    total, error : float
        Running sum and its accumulated rounding error; the sum is ``total + error``.
    value : float
        Term to add.
    """
    new_total = total + value
    if abs(total) >= abs(value):
        error += (total - new_total) + value
    else:
        error += (value - new_total) + total
    return new_total, error


@njit(**_JIT_OPTIONS)
def _inside_weight_kernel(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, support_factor,
                          table, n_chan, n_y, n_x, field_side):
    """Return the weight written inside the cube, the weight left outside and the oversized count.

    Parameters
    ----------
    x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight : numpy.ndarray, float64, shape (n_particles,)
        As for ``_sort_by_tile_kernel``.
    support_factor : float
        ``H = support_factor * h``.
    table : numpy.ndarray, float64, shape (n_table, n_table)
        Quadrant column table of the kernel.
    n_chan, n_y, n_x : int
        Shape of the cube.
    field_side : float
        Pixels along the field's smaller side; particles whose support diameter
        ``2 H`` exceeds it are counted.

    Returns
    -------
    inside, outside : float
        Sums of ``weight * f`` and ``weight * (1 - f)``, ``f`` the particle's
        fraction inside the cube (``_inside_fraction_kernel``).
    n_larger : int
        Particles with ``2 H > field_side``.
    """
    # Compensated (Neumaier) sums keep the totals exact to round-off at any particle count.
    inside, inside_error = 0.0, 0.0
    outside, outside_error = 0.0, 0.0
    n_larger = 0
    for p in range(x_pix.shape[0]):
        support = h_pix[p] * support_factor
        if 2.0 * support > field_side:
            n_larger += 1
        fraction = _inside_fraction_kernel(x_pix[p], y_pix[p], support, chan_centre[p],
                                           chan_sigma[p], table, n_chan, n_y, n_x)
        inside, inside_error = _neumaier_add_kernel(inside, inside_error, weight[p] * fraction)
        outside, outside_error = _neumaier_add_kernel(outside, outside_error,
                                                      weight[p] * (1.0 - fraction))
    return inside + inside_error, outside + outside_error, n_larger


def _max_threads() -> int:
    """Return the largest thread count numba can use in this process."""
    return int(numba.config.NUMBA_NUM_THREADS)


def _default_threads() -> int:
    """Return the thread count numba uses when none is asked for."""
    return int(numba.get_num_threads())
