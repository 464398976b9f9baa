"""Running a batch: in this process, or on a Dask cluster (local, by address, or through dask-jobqueue).

`run_batch` takes the executor as an argument (``client=None`` runs in this
process); only the command line starts clusters, through `connect_client`.
Jobs that share a snapshot are grouped into one task per worker, so each
worker reads each snapshot once; workers read the snapshots themselves (only
paths travel).  Each finished job is sent back at once as a worker event, and
the manifest is rewritten after every job.
"""

import collections
import contextlib
import ctypes
import ctypes.util
import dataclasses
import logging
import math
import os
import queue
import secrets
import sys
import time
import warnings

import dask
from distributed import Client, LocalCluster, WorkerPlugin, get_worker

from pipeline.errors import ConfigError, CubewrightWarning, OutputError

from ._catalogue import write_catalogue
from ._jobs import JobContext, SnapshotCache, describe_error, job_record, run_group
from ._manifest import open_manifest, remove_stale_partials
from ._slabs import SlabWork, finish_slab_job, render_slab, run_slab_job_here

__all__ = ["BatchResult", "run_batch", "connect_client", "make_jobqueue_cluster", "CATALOGUE_NAME", "PLOT_NAME"]

CATALOGUE_NAME = "catalogue.ecsv"
PLOT_NAME = "catalogue.png"
_POLL_SECONDS = 0.05
# glibc's mallopt parameters (malloc.h) and the values batch workers run with.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_MMAP_THRESHOLD_BYTES = 32 << 20
_TRIM_THRESHOLD_BYTES = 64 << 20
_GLIBC_MMAP_THRESHOLD_DEFAULT = 128 << 10
# Dask workers sample the stack of the running task every 10 ms for the dashboard's profile page;
# on 2 cores that cost the benchmark's 2-worker batch about 8% of its throughput.  Clusters the
# batch starts itself (local, dask-jobqueue) run without it: the config key, and the environment
# variable that sets it on a batch-queue node.
_PROFILER_KEY = "distributed.worker.profile.enabled"
_PROFILER_VARIABLE = "DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED"


@dataclasses.dataclass(frozen=True)
class BatchResult:
    """What :func:`run_batch` returns.

    Attributes
    ----------
    records : list of dict
        Manifest records of every job, in job order.
    skipped : tuple of str
        Jobs found complete (outputs verified) and not run again.
    failed : tuple of str
        Jobs that failed, in job order.
    catalogue, plot : pathlib.Path
        The ECSV catalogue and its PNG.
    snapshot_reads : dict
        Worker (``"local"`` in process) -> {snapshot key: times read from file}.
    wall_time : float
        Seconds from start to catalogue.
    """

    records: list
    skipped: tuple
    failed: tuple
    catalogue: object
    plot: object
    snapshot_reads: dict
    wall_time: float


def _glibc_mallopt():
    """Return glibc's ``mallopt`` function, or None on another C library or system."""
    if not sys.platform.startswith("linux"):
        return None
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        if not hasattr(libc, "gnu_get_libc_version"):
            return None
        return libc.mallopt
    except (OSError, AttributeError):
        return None


def _reuse_freed_arrays() -> bool:
    """Let glibc keep freed blocks below 32 MiB for reuse in this process; return True if it took.

    Dask's nannies start workers with ``MALLOC_TRIM_THRESHOLD_=65536``, which
    also freezes glibc's mmap threshold at 128 KiB: every larger array is then
    a fresh mapping whose pages fault in zeroed, on the benchmark's jobs about
    2000 times the page faults of a plain process and a third more time per
    job.  Blocks up to 32 MiB come from the heap again, and up to 64 MiB of
    free heap is kept before it is given back to the system.
    """
    mallopt = _glibc_mallopt()
    if mallopt is None:
        return False
    return bool(mallopt(_M_MMAP_THRESHOLD, _MMAP_THRESHOLD_BYTES)) and bool(
        mallopt(_M_TRIM_THRESHOLD, _TRIM_THRESHOLD_BYTES))


def _restore_allocator():
    """Put back the settings ``MALLOC_TRIM_THRESHOLD_`` gave the worker (glibc's adaptive mode cannot be restored)."""
    mallopt, trim = _glibc_mallopt(), os.environ.get("MALLOC_TRIM_THRESHOLD_", "")
    if mallopt is not None and trim.isdigit():
        mallopt(_M_TRIM_THRESHOLD, int(trim))
        mallopt(_M_MMAP_THRESHOLD, _GLIBC_MMAP_THRESHOLD_DEFAULT)


class _BatchWorkerPlugin(WorkerPlugin):
    """Readies each worker process for the batch: one `SnapshotCache`, and freed arrays kept for reuse.

    The allocator setting is undone when the batch ends and the plugin is
    removed, so a shared cluster's workers go back to how they were.
    """

    def setup(self, worker):
        self.cache = SnapshotCache()
        self.reusing = _reuse_freed_arrays()

    def teardown(self, worker):
        self.cache.clear()
        if self.reusing:
            _restore_allocator()


def _worker_cache(run_name):
    return get_worker().plugins[run_name].cache


def _group_task(jobs, context, run_name):
    worker = get_worker()

    def report(outcome):
        if isinstance(outcome, dict):
            worker.log_event(run_name, outcome)

    return run_group(jobs, context, _worker_cache(run_name), report=report)


def _slab_task(work, channels, context, run_name):
    return render_slab(work, channels, context, _worker_cache(run_name))


def _finish_task(work, results, context):
    return finish_slab_job(work, results, context)


def _take_reads(run_name, dask_worker):
    plugin = dask_worker.plugins.get(run_name)
    if plugin is None:
        return {}
    reads = dict(plugin.cache.reads)
    plugin.cache.clear()
    return reads


def _split_groups(jobs, n_workers):
    """Group jobs by snapshot, then split each group so that every worker gets work."""
    groups = collections.OrderedDict()
    for job in jobs:
        groups.setdefault(job.snapshot_key, []).append(job)
    parts = max(1, math.ceil(n_workers / max(1, len(groups))))
    chunks = []
    for members in groups.values():
        n_parts = min(parts, len(members))
        size = math.ceil(len(members) / n_parts)
        chunks.extend(members[start:start + size] for start in range(0, len(members), size))
    return chunks


def _host(address):
    return address.rsplit(":", 1)[0]


def _auto_threads(client):
    """1 numba thread per job when workers share a host (or none are up yet), else the config's value."""
    hosts = collections.Counter(_host(address) for address in client.nthreads())
    return 1 if not hosts or max(hosts.values()) > 1 else None


def _refuse_clobbering(batch):
    for job in batch.jobs:
        cube = batch.output_dir / f"{job.name}.fits"
        if cube.exists():
            raise OutputError(f"{cube}: exists and no manifest says this batch wrote it; pass --force to "
                              "replace it or choose another output folder")


def run_batch(batch, *, client=None, resume=False, force=False, threads="auto", progress=None) -> BatchResult:
    """Run every job of a batch, write the manifest as jobs finish, then the catalogue.

    Parameters
    ----------
    batch : BatchSpec
        From :func:`load_batch`.
    client : `distributed.Client`, optional
        Where to run; None runs every job here, one after the other.
    resume : bool
        Skip jobs whose outputs exist and verify (SHA-256) in the manifest.
    force : bool
        See :func:`open_manifest`; also allows writing over outputs no
        manifest accounts for.  With ``resume`` or ``force``, the hidden
        ``.partial-*`` files a killed run left in the output folder tree are
        deleted first.
    threads : "auto", int or None
        ``run.threads`` given to every job: "auto" is 1 when several workers
        share a machine (or none is up yet) and the config's value otherwise;
        None keeps the config's value.
    progress : callable, optional
        Called as ``progress(record, n_finished, n_to_run)`` after each job.

    Returns
    -------
    BatchResult

    Raises
    ------
    pipeline.errors.OutputError
        For a manifest that may not be continued (see :func:`open_manifest`)
        or outputs that would be overwritten.

    Warns
    -----
    pipeline.errors.CubewrightWarning
        Saying how many stale partial files were deleted, when there were any.
    """
    started = time.perf_counter()
    manifest = open_manifest(batch, resume=resume, force=force)
    if resume or force:
        removed = remove_stale_partials(batch.output_dir)
        if removed:
            warnings.warn(f"{batch.output_dir}: removed {len(removed)} stale partial file(s) (.partial-*) left by "
                          "an interrupted run", CubewrightWarning, stacklevel=2)
    if not manifest.records and not force:
        _refuse_clobbering(batch)
    to_run = [job for job in batch.jobs if not manifest.is_complete(job)]
    skipped = tuple(job.name for job in batch.jobs if job not in to_run)
    if threads == "auto":
        threads = None if client is None else _auto_threads(client)
    context = JobContext.from_batch(batch, extra_overrides=() if threads is None else (f"run.threads={threads}",))
    finished = set()

    def accept(record):
        if record["name"] in finished:
            return
        finished.add(record["name"])
        manifest.update(record)
        if progress is not None:
            progress(record, len(finished), len(to_run))

    if client is None:
        reads = {"local": _run_here(to_run, context, accept)}
    else:
        reads = _run_on_dask(client, to_run, context, accept)
    records = manifest.ordered_records()
    catalogue, plot = batch.output_dir / CATALOGUE_NAME, batch.output_dir / PLOT_NAME
    write_catalogue(records, catalogue, plot_path=plot, detection_threshold=batch.detection_threshold)
    failed = tuple(record["name"] for record in records if record["status"] != "done")
    return BatchResult(records=records, skipped=skipped, failed=failed, catalogue=catalogue, plot=plot,
                       snapshot_reads=reads, wall_time=time.perf_counter() - started)


def _run_here(jobs, context, accept):
    cache = SnapshotCache()

    def report(outcome):
        accept(run_slab_job_here(outcome, context, cache) if isinstance(outcome, SlabWork) else outcome)

    for chunk in _split_groups(jobs, 1):
        run_group(chunk, context, cache, report=report)
    return dict(cache.reads)


def _run_on_dask(client, jobs, context, accept):
    # One name per run, for the worker plugin and the event topic: batches sharing a cluster keep apart.
    run_name = f"cubewright-batch-{secrets.token_hex(8)}"
    client.register_plugin(_BatchWorkerPlugin(), name=run_name)
    events = queue.Queue()
    client.subscribe_topic(run_name, lambda event: events.put(event[1]))
    pending = {}
    try:
        for chunk in _split_groups(jobs, len(client.nthreads())):
            pending[client.submit(_group_task, chunk, context, run_name, pure=False)] = ("group", chunk)
        while pending:
            try:
                event = events.get(timeout=_POLL_SECONDS)
            except queue.Empty:
                event = None
            if event is not None:
                accept(event)
            for future in [future for future in pending if future.done()]:
                kind, what = pending.pop(future)
                _collect(client, run_name, future, kind, what, context, pending, accept)
        while not events.empty():
            accept(events.get())
        return client.run(_take_reads, run_name)
    finally:
        client.unsubscribe_topic(run_name)
        for future in pending:
            future.cancel()
        # Undo the plugin's settings on the workers; a cluster that is gone has nothing left to undo.
        with contextlib.suppress(Exception):
            client.unregister_worker_plugin(run_name)


def _collect(client, run_name, future, kind, what, context, pending, accept):
    """Take a finished task's outcome: records, or slab requests to submit."""
    if future.status != "finished":
        error = describe_error(future.exception())
        if kind == "group":
            for job in what:
                accept(job_record(job, "failed", error=f"worker task failed: {error}"))
        else:
            what.partial.unlink(missing_ok=True)
            accept(job_record(what.job, "failed", wall_time=time.time() - what.started, error=error))
        return
    if kind == "slabs":
        accept(future.result())
        return
    for outcome in future.result():
        if isinstance(outcome, SlabWork):
            parts = [client.submit(_slab_task, outcome, channels, context, run_name, pure=False) for channels in outcome.ranges]
            pending[client.submit(_finish_task, outcome, parts, context, pure=False)] = ("slabs", outcome)
        else:
            accept(outcome)


def make_jobqueue_cluster(cluster):
    """Return a dask-jobqueue cluster (not yet scaled) from a validated ``[cluster]`` section.

    Parameters
    ----------
    cluster : dict
        ``kind`` ("slurm" or "pbs") and the other keys of `BatchSpec.cluster`.

    Returns
    -------
    `dask_jobqueue.SLURMCluster` or `dask_jobqueue.PBSCluster`

    Raises
    ------
    pipeline.errors.ConfigError
        If dask-jobqueue is not installed.
    """
    try:
        import dask_jobqueue
    except ImportError as err:
        raise ConfigError("[cluster]: expected dask-jobqueue to be installed (pip install 'cubewright[cluster]'); "
                          "got an import error") from err
    options = {key: value for key, value in cluster.items() if key not in ("kind", "jobs")}
    options.setdefault("cores", 1)
    options.setdefault("memory", "4 GiB")
    options.setdefault("processes", options["cores"])
    options["memory"] = options["memory"].replace(" ", "")
    options["job_script_prologue"] = [f"export {_PROFILER_VARIABLE}=False", *options.get("job_script_prologue", ())]
    # A free port for the dashboard, so that a second batch on the same login node starts cleanly.
    options["scheduler_options"] = {"dashboard_address": ":0"}
    make = dask_jobqueue.SLURMCluster if cluster["kind"] == "slurm" else dask_jobqueue.PBSCluster
    return make(**options)


def _start_local_cluster(n_workers):
    """Return a `distributed.LocalCluster` of ``n_workers`` single-threaded worker processes.

    The workers run without Dask's statistical profiler (see ``_PROFILER_KEY``).
    """
    with dask.config.set({_PROFILER_KEY: False}):
        return LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True, dashboard_address=":0",
                            silence_logs=logging.ERROR)


@contextlib.contextmanager
def connect_client(*, workers=None, scheduler=None, cluster=None, timeout=10.0):
    """Start or join a Dask cluster and yield a client; close what was started on exit.

    Parameters
    ----------
    workers : int, optional
        Start a local cluster of this many single-threaded worker processes.
    scheduler : str, optional
        Join the running scheduler at this address instead.
    cluster : dict, optional
        A ``[cluster]`` section: start a batch-queue cluster through dask-jobqueue.
    timeout : float
        Seconds to wait for a scheduler to answer.

    Yields
    ------
    `distributed.Client`

    Raises
    ------
    pipeline.errors.ConfigError
        If no scheduler answers at ``scheduler`` within ``timeout``.
    """
    with contextlib.ExitStack() as stack:
        if scheduler is not None:
            try:
                client = Client(scheduler, timeout=timeout)
            except (OSError, TimeoutError, ValueError) as err:
                raise ConfigError(f"--scheduler: expected the address of a running Dask scheduler, e.g. "
                                  f"'tcp://10.0.0.5:8786'; got {scheduler!r}, where none answered within "
                                  f"{timeout:g} s ({type(err).__name__})") from err
        elif cluster:
            queue_cluster = stack.enter_context(make_jobqueue_cluster(cluster))
            queue_cluster.scale(jobs=cluster.get("jobs", 1))
            client = Client(queue_cluster, timeout=timeout)
        else:
            local = stack.enter_context(_start_local_cluster(workers))
            client = Client(local, timeout=timeout)
        stack.enter_context(client)
        yield client
