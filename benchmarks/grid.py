"""Gridding benchmarks: deposit throughput, threads, accuracy, scaling, memory, beam and FITS ratios.

Run ``python benchmarks/grid.py --quick`` (a few minutes on two cores) or
``--full`` (adds 1e8 particles into a 1024 x 1024 x 256 cube).  Every ratio is
measured side by side in one run on the same inputs; times are the best of a
few repeats, because other work on the machine adds noise.  The last line of
the output is one JSON object with the headline numbers.

The synthetic disc is described in benchmarks/_synthetic.py (h from 0.3 to 30
pixels, line sigmas of 2 to 6 channels).
"""

import argparse
import json
import math
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import astropy.units as u
import numpy as np

from _synthetic import disc_chunk, disc_chunks

SMALL_SHAPE = (128, 256, 256)
LARGE_SHAPE = (256, 1024, 1024)
SCALING_COUNTS = (100_000, 1_000_000, 10_000_000)
CHUNK_PARTICLES = 1 << 18
L1_SMOOTHING_LENGTHS = (0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0)
SUBSAMPLING = 64


def _best_time(function, repeats):
    """Return (best wall time, last result) of ``repeats`` calls."""
    best, result = math.inf, None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def _warm_up():
    """Load the compiled kernels (from numba's disk cache) outside any timing."""
    from pipeline.grid import deposit_particles

    for threads in (1, 2):
        out = np.zeros((8, 20, 20))
        deposit_particles(**disc_chunk(200, out.shape, seed=0), out=out, n_threads=threads)


# --- deposit throughput, threads, tile sorting, bincount floor --------------------------------------

def _deposit_timing(particles, shape, *, threads, repeats, tile_columns=None):
    """Return (best wall seconds, its CPU seconds, DepositReport, cube) for depositing ``particles``."""
    from pipeline.grid import _deposit, deposit_particles

    out = np.zeros(shape)
    saved = _deposit._TILE_COLUMNS
    if tile_columns is not None:
        _deposit._TILE_COLUMNS = tile_columns
    seconds = math.inf
    try:
        for _ in range(repeats):
            out[...] = 0.0  # zeroed (and every page touched) outside the timing
            start, cpu_start = time.perf_counter(), time.process_time()
            report = deposit_particles(**particles, out=out, n_threads=threads)
            wall = time.perf_counter() - start
            if wall < seconds:
                seconds, cpu_seconds = wall, time.process_time() - cpu_start
    finally:
        _deposit._TILE_COLUMNS = saved
    return seconds, cpu_seconds, report, out


def _bincount_deposit(particles, shape):
    """Nearest-grid-point deposit with numpy.bincount: each particle's weight into one voxel (the floor)."""
    n_chan, n_y, n_x = shape
    i = np.rint(particles["x_pix"]).astype(np.int64)
    j = np.rint(particles["y_pix"]).astype(np.int64)
    k = np.rint(particles["chan_centre"]).astype(np.int64)
    inside = (i >= 0) & (i < n_x) & (j >= 0) & (j < n_y) & (k >= 0) & (k < n_chan)
    flat = (k[inside] * n_y + j[inside]) * n_x + i[inside]
    return np.bincount(flat, weights=particles["weight"][inside], minlength=n_chan * n_y * n_x)


def throughput(results, *, repeats, large):
    """Deposit a 1e6-particle disc on 1 and 2 threads, with and without tile sorting, and the floor."""
    n = 1_000_000
    particles = disc_chunk(n, SMALL_SHAPE, seed=1)
    one, one_cpu, report, cube = _deposit_timing(particles, SMALL_SHAPE, threads=1, repeats=repeats)
    two, two_cpu, _, _ = _deposit_timing(particles, SMALL_SHAPE, threads=2, repeats=repeats)
    unsorted_one, _, _, _ = _deposit_timing(particles, SMALL_SHAPE, threads=1, repeats=repeats,
                                         tile_columns=1 << 30)
    floor, _ = _best_time(lambda: _bincount_deposit(particles, SMALL_SHAPE), repeats + 1)
    per_particle = report.n_contributions / n
    results.update(contributions_per_s_1thread=report.n_contributions / one,
                   contributions_per_s_2threads=report.n_contributions / two,
                   speedup_2threads=one / two, contributions_per_particle=per_particle,
                   contributions_per_cpu_s_1thread=report.n_contributions / one_cpu,
                   cores_busy_2threads=two_cpu / two,
                   tile_sort_speedup_256=unsorted_one / one, bincount_floor_ratio=one / floor,
                   bincount_ns_per_particle=1e9 * floor / n)
    print(f"deposit 1e6 particles into {SMALL_SHAPE}, {per_particle:.0f} contributions per particle")
    print(f"  1 thread  {one:7.2f} s  {report.n_contributions / one / 1e6:7.0f} M contributions/s  "
          f"{1e9 * one / n:6.0f} ns/particle  ({report.n_contributions / one_cpu / 1e6:.0f} M per CPU second)")
    print(f"  2 threads {two:7.2f} s  {report.n_contributions / two / 1e6:7.0f} M contributions/s  "
          f"speed-up {one / two:.2f}  (CPU time / wall time {two_cpu / two:.2f}: below 2 when other "
          f"work shares the cores)")
    print(f"  unsorted (band order only), 1 thread {unsorted_one:.2f} s: tile sort speed-up "
          f"{unsorted_one / one:.2f}")
    print(f"  numpy.bincount nearest-grid-point floor {floor:.3f} s ({1e9 * floor / n:.0f} ns/particle): "
          f"ours / floor = {one / floor:.1f}")
    if large:
        big = disc_chunk(n, LARGE_SHAPE, seed=1)
        sorted_two, _, big_report, _ = _deposit_timing(big, LARGE_SHAPE, threads=2, repeats=1)
        unsorted_two, _, _, _ = _deposit_timing(big, LARGE_SHAPE, threads=2, repeats=1, tile_columns=1 << 30)
        results.update(tile_sort_speedup_1024=unsorted_two / sorted_two,
                       contributions_per_s_2threads_1024=big_report.n_contributions / sorted_two)
        print(f"deposit 1e6 particles into {LARGE_SHAPE}, 2 threads: {sorted_two:.2f} s "
              f"({big_report.n_contributions / sorted_two / 1e6:.0f} M contributions/s); unsorted "
              f"{unsorted_two:.2f} s: tile sort speed-up {unsorted_two / sorted_two:.2f}")
    return cube


# --- pixel-weight accuracy -------------------------------------------------------------------------

def _radial_column(kernel):
    """Return F(b) on a fine grid in b (units of H) for interpolation, and the grid."""
    from pipeline.kernels import column_profile

    b = np.linspace(0.0, 1.0, 200_001)
    return b, column_profile(kernel, b)


def _subsampled_weights(x, y, support, n_side, kernel_grid, subsampling):
    """Pixel weights by point-sampling F at ``subsampling``^2 sub-pixel centres per pixel, normalised."""
    grid_b, grid_f = kernel_grid
    offsets = (np.arange(subsampling) + 0.5) / subsampling - 0.5
    weights = np.zeros((n_side, n_side))
    sub_x = (np.arange(n_side)[:, None] + offsets[None, :]).ravel() - x
    for row in range(n_side):
        sub_y = row + offsets - y
        b = np.hypot(sub_x[None, :], sub_y[:, None]) / support
        values = np.interp(b, grid_b, grid_f, right=0.0)
        weights[row] = values.reshape(subsampling, n_side, subsampling).sum(axis=(0, 2))
    return weights / weights.sum()


def pixel_weight_accuracy(results, *, families, extra_largest):
    """L1 difference of one particle's pixel weights against a 64x sub-sampled reference, per h/pixel.

    Every family up to h = 20 pixels; at h = 50 only the families in ``extra_largest`` (the
    reference costs 64^2 samples per pixel over up to 300 x 300 pixels).
    """
    from pipeline.grid import deposit_particles
    from pipeline.kernels import default_support_factor

    rng = np.random.default_rng(7)
    worst = 0.0
    print(f"pixel-weight L1 vs {SUBSAMPLING}x{SUBSAMPLING} sub-sampled reference (and vs 1024x for h < 1)")
    print("  h/pixel " + " ".join(f"{family:>14s}" for family in families))
    table = {}
    for h in L1_SMOOTHING_LENGTHS:
        row = []
        for family in families:
            if h > 20.0 and family not in extra_largest:
                row.append("-")
                continue
            support = default_support_factor(family) * h
            n_side = 2 * math.ceil(support) + 3
            x, y = n_side // 2 + rng.uniform(-0.5, 0.5, 2)
            out = np.zeros((1, n_side, n_side))
            deposit_particles([x], [y], [h], [0.0], [0.0], [1.0], out=out, kernel=family)
            grid = _radial_column(family)
            reference = _subsampled_weights(x, y, support, n_side, grid, SUBSAMPLING)
            l1 = float(np.abs(out[0] - reference).sum())
            text = f"{100 * l1:.4f}%"
            if h < 1.0:
                fine = _subsampled_weights(x, y, support, n_side, grid, 1024)
                text += f"/{100 * float(np.abs(out[0] - fine).sum()):.4f}%"
            worst = max(worst, l1)
            row.append(text)
            table[(family, h)] = l1
        print(f"  {h:7.2f} " + " ".join(f"{text:>14s}" for text in row))
    results["pixel_weight_l1_max"] = worst
    return table


# --- scaling with N and peak memory (one fresh process per N) ---------------------------------------

def child(arguments):
    """Stream a synthetic disc through the deposit; print time, peak RSS and mass error as JSON."""
    from pipeline.grid import deposit_particles

    n_particles, shape, threads = arguments["n"], tuple(arguments["shape"]), arguments["threads"]
    _warm_up()
    out = np.zeros(shape)
    out += 0.0  # touch every page so the cube is resident before timing
    deposit_seconds = generate_seconds = 0.0
    total_weight = []
    deposited = []
    contributions = 0
    start = time.perf_counter()
    chunks = disc_chunks(n_particles, shape, chunk_particles=arguments["chunk"])
    while True:
        generate_start = time.perf_counter()
        chunk = next(chunks, None)
        generate_seconds += time.perf_counter() - generate_start
        if chunk is None:
            break
        deposit_start = time.perf_counter()
        report = deposit_particles(**chunk, out=out, n_threads=threads)
        deposit_seconds += time.perf_counter() - deposit_start
        total_weight.append(math.fsum(chunk["weight"]))
        deposited.append(report.deposited_weight)
        contributions += report.n_contributions
        del chunk
    wall = time.perf_counter() - start
    # Peak resident memory of this address space (VmHWM); ru_maxrss also carries the parent's peak
    # at fork time on Linux, so it is reported beside it only.
    status = Path("/proc/self/status").read_text().split("\n")
    high_water = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
    expected = math.fsum(deposited)
    in_cube = math.fsum(out.ravel())
    print(json.dumps(dict(n=n_particles, deposit_seconds=deposit_seconds, generate_seconds=generate_seconds,
                          wall_seconds=wall, peak_rss_bytes=1024 * high_water,
                          ru_maxrss_bytes=1024 * resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
                          mass_error=abs(in_cube - expected) / expected, total_weight=math.fsum(total_weight),
                          contributions=contributions)))


def _run_child(n, shape, threads, chunk=CHUNK_PARTICLES):
    command = [sys.executable, __file__, "--child",
               json.dumps(dict(n=n, shape=list(shape), threads=threads, chunk=chunk))]
    finished = subprocess.run(command, capture_output=True, text=True, check=True)
    return json.loads(finished.stdout.strip().splitlines()[-1])


def scaling(results):
    """Time and peak RSS at 1e5, 1e6 and 1e7 particles on 2 threads, each in a fresh process."""
    print(f"streamed deposit into {SMALL_SHAPE}, 2 threads, chunks of {CHUNK_PARTICLES}, fresh process per N")
    print("         N   deposit s  ns/particle  peak RSS MiB   mass error")
    runs = []
    for n in SCALING_COUNTS:
        run = _run_child(n, SMALL_SHAPE, 2)
        runs.append(run)
        print(f"  {n:9d} {run['deposit_seconds']:10.2f} {1e9 * run['deposit_seconds'] / n:12.0f} "
              f"{run['peak_rss_bytes'] / 2**20:13.0f} {run['mass_error']:12.2e}")
    exponent = np.polyfit(np.log([run["n"] for run in runs]), np.log([run["deposit_seconds"] for run in runs]), 1)[0]
    by_n = {run["n"]: run for run in runs}
    results.update(time_exponent=float(exponent),
                   rss_ratio_1e7_vs_1e6=by_n[10_000_000]["peak_rss_bytes"] / by_n[1_000_000]["peak_rss_bytes"],
                   max_mass_error=max(run["mass_error"] for run in runs),
                   peak_rss_mib_1e7=by_n[10_000_000]["peak_rss_bytes"] / 2**20)
    print(f"  time ~ N^{exponent:.3f}; peak RSS at 1e7 / at 1e6 = {results['rss_ratio_1e7_vs_1e6']:.3f}")


def hundred_million(results):
    """1e8 particles streamed into a 1024 x 1024 x 256 cube on 2 threads."""
    run = _run_child(100_000_000, LARGE_SHAPE, 2, chunk=1 << 20)
    results.update(seconds_1e8_1024=run["wall_seconds"], deposit_seconds_1e8_1024=run["deposit_seconds"],
                   peak_rss_gib_1e8_1024=run["peak_rss_bytes"] / 2**30, mass_error_1e8=run["mass_error"],
                   contributions_per_s_1e8_1024=run["contributions"] / run["deposit_seconds"])
    results["max_mass_error"] = max(results.get("max_mass_error", 0.0), run["mass_error"])
    print(f"1e8 particles into {LARGE_SHAPE}, 2 threads: {run['wall_seconds']:.0f} s wall "
          f"({run['deposit_seconds']:.0f} s depositing, {run['generate_seconds']:.0f} s generating), "
          f"peak RSS {run['peak_rss_bytes'] / 2**30:.2f} GiB, mass error {run['mass_error']:.1e}")


# --- beam convolution and FITS writing -------------------------------------------------------------

def _demo_cube(data):
    """Wrap a (n_chan, n_y, n_x) Jy/pixel array with the WCS of a demo-like grid."""
    from pipeline.cube import Cube
    from pipeline.geometry import GridSpec, make_cube_wcs
    from pipeline.instrument import JY_PER_PIXEL
    from pipeline.units import HI_REST_FREQUENCY

    n_chan, n_y, n_x = data.shape
    grid = GridSpec.from_channel_width(n_x=n_x, n_y=n_y, n_chan=n_chan, pixel_scale=6 * u.arcsec,
                                       ra=202.5 * u.deg, dec=-31.25 * u.deg,
                                       centre_frequency=HI_REST_FREQUENCY / 1.0028,
                                       channel_width=4 * u.km / u.s)
    return Cube(data, make_cube_wcs(grid), JY_PER_PIXEL), grid


def beam_and_fits(results, cube_data, *, repeats):
    """convolve_with_beam vs astropy convolve_fft per channel; write_cube vs ndarray.tofile."""
    from astropy.convolution import convolve_fft

    from pipeline.instrument import BeamSpec, beam_kernel, convolve_with_beam

    model, grid = _demo_cube(cube_data)
    beam = BeamSpec(major=24 * u.arcsec, minor=20 * u.arcsec, position_angle=30 * u.deg)
    ours_seconds, observed = _best_time(lambda: convolve_with_beam(model, beam), repeats)
    one_thread_seconds, _ = _best_time(lambda: convolve_with_beam(model, beam, threads=1), repeats)
    kernel = beam_kernel(beam, grid.pixel_scale)

    def with_astropy():
        return np.stack([convolve_fft(plane, kernel, boundary="fill", fill_value=0.0,
                                      normalize_kernel=True) for plane in model.data])

    astropy_seconds, reference = _best_time(with_astropy, 1)
    scale = float(observed.data.sum() / model.data.sum())
    difference = float(np.abs(observed.data / scale - reference).max() / np.abs(reference).max())
    results.update(convolve_speedup_vs_astropy=astropy_seconds / ours_seconds,
                   convolve_speedup_vs_astropy_1thread=astropy_seconds / one_thread_seconds,
                   convolve_max_relative_difference=difference)
    print(f"beam convolution of {model.data.shape}: convolve_with_beam {ours_seconds:.2f} s "
          f"({one_thread_seconds:.2f} s on 1 thread), astropy convolve_fft per channel {astropy_seconds:.2f} s: "
          f"{astropy_seconds / ours_seconds:.1f}x ({astropy_seconds / one_thread_seconds:.1f}x on 1 thread; "
          f"results agree to {difference:.1e} of the peak)")
    _fits_write_timing(results, observed, repeats=repeats, key="fits_write_vs_tofile")
    large = np.random.default_rng(3).random(LARGE_SHAPE, dtype=np.float32)
    _fits_write_timing(results, _demo_cube(large)[0], repeats=1, key="fits_write_vs_tofile_1024")


def _fits_write_timing(results, observed, *, repeats, key):
    """write_cube vs ndarray.tofile of the same float32 values, each into a new file."""
    from astropy.io import fits

    from pipeline.io import write_cube

    with tempfile.TemporaryDirectory(dir=Path(__file__).resolve().parent) as folder:
        folder = Path(folder)
        float32 = np.asarray(observed.data, dtype=np.float32)

        def fresh(name, write):
            """Write a new file each time: replacing a file makes ext4 flush it first (auto_da_alloc)."""
            def timed():
                (folder / name).unlink(missing_ok=True)
                write(folder / name)
            return timed

        fits_seconds, _ = _best_time(fresh("cube.fits", lambda path: write_cube(observed, path)), repeats + 2)
        raw_seconds, _ = _best_time(fresh("cube.raw", float32.tofile), repeats + 2)
        swapped_seconds, _ = _best_time(fresh("cube.be", lambda path: float32.astype(">f4").tofile(path)),
                                        repeats + 2)
        plain_seconds, _ = _best_time(fresh("plain.fits", lambda path: fits.PrimaryHDU(float32).writeto(path)),
                                      repeats + 2)
    results[key] = fits_seconds / raw_seconds
    print(f"write {float32.nbytes / 2**20:.0f} MiB float32: write_cube {fits_seconds:.3f} s, ndarray.tofile "
          f"{raw_seconds:.3f} s: ratio {fits_seconds / raw_seconds:.2f} (for diagnosis: big-endian copy + "
          f"tofile {swapped_seconds:.3f} s, astropy PrimaryHDU.writeto without checksum {plain_seconds:.3f} s)")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--quick", action="store_true", help="a few minutes on two cores (default)")
    mode.add_argument("--full", action="store_true", help="also 1e8 particles into 1024 x 1024 x 256")
    mode.add_argument("--child", help=argparse.SUPPRESS)
    options = parser.parse_args(argv)
    if options.child:
        child(json.loads(options.child))
        return
    from pipeline.kernels import KERNEL_FAMILIES

    started = time.perf_counter()
    _warm_up()
    results = {}
    scaling(results)  # first, while this process is small (children inherit its ru_maxrss)
    cube = throughput(results, repeats=3, large=True)
    pixel_weight_accuracy(results, families=KERNEL_FAMILIES,
                          extra_largest=KERNEL_FAMILIES if options.full else ("cubic_spline", "gaussian"))
    beam_and_fits(results, cube, repeats=2)
    if options.full:
        hundred_million(results)
    results["benchmark_seconds"] = time.perf_counter() - started
    print(json.dumps({key: (float(f"{value:.6g}") if isinstance(value, float) else value)
                      for key, value in results.items()}))


if __name__ == "__main__":
    main()
