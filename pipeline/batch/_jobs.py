"""Running jobs where the work happens: snapshot cache, one job, a group of jobs sharing a snapshot.

Nothing here knows about Dask: a worker task and the in-process executor call
the same functions, with a `SnapshotCache` that lives as long as the process
(or the Dask worker) and a ``report`` callable that hands each finished job's
record to whoever writes the manifest.
"""

import dataclasses
import hashlib
import os
import resource
import time
import tomllib
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.wcs.utils import proj_plane_pixel_area

from pipeline.analysis import channel_frequencies, channel_radio_velocities
from pipeline.chain import open_configured_snapshot, plan_run, run
from pipeline.config import config_from_dict
from pipeline.cube import Cube
from pipeline.errors import MemoryBudgetError
from pipeline.instrument import cube_to_kelvin
from pipeline.particles import load_into_memory

from ._catalogue import measure_channels, noise_correlation, summarise_sums
from ._spec import job_config

__all__ = ["JobContext", "SnapshotCache", "run_job", "run_group", "job_record", "file_sha256",
           "reset_peak_memory", "peak_memory_mib", "channel_axes", "pixels_per_beam", "describe_error",
           "finish_measurements", "output_record"]

_JY_PER_BEAM = u.Jy / u.beam


@dataclasses.dataclass(frozen=True)
class JobContext:
    """What every job needs besides its own `JobSpec` (small and picklable).

    Attributes
    ----------
    base_text, base_source : str
        Base run config as TOML and the name of its file.
    base_dir, output_dir : pathlib.Path
    mask_level, detection_threshold : float
    extra_overrides : tuple of str
        Added to every job by the executor (e.g. ``run.threads=1``).
    """

    base_text: str
    base_source: str
    base_dir: Path
    output_dir: Path
    mask_level: float
    detection_threshold: float
    extra_overrides: tuple = ()

    @classmethod
    def from_batch(cls, batch, *, extra_overrides=()):
        """Return the context of a `BatchSpec`."""
        return cls(base_text=batch.base_text, base_source=batch.base_source, base_dir=batch.base_dir,
                   output_dir=batch.output_dir, mask_level=batch.mask_level,
                   detection_threshold=batch.detection_threshold, extra_overrides=tuple(extra_overrides))

    def config_for(self, job, *, extra=()):
        """Return the validated run config of ``job``."""
        base = config_from_dict(tomllib.loads(self.base_text), source=self.base_source, base_dir=self.base_dir)
        return job_config(base, job, extra=(*self.extra_overrides, *extra))


class SnapshotCache:
    """Holds the last snapshot read into memory, so jobs that share it read the file once.

    Attributes
    ----------
    reads : dict of str to int
        How many times each snapshot key was read from its file.
    """

    def __init__(self):
        self.reads = {}
        self._key = None
        self._snapshot = None

    def get(self, job, config):
        """Return ``job``'s snapshot in memory, reading the file only if another one is held."""
        if job.snapshot_key != self._key:
            self._key, self._snapshot = None, None
            snapshot = load_into_memory(open_configured_snapshot(config))
            self.reads[job.snapshot_key] = self.reads.get(job.snapshot_key, 0) + 1
            self._key, self._snapshot = job.snapshot_key, snapshot
        return self._snapshot

    def clear(self):
        """Drop the snapshot held in memory (the read counts stay)."""
        self._key, self._snapshot = None, None


def file_sha256(path) -> str:
    """Return the SHA-256 (hex) of a file, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def reset_peak_memory():
    """Reset the process's peak resident memory (Linux; elsewhere the lifetime peak is kept)."""
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
    except OSError:
        return


def peak_memory_mib() -> float:
    """Return the peak resident memory since `reset_peak_memory`, in MiB."""
    status = Path("/proc/self/status")
    if status.is_file():
        for line in status.read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def job_record(job, status, *, outputs=None, wall_time=None, peak_memory=None, error=None, caught=(),
               measurements=None) -> dict:
    """Return the manifest record of one job (JSON-ready)."""
    return {"name": job.name, "index": job.index, "job_digest": job.digest, "parameters": dict(job.parameters),
            "status": status, "outputs": outputs or {}, "wall_time_s": wall_time, "peak_memory_mib": peak_memory,
            "error": error, "warnings": [str(item.message) for item in caught], "measurements": measurements}


def describe_error(err) -> str:
    """One line naming an exception's type and its message."""
    return f"{type(err).__name__}: {err}".splitlines()[0]


def channel_axes(wcs):
    """Return channel radio velocity, |Δv| (km/s) and |Δnu| (Hz) over a full-band cube WCS."""
    velocity = channel_radio_velocities(wcs).to_value(u.km / u.s)
    frequency = channel_frequencies(wcs).to_value(u.Hz)
    return velocity, np.abs(np.gradient(velocity)), np.abs(np.gradient(frequency))


def pixels_per_beam(wcs, beam) -> float:
    """Return Ω_beam / Ω_pix for a cube WCS."""
    pixel_area = proj_plane_pixel_area(wcs.celestial) * u.deg**2
    return float((beam.solid_angle / pixel_area).to_value(u.dimensionless_unscaled))


def _in_jy_per_beam(cube):
    """Return the data of an observed cube in Jy/beam (undoing the conversion to K channel by channel).

    A cube already in Jy/beam comes back as it is; otherwise as one float32
    copy (the sums over it are taken in float64).
    """
    if cube.unit == _JY_PER_BEAM:
        return cube.data
    if cube.unit.is_equivalent(_JY_PER_BEAM):
        return cube.data * np.float32(cube.unit.to(_JY_PER_BEAM))
    ones = Cube(np.ones((cube.data.shape[0], 1, 1)), cube.wcs, _JY_PER_BEAM, beam=cube.beam)
    kelvin_per_jy = cube_to_kelvin(ones).data.astype(np.float32)
    return cube.data / kelvin_per_jy


def _measure_result(result, plan, context):
    """Catalogue numbers of a whole-cube run made with ``keep_model=True`` (the mask is cut on the model)."""
    cube = result.cube
    observed = _in_jy_per_beam(cube)
    rms_jy = None if plan.noise_rms is None else float(plan.noise_rms.to_value(_JY_PER_BEAM))
    model, correlation = result.model.data, None
    if rms_jy is not None:
        correlation = noise_correlation(plan.beam, plan.grid.pixel_scale)
    velocity, width_kms, width_hz = channel_axes(cube.wcs)
    sums = measure_channels(observed, model, pixels_per_beam=pixels_per_beam(cube.wcs, plan.beam),
                            velocity_kms=velocity, width_kms=width_kms, width_hz=width_hz, rms_jy=rms_jy,
                            correlation=correlation, mask_level=context.mask_level)
    return finish_measurements(sums, luminosity_distance=plan.distances.luminosity_distance, rms_jy=rms_jy,
                               context=context)


def finish_measurements(sums, *, luminosity_distance, rms_jy, context):
    """Return the catalogue numbers of a job from its channel sums."""
    measured = summarise_sums(sums, luminosity_distance=luminosity_distance, rms_jy=rms_jy,
                              detection_threshold=context.detection_threshold)
    return {**measured, "luminosity_distance_mpc": float(luminosity_distance.to_value(u.Mpc))}


def output_record(paths, output_dir):
    """Return {kind: {"path": relative path, "sha256": hex}} for written files."""
    return {kind: {"path": os.fspath(Path(path).relative_to(output_dir)), "sha256": file_sha256(path)}
            for kind, path in paths.items()}


def run_job(job, context, cache):
    """Run one whole-cube job; return its record, or a `SlabWork` request when the cube needs slabs.

    Any error is caught and recorded, so one bad job never stops the others.
    """
    from ._slabs import start_slab_job

    started = time.perf_counter()
    reset_peak_memory()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            config = context.config_for(job)
            snapshot = cache.get(job, config)
            try:
                plan = plan_run(config, snapshot=snapshot, allow_memory_map=False)
            except MemoryBudgetError:
                work = start_slab_job(job, context, cache, started=started)
                return dataclasses.replace(work, warnings=tuple(str(item.message) for item in caught))
            result = run(config, snapshot=snapshot, overwrite=True, keep_model=True)
            measurements = _measure_result(result, plan, context)
            outputs = output_record(result.paths, context.output_dir)
        except Exception as err:  # noqa: BLE001 - failure isolation: the error goes into the manifest
            return job_record(job, "failed", wall_time=time.perf_counter() - started,
                              peak_memory=peak_memory_mib(), error=describe_error(err), caught=caught)
    return job_record(job, "done", outputs=outputs, wall_time=time.perf_counter() - started,
                      peak_memory=peak_memory_mib(), caught=caught, measurements=measurements)


def run_group(jobs, context, cache, *, report):
    """Run jobs that share a snapshot one after the other, calling ``report(item)`` after each.

    Returns
    -------
    list
        The records (dict) and slab requests (`SlabWork`), in job order.
    """
    results = []
    for job in jobs:
        outcome = run_job(job, context, cache)
        report(outcome)
        results.append(outcome)
    return results
