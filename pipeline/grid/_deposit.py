"""The particle deposit: input checks, tile sorting, thread control and the report around the compiled kernels."""

import concurrent.futures
import dataclasses
import math
import numbers
import threading

import numpy as np

from pipeline.kernels import KERNEL_FAMILIES, default_support_factor, quadrant_column_table

from . import _jit

__all__ = ["DepositReport", "deposit_particles", "estimate_chunk_bytes"]

#: Nodes per axis of the quadrant column table used by the deposit (0 to H in steps of
#: H/512; 2.1 MB).  Bilinear interpolation on it is accurate to about 6e-6 of a particle's
#: weight per pixel corner (bound in tests/naive.py), and the pixel weights of one particle
#: are within 2e-5 (L1) of a finely sub-sampled reference at any h/pixel (benchmarks/grid.py).
_TABLE_SIZE = 513

# Sky tiles the particles are sorted by before the deposit, in pixels.  A tile row is also a row
# band, the unit of work a thread owns; 16 x 16 pixels keeps one tile's voxels (16 x 16 pixels x
# the line's channels) in a core's L2 cache (common practice, no source; measured in
# benchmarks/grid.py).
_TILE_ROWS = 16
_TILE_COLUMNS = 16

# Working memory per particle of a chunk: the sorted copy (6 float64) and the tile keys (int64).
_BYTES_PER_PARTICLE = 8 * len(_jit.PARTICLE_COLUMNS) + 8


@dataclasses.dataclass(frozen=True)
class DepositReport:
    """What one call of :func:`deposit_particles` put into the cube.

    Parameters
    ----------
    total_weight : float
        Sum of the particles' weights (unit of ``weight``).
    deposited_weight : float
        Part of ``total_weight`` written into the cube.
    outside_fraction : float
        Fraction of ``total_weight`` falling outside the cube (on the sky or
        in frequency) and not written; 0 when ``total_weight`` is 0.
    n_particles : int
        Particles given.
    n_contributions : int
        Voxel contributions made (one per particle, pixel and channel written).
    n_larger_than_field : int
        Particles whose support diameter ``2 H`` exceeds the field's smaller
        side (``min(n_x, n_y)`` pixels); they are deposited like any other.
    """

    total_weight: float
    deposited_weight: float
    outside_fraction: float
    n_particles: int
    n_contributions: int
    n_larger_than_field: int


def _as_particle_array(value, name: str, n_particles: int | None) -> np.ndarray:
    """Return one per-particle input as a contiguous 1-D float64 array of the common length."""
    array = np.ascontiguousarray(value, dtype=np.float64)
    if array.ndim != 1:
        raise ValueError(f"'{name}' must be a 1-D array of shape (n_particles,); got shape {array.shape}")
    if n_particles is not None and array.shape[0] != n_particles:
        raise ValueError(
            f"'{name}' must have the same length as 'x_pix' ({n_particles}); got {array.shape[0]}"
        )
    if not np.all(np.isfinite(array)):
        raise ValueError(f"'{name}' must be finite; got {np.count_nonzero(~np.isfinite(array))} "
                         "non-finite values")
    return array


def _check_out(out) -> None:
    """Check that ``out`` is a writeable C-contiguous float64 cube."""
    if not isinstance(out, np.ndarray) or out.ndim != 3:
        raise ValueError(f"'out' must be a numpy array of shape (n_chan, n_y, n_x); "
                         f"got {type(out).__name__} of shape {np.shape(out)}")
    if out.dtype != np.float64:
        raise ValueError(f"'out' must have dtype float64; got {out.dtype}")
    if not out.flags.c_contiguous or not out.flags.writeable:
        raise ValueError("'out' must be a writeable C-contiguous array, e.g. "
                         "np.zeros((n_chan, n_y, n_x)); got a non-contiguous or read-only one")


def _check_threads(n_threads) -> int:
    """Return the thread count to use, checking an explicit request against numba's limit."""
    if n_threads is None:
        return _jit._default_threads()
    limit = _jit._max_threads()
    if (isinstance(n_threads, bool) or not isinstance(n_threads, numbers.Integral)
            or not 1 <= n_threads <= limit):
        raise ValueError(f"'n_threads' must be None or an integer from 1 to {limit}; got {n_threads!r}")
    return int(n_threads)


def _fill_bands(band_order: np.ndarray, n_threads: int, arguments: tuple, side_task):
    """Run ``side_task()`` and the band kernel over ``band_order`` on ``n_threads`` threads.

    Returns ``(contributions made, side_task's result)``.  The side task (the
    inside-weight bookkeeping, independent of the deposit) goes to the first
    free thread; then each idle thread takes the next band in order (dynamic
    scheduling, heaviest bands first), so a field whose particles crowd into a
    few bands stays balanced.  Bands own disjoint rows of the cube, so no two
    threads write the same voxel, and each band sums its particles in sorted
    order whichever thread runs it.
    """
    if n_threads == 1 or band_order.shape[0] < 2:
        return int(_jit._deposit_bands_kernel(band_order, *arguments)), side_task()
    tasks = iter(band_order.tolist())
    lock = threading.Lock()

    def worker():
        n_contributions = 0
        while True:
            with lock:
                band = next(tasks, None)
            if band is None:
                return n_contributions
            # The compiled kernel releases the GIL, so the threads run side by side.
            n_contributions += int(_jit._deposit_bands_kernel(np.array([band]), *arguments))

    with concurrent.futures.ThreadPoolExecutor(max_workers=n_threads) as pool:
        side = pool.submit(side_task)
        futures = [pool.submit(worker) for _ in range(min(n_threads, band_order.shape[0]))]
        return sum(future.result() for future in futures), side.result()


def _check_support_factor(support_factor, kernel: str) -> float:
    """Return the support factor to use: the family's usual one for None, else a checked positive number."""
    if support_factor is None:
        return default_support_factor(kernel)
    if not (isinstance(support_factor, numbers.Real) and not isinstance(support_factor, bool)
            and math.isfinite(support_factor) and support_factor > 0):
        raise ValueError(f"'support_factor' must be None (the kernel's usual factor) or a positive "
                         f"number (2 for Monaghan/Price smoothing lengths); got {support_factor!r}")
    return float(support_factor)


def estimate_chunk_bytes(n_particles: int) -> int:
    """Return the working memory, in bytes, that :func:`deposit_particles` needs for one chunk.

    Parameters
    ----------
    n_particles : int
        Particles in the chunk, >= 0.

    Returns
    -------
    int
        Bytes allocated by the deposit while it runs, beyond its inputs and
        ``out``: 56 per particle (a tile-sorted copy of the six per-particle
        arrays and the tile keys) plus 1 per particle for the input checks.
        Inputs that are not already contiguous float64 are copied first (48
        more bytes per particle).  The kernel's cumulative table (8.4 MB per
        family, built once per process and cached) and each thread's row
        buffers (under 64 bytes per pixel along x) are not included.

    Raises
    ------
    ValueError
        If ``n_particles`` is not a non-negative integer.

    Notes
    -----
    Measured against the allocations themselves (``tracemalloc``) in
    ``tests/grid/test_deposit.py``.

    Examples
    --------
    >>> estimate_chunk_bytes(1_000_000)
    57000000
    """
    if (isinstance(n_particles, bool) or not isinstance(n_particles, numbers.Integral)
            or n_particles < 0):
        raise ValueError(f"'n_particles' must be a non-negative integer; got {n_particles!r}")
    return (_BYTES_PER_PARTICLE + 1) * int(n_particles)


def deposit_particles(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, *, out,
                      kernel="cubic_spline", support_factor=None, n_threads=None) -> DepositReport:
    """Spread particles over a spectral cube, integrating kernel and line over each voxel.

    Parameters
    ----------
    x_pix, y_pix : array_like, float64, shape (n_particles,)
        Particle positions in pixel coordinates, 0-based: pixel ``i`` is
        centred at ``i`` and spans ``[i - 0.5, i + 0.5]``; ``x`` runs along
        axis 2 of ``out``, ``y`` along axis 1.
    h_pix : array_like, float64, shape (n_particles,)
        Smoothing length in pixels, positive; the kernel support radius is
        ``H = support_factor * h_pix``.
    chan_centre : array_like, float64, shape (n_particles,)
        Line centre in channel coordinates (channel ``k`` spans
        ``[k - 0.5, k + 0.5]``).
    chan_sigma : array_like, float64, shape (n_particles,)
        Gaussian sigma of the line in channels, >= 0; 0 puts the whole line
        in the channel containing ``chan_centre``.
    weight : array_like, float64, shape (n_particles,)
        Weight of each particle in any unit (e.g. Jy Hz); ``out`` receives
        that unit per voxel.
    out : numpy.ndarray, float64, C-contiguous, shape (n_chan, n_y, n_x)
        Cube accumulated into (``+=``); a memory-mapped array works as well
        (see :func:`allocate_accumulator`).
    kernel : str, optional
        Kernel family, one of :data:`~pipeline.kernels.KERNEL_FAMILIES`
        (config key ``grid.kernel``).
    support_factor : float, optional
        Support radius in units of the smoothing length (config key
        ``grid.support_factor``); None uses the family's usual factor,
        :func:`~pipeline.kernels.default_support_factor` (2 for the cubic
        spline and Wendland kernels, 3 for the quintic spline and the
        Gaussian).  1 when the snapshot stores the support radius
        (Gadget-style codes).
    n_threads : int, optional
        Threads for the deposit; ``None`` uses numba's default.  The result
        does not depend on it: each thread owns whole row bands of ``out``
        and every voxel sums its contributions in the same order.

    Returns
    -------
    DepositReport
        Totals of the weight given, written and left outside the cube, and
        the count of particles larger than the field.

    Raises
    ------
    ValueError
        If an array has the wrong shape, dtype or non-finite values (NaN
        smoothing lengths included), if ``h_pix`` or ``support_factor`` is
        not positive, ``chan_sigma`` is negative, ``kernel`` is unknown or
        ``n_threads`` is out of range.

    Notes
    -----
    A particle's share of pixel ``(j, i)`` is the column profile integrated
    over the pixel, ``C(x1, y1) - C(x0, y1) - C(x1, y0) + C(x0, y0)`` with
    ``C`` the cumulative column table (bilinear interpolation, corners in
    units of ``H`` clipped to ``[-1, 1]``), so the shares of a particle
    whose support lies in the field sum to 1 to round-off whatever ``H`` is,
    from far below a pixel to far above it, with no switch-over between
    regimes.  Its share of channel ``k`` is the Gaussian line integrated over
    ``[k - 0.5, k + 0.5]`` (differences of the cumulative distribution at
    the channel edges), the line cut at 6 sigma and renormalised to sum to 1.
    What falls outside the cube is not written and is counted in
    ``outside_fraction``.  Accuracy, set by the table (513 nodes per axis over
    one quadrant): each pixel corner within 6e-6 of a particle's weight, and
    its pixel weights within about 2e-5 (L1, summed over pixels) of the exact
    integrals at any h/pixel; channel weights within 1e-10.

    Before depositing, the particles that reach the cube are sorted by
    16 x 16-pixel sky tile (a stable counting sort), so consecutive particles
    write to the same cached voxels; threads then fill disjoint 16-row bands,
    heaviest bands first.  The cube accumulates in float64.

    Examples
    --------
    >>> cube = np.zeros((3, 4, 5))
    >>> report = deposit_particles([2.0], [1.5], [0.1], [1.0], [0.0], [2.5], out=cube)
    >>> float(cube.sum()), float(cube[1, 1, 2] + cube[1, 2, 2]), report.outside_fraction
    (2.5, 2.5, 0.0)
    """
    x_pix = _as_particle_array(x_pix, "x_pix", None)
    n_particles = x_pix.shape[0]
    y_pix = _as_particle_array(y_pix, "y_pix", n_particles)
    h_pix = _as_particle_array(h_pix, "h_pix", n_particles)
    chan_centre = _as_particle_array(chan_centre, "chan_centre", n_particles)
    chan_sigma = _as_particle_array(chan_sigma, "chan_sigma", n_particles)
    weight = _as_particle_array(weight, "weight", n_particles)
    _check_out(out)
    if kernel not in KERNEL_FAMILIES:
        raise ValueError(f"'kernel' must be one of {', '.join(KERNEL_FAMILIES)}; got {kernel!r}")
    factor = _check_support_factor(support_factor, kernel)
    if n_particles and h_pix.min() <= 0.0:
        raise ValueError(f"'h_pix' must be positive; got minimum {float(h_pix.min())!r}")
    if n_particles and chan_sigma.min() < 0.0:
        raise ValueError("'chan_sigma' must be >= 0 (0 for a delta line); "
                         f"got minimum {float(chan_sigma.min())!r}")
    threads = _check_threads(n_threads)
    if n_particles and not math.isfinite(float(h_pix.max()) * factor):
        raise ValueError("'h_pix' times 'support_factor' must be finite; got an overflow")
    total_weight = float(np.sum(weight))
    if n_particles == 0:
        return DepositReport(total_weight, 0.0, 0.0, 0, 0, 0)

    table = quadrant_column_table(kernel, _TABLE_SIZE)
    n_chan, n_y, n_x = out.shape
    n_bands = -(-n_y // _TILE_ROWS)
    n_tile_columns = -(-n_x // _TILE_COLUMNS)
    keys = np.empty(n_particles, np.int64)
    counts = np.empty(n_bands * n_tile_columns + 1, np.int64)
    particles = np.empty((n_particles, len(_jit.PARTICLE_COLUMNS)))
    band_row_range = np.empty((n_bands, 2), np.int64)
    band_cost = np.empty(n_bands)
    _jit._sort_by_tile_kernel(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, factor,
                              n_chan, n_y, n_x, _TILE_ROWS, _TILE_COLUMNS, keys, counts, particles,
                              band_row_range, band_cost)
    del keys
    band_start = np.ascontiguousarray(counts[::n_tile_columns])
    # Heaviest bands first, so the last tasks handed out are short ones.
    band_order = np.argsort(-band_cost, kind="stable")
    band_order = np.ascontiguousarray(band_order[band_cost[band_order] > 0.0])

    def inside_weight():
        return _jit._inside_weight_kernel(x_pix, y_pix, h_pix, chan_centre, chan_sigma, weight, factor,
                                          table, n_chan, n_y, n_x, float(min(n_y, n_x)))

    n_contributions, (deposited_weight, outside_weight, n_larger) = _fill_bands(
        band_order, threads, (_TILE_ROWS, band_start, band_row_range, particles, table, out),
        inside_weight)
    outside_fraction = outside_weight / total_weight if total_weight != 0.0 else 0.0
    return DepositReport(total_weight, deposited_weight, outside_fraction, n_particles,
                         int(n_contributions), int(n_larger))
