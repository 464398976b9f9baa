"""Dry run: the jobs of a batch with the memory and disk each needs, planned without rendering."""

import dataclasses
import warnings

import astropy.units as u

from pipeline.chain import open_configured_snapshot, plan_run
from pipeline.errors import CubewrightError, MemoryBudgetError
from pipeline.units import format_memory

from ._jobs import JobContext, describe_error
from ._slabs import UNBOUNDED_BUDGET, plan_slabs

__all__ = ["JobEstimate", "estimate_jobs", "format_estimates"]


@dataclasses.dataclass(frozen=True)
class JobEstimate:
    """The planned needs of one job.

    Attributes
    ----------
    job : JobSpec
    peak_memory : `~astropy.units.Quantity` ['information'] or None
        Estimated peak memory of the job (of one slab for a slab job).
    disk : `~astropy.units.Quantity` ['information'] or None
        4 bytes per voxel for the cube, plus 4 bytes per pixel for each map.
    n_slabs : int
        1 for a whole-cube job.
    error : str or None
        Why the job cannot be planned (it would fail).
    """

    job: object
    peak_memory: u.Quantity | None
    disk: u.Quantity | None
    n_slabs: int
    error: str | None


def estimate_jobs(batch) -> list:
    """Plan every job of a batch (snapshots opened, first chunk read; nothing rendered).

    Returns
    -------
    list of JobEstimate
    """
    context = JobContext.from_batch(batch)
    opened = {}
    estimates = []
    for job in batch.jobs:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                config = context.config_for(job)
                if job.snapshot_key not in opened:
                    opened[job.snapshot_key] = open_configured_snapshot(config)
                snapshot = opened[job.snapshot_key]
                n_slabs, maps = 1, config["output.moment0"]
                try:
                    plan = plan_run(config, snapshot=snapshot, allow_memory_map=False)
                    peak = plan.peak_memory
                except MemoryBudgetError:
                    plan, ranges = plan_slabs(config, snapshot)
                    n_slabs = len(ranges)
                    largest = max(stop - first for first, stop in ranges)
                    peak = plan_run(config.replace([f"grid.n_chan={largest}", UNBOUNDED_BUDGET]),
                                    snapshot=snapshot).peak_memory
            except CubewrightError as err:
                estimates.append(JobEstimate(job=job, peak_memory=None, disk=None, n_slabs=0,
                                             error=describe_error(err)))
                continue
        n_chan, n_y, n_x = plan.grid.array_shape
        disk = (4 * n_chan * n_y * n_x + (8 * n_y * n_x if maps else 0)) * u.byte
        estimates.append(JobEstimate(job=job, peak_memory=peak.to(u.MiB), disk=disk.to(u.MiB), n_slabs=n_slabs,
                                     error=None))
    return estimates


def format_estimates(estimates) -> str:
    """Return the dry-run listing: one line per job, then the totals."""
    lines = [f"{'#':>4}  {'name':<36} {'peak memory':>12} {'disk':>10} {'slabs':>5}  parameters"]
    for estimate in estimates:
        job = estimate.job
        shown = ", ".join(f"{key}={value:g}" if isinstance(value, float) else f"{key}={value}"
                          for key, value in job.parameters.items() if key != "index" and value is not None)
        if estimate.error is not None:
            lines.append(f"{job.index:>4}  {job.name:<36} cannot run: {estimate.error}")
            continue
        lines.append(f"{job.index:>4}  {job.name:<36} {estimate.peak_memory.value:>8.1f} MiB "
                     f"{estimate.disk.value:>6.1f} MiB {estimate.n_slabs:>5}  {shown}")
    good = [estimate for estimate in estimates if estimate.error is None]
    if good:
        largest = max(estimate.peak_memory for estimate in good)
        total = sum(estimate.disk.value for estimate in good) * u.MiB
        lines.append(f"{len(estimates)} job(s); largest peak memory {format_memory(largest)}; "
                     f"total disk {format_memory(total)}")
    return "\n".join(lines)
