"""Batch executors side by side: 2 Dask workers vs 1, snapshot reads per worker, scheduler overhead per job.

Run ``python benchmarks/batch.py --quick`` (a few minutes on 2 cores).  The last
line printed is one JSON object:

``speedup_2workers``
    Job throughput: time until the last of 8 jobs finished on a 1-worker
    LocalCluster over that on a 2-worker one (both warmed up, one numba thread
    per job).  ``speedup_2workers_with_catalogue`` adds the catalogue and its
    PNG, written once at the end by the calling process.
``snapshot_reads_per_worker``
    Largest number of times one worker read one snapshot file in the 2-worker run.
``overhead_fraction``
    What Dask adds to each job, over the median run time of one job: in the
    1-worker run, (time until the last job finished - the sum of the jobs' own
    run times on the worker) / 8 jobs.  Measured inside one run, so the noise
    between runs does not enter it.
``worker_job_time_ratio``
    Median job run time on the Dask worker over that in this process: what
    running in a worker process (not the scheduler) costs or saves.
``speedup_2processes_no_dask``
    For diagnosis: the same 8 jobs as two plain processes side by side (one
    snapshot each) against one process running both: the ceiling the machine
    itself sets (shared memory bandwidth and caches), with no Dask at all.  The
    processes keep freed arrays for reuse as the batch's Dask workers do
    (without, spawned processes ran the jobs 20-40% slower here).

Every time is the best of five runs.  The snapshots are invented exponential discs (common practice for a benchmark, no source).
"""

import argparse
import json
import statistics
import tempfile
import time
import warnings
from pathlib import Path

import h5py
import numpy as np

from pipeline.batch import connect_client, load_batch, run_batch
from pipeline.batch._executors import _reuse_freed_arrays

RUN_TOML = """
[snapshot]
path = "disc_0.h5"
chunk_particles = 50000

[geometry]
centre = "centre_of_mass"
selection_radius = "20 kpc"
orientation = "simulation_axes"

[observer]
distance = "10 Mpc"
systemic_velocity = "700 km/s"

[grid]
n_x = {n_pix}
n_y = {n_pix}
n_chan = {n_chan}
pixel_scale = "8 arcsec"
channel_width = "8 km/s"

[beam]
major = "30 arcsec"
minor = "25 arcsec"

[noise]
mode = "rms"
rms = "0.3 mJy/beam"

[output]
moment0 = true
preview = false
"""

# Each timing is the best of this many runs: the quick jobs last half a second, and one run is noisy.
REPEATS = 5

BATCH_TOML = """
[batch]
run_config = "run.toml"
output_directory = "{output}"
name = "{{snapshot}}_i{{inclination:02.0f}}"

[sweep]
snapshots = ["disc_0.h5", "disc_1.h5"]

[sweep.views]
pairs = [["20 deg", "0 deg"], ["45 deg", "30 deg"], ["70 deg", "60 deg"], ["85 deg", "90 deg"]]
"""


def _write_disc(path, n_particles, seed):
    """An exponential disc (scale length 3 kpc) in flat rotation at 180 km/s, thin and warm."""
    rng = np.random.default_rng(seed)
    radius = rng.gamma(2.0, 3.0, n_particles)
    phi = rng.uniform(0, 2 * np.pi, n_particles)
    height = rng.normal(0, 0.3, n_particles)
    position = np.column_stack([radius * np.cos(phi), radius * np.sin(phi), height])
    speed = 180.0 * (1 - np.exp(-radius / 1.5))
    velocity = np.column_stack([-speed * np.sin(phi), speed * np.cos(phi), np.zeros(n_particles)])
    velocity += rng.normal(0, 8.0, velocity.shape)
    with h5py.File(path, "w") as handle:
        gas = handle.create_group("gas")
        gas["position"] = position
        gas["velocity"] = velocity
        gas["mass"] = np.full(n_particles, 2e9 / n_particles)
        gas["smoothing_length"] = 0.3 + 0.1 * radius
        gas["temperature"] = np.full(n_particles, 8000.0)
        gas["neutral_fraction"] = np.full(n_particles, 0.9)


def _timed_batch(batch, **options):
    """Run a batch; return (seconds until its last job finished, seconds until the catalogue was written, result).

    The first is the batch's job throughput; the second adds the catalogue and
    its PNG, made once at the end in the calling process.
    """
    started = time.perf_counter()
    finished = [started]
    result = run_batch(batch, progress=lambda *_: finished.append(time.perf_counter()), threads=1, **options)
    return finished[-1] - started, time.perf_counter() - started, result


def _best_of(runs):
    """The run with the shortest job time among ``runs`` (tuples from `_timed_batch`)."""
    return min(runs, key=lambda timed: timed[0])


def _dask_run(folder, name, n_workers):
    with connect_client(workers=n_workers) as client:
        run_batch(load_batch(folder / "warm.toml", output_dir=folder / f"warm_{name}"), client=client, threads=1)
        return _best_of([_timed_batch(load_batch(folder / "batch.toml", output_dir=folder / f"{name}_{k}"),
                                      client=client) for k in range(REPEATS)])


def _in_process(folder, name, tag):
    """Run a batch file in this process (one numba thread per job) into its own folder; return its job time."""
    warnings.simplefilter("ignore")
    return _timed_batch(load_batch(folder / f"{name}.toml", output_dir=folder / f"{name}_{tag}"))[0]


def _plain_processes(folder):
    """Wall time of the two one-snapshot halves run by two processes side by side, and by one process."""
    import concurrent.futures
    import multiprocessing

    for k in range(2):
        text = BATCH_TOML.format(output=f"half_{k}").replace('["disc_0.h5", "disc_1.h5"]', f'["disc_{k}.h5"]')
        (folder / f"half_{k}.toml").write_text(text)
    # The pool's processes keep freed arrays for reuse, as the batch's Dask workers do.
    with concurrent.futures.ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("spawn"),
                                                initializer=_reuse_freed_arrays) as pool:
        list(pool.map(_in_process, [folder] * 2, ["warm", "warm"], ["a", "b"]))   # compile and cache in both
        side_by_side = min(max(pool.map(_in_process, [folder] * 2, ["half_0", "half_1"], [f"2_{k}"] * 2))
                           for k in range(REPEATS))
        one = min(pool.submit(_in_process, folder, "batch", f"1_{k}").result() for k in range(REPEATS))
    return side_by_side, one


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller jobs (a few minutes in all)")
    args = parser.parse_args()
    n_particles, n_pix, n_chan = (150_000, 128, 96) if args.quick else (600_000, 192, 128)
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        for k in range(2):
            _write_disc(folder / f"disc_{k}.h5", n_particles, seed=k + 1)
        (folder / "run.toml").write_text(RUN_TOML.format(n_pix=n_pix, n_chan=n_chan))
        (folder / "batch.toml").write_text(BATCH_TOML.format(output="in_process"))
        warm = BATCH_TOML.format(output="warm").replace('["20 deg", "0 deg"], ["45 deg", "30 deg"], ', "")
        (folder / "warm.toml").write_text(warm.replace('["70 deg", "60 deg"], ', ""))
        run_batch(load_batch(folder / "warm.toml", output_dir=folder / "warm_here"), threads=1)
        t_here, total_here, here = _best_of([_timed_batch(load_batch(folder / "batch.toml",
                                                                     output_dir=folder / f"here_{k}"))
                                             for k in range(REPEATS)])
        t_one, total_one, one = _dask_run(folder, "one_worker", 1)
        t_two, total_two, two = _dask_run(folder, "two_workers", 2)
        t_side_by_side, t_one_process = _plain_processes(folder)
    job_time = statistics.median(record["wall_time_s"] for record in here.records)
    worker_job_time = statistics.median(record["wall_time_s"] for record in one.records)
    n_jobs = len(here.records)
    overhead = (t_one - sum(record["wall_time_s"] for record in one.records)) / n_jobs / job_time
    reads = [count for per_worker in two.snapshot_reads.values() for count in per_worker.values()]
    print(f"jobs done after (catalogue written after): in process {t_here:.2f} s ({total_here:.2f} s) for {n_jobs} "
          f"jobs, median job {job_time:.2f} s ({worker_job_time:.2f} s on a Dask worker)")
    print(f"1 worker {t_one:.2f} s ({total_one:.2f} s);  2 workers {t_two:.2f} s ({total_two:.2f} s): "
          f"{t_one / t_two:.2f}x job throughput ({total_one / total_two:.2f}x with the catalogue)")
    print(f"Dask's time per job beside the jobs' own: {overhead * job_time * 1e3:.1f} ms ({overhead:.1%} of a job)")
    print(f"snapshot reads per (worker, snapshot) with 2 workers: {reads}")
    print(f"no Dask, for diagnosis: 1 process {t_one_process:.2f} s, 2 processes side by side {t_side_by_side:.2f} s "
          f"({t_one_process / t_side_by_side:.2f}x)")
    failed = here.failed + one.failed + two.failed
    print(json.dumps({"speedup_2workers": round(t_one / t_two, 3),
                      "speedup_2workers_with_catalogue": round(total_one / total_two, 3),
                      "snapshot_reads_per_worker": max(reads),
                      "overhead_fraction": round(overhead, 4),
                      "worker_job_time_ratio": round(worker_job_time / job_time, 3),
                      "speedup_2processes_no_dask": round(t_one_process / t_side_by_side, 3),
                      "median_job_seconds": round(job_time, 3), "n_jobs": n_jobs, "failed": list(failed)}))


if __name__ == "__main__":
    main()
