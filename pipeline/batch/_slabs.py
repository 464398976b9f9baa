"""One cube too big for one worker: channel slabs rendered independently into one memory-mapped FITS file.

A job whose whole-cube plan exceeds ``run.memory_budget`` is split into the
fewest channel slabs whose own estimated peak fits the budget.  The first step
(`start_slab_job`) finds the galaxy's orientation once and lays out the FITS
file; each slab (`render_slab`) is gridded, convolved, given the noise of its
channels (drawn per absolute channel, so the slabs add up to the whole cube)
and written through a memory map; `finish_slab_job` sets the checksums,
renames the file, joins the slabs' measurements and writes the same moment-0
and column-density maps and preview as a whole-cube job, the maps summed from
the finished file read back a few channels at a time (never the whole cube).
"""

import dataclasses
import time

import astropy.units as u
import numpy as np
from astropy.io import fits

from pipeline import __version__
from pipeline.analysis import moment0_from_chunks
from pipeline.chain import orient_galaxy, output_paths, plan_run, render_channels, write_maps
from pipeline.cube import Cube
from pipeline.emission import column_density_from_flux
from pipeline.errors import EmptyFieldError, MemoryBudgetError
from pipeline.geometry import make_cube_wcs
from pipeline.instrument import add_thermal_noise, cube_to_kelvin, jy_per_beam_to_kelvin
from pipeline.io import create_fits_cube, finalise_fits_cube, write_fits_slab

from ._catalogue import ChannelSums, measure_channels, noise_correlation
from ._jobs import (channel_axes, describe_error, finish_measurements, job_record, output_record, peak_memory_mib,
                    pixels_per_beam, reset_peak_memory)

__all__ = ["SlabWork", "SlabResult", "plan_slabs", "start_slab_job", "render_slab", "finish_slab_job",
           "run_slab_job_here", "UNBOUNDED_BUDGET"]

# Budget given to the planning of a slab job; the slabs themselves are sized to the real budget.
UNBOUNDED_BUDGET = "run.memory_budget=1e9 GiB"
_JY_PER_BEAM = u.Jy / u.beam
# Values read back per chunk when the maps are made from the finished file (16 MiB of float32).
_VALUES_PER_CHUNK = 1 << 22


@dataclasses.dataclass(frozen=True)
class SlabWork:
    """A slab job under way: what its slab tasks and its finishing step need.

    Attributes
    ----------
    job : JobSpec
    partial, final : pathlib.Path
        The FITS file being filled and its final name.
    ranges : tuple of (int, int)
        ``(first, stop)`` channels of each slab, in order.
    orientation : `~pipeline.chain.Orientation`
    grid : `~pipeline.geometry.GridSpec`
    beam : `~pipeline.instrument.BeamSpec`
    luminosity_distance : `~astropy.units.Quantity` ['length']
    redshift : float
        Cosmological redshift (surface-brightness dimming of the column density).
    rms_jy : float or None
    started : float
        ``time.time()`` when the job started.
    peak_memory : float
        Peak memory of the first step, in MiB.
    warnings : tuple of str
    """

    job: object
    partial: object
    final: object
    ranges: tuple
    orientation: object
    grid: object
    beam: object
    luminosity_distance: u.Quantity
    redshift: float
    rms_jy: float | None
    started: float
    peak_memory: float
    warnings: tuple


@dataclasses.dataclass(frozen=True)
class SlabResult:
    """What one slab task returns: its measurements and bookkeeping."""

    sums: ChannelSums
    total_weight: float
    deposited_weight: float
    peak_memory: float
    warnings: tuple


def _roomy(config):
    return config.replace([UNBOUNDED_BUDGET])


def plan_slabs(config, snapshot):
    """Return the (unbounded-budget) plan of a job and its slab ranges sized to ``run.memory_budget``.

    Raises
    ------
    pipeline.errors.MemoryBudgetError
        If even a single channel exceeds the budget.
    """
    budget = config["run.memory_budget"].to(u.byte)
    roomy = _roomy(config)
    plan = plan_run(roomy, snapshot=snapshot)

    def peak(n_chan):
        return plan_run(roomy.replace([f"grid.n_chan={n_chan}"]), snapshot=snapshot).peak_memory.to(u.byte)

    if peak(1) > budget:
        raise MemoryBudgetError(f"{config.where('run.memory_budget')}: even one channel of the "
                                f"{' x '.join(map(str, plan.grid.array_shape))} cube needs about "
                                f"{peak(1).to(u.MiB):.1f}, more than the budget of {budget.to(u.MiB):.1f}; "
                                "reduce grid.n_x or grid.n_y, or raise run.memory_budget")
    low, high = 1, plan.grid.n_chan
    while low < high:
        middle = (low + high + 1) // 2
        low, high = (middle, high) if peak(middle) <= budget else (low, middle - 1)
    n_slabs = -(-plan.grid.n_chan // low)
    edges = np.linspace(0, plan.grid.n_chan, n_slabs + 1).round().astype(int)
    return plan, tuple((int(a), int(b)) for a, b in zip(edges[:-1], edges[1:]))


def _provenance(plan, orientation, config):
    """The provenance the whole-cube run would record (noise record from a one-channel probe)."""
    record = {}
    if plan.noise_rms is not None:
        probe = Cube(np.zeros((1, plan.grid.n_y, plan.grid.n_x)), make_cube_wcs(plan.grid), _JY_PER_BEAM,
                     beam=plan.beam)
        record = dict(add_thermal_noise(probe, rms=plan.noise_rms, seed=config["noise.seed"]).provenance)
    record.update({"tool": f"cubewright {__version__}", "config_digest": config.digest,
                   "centre_kpc": orientation.centre.to_value(u.kpc).tolist(),
                   "frame_velocity_kms": orientation.frame_velocity.to_value(u.km / u.s).tolist()})
    return record


def start_slab_job(job, context, cache, *, started):
    """Orient the galaxy, size the slabs and lay out the FITS file of a slab job; return `SlabWork`."""
    with_time = time.time() - (time.perf_counter() - started)
    config = context.config_for(job)
    snapshot = cache.get(job, config)
    plan, ranges = plan_slabs(config, snapshot)
    orientation = orient_galaxy(plan)
    final = output_paths(config)["cube"]
    unit = u.K if config["emission.unit"] == "K" else _JY_PER_BEAM
    partial = create_fits_cube(final, array_shape=plan.grid.array_shape, wcs=make_cube_wcs(plan.grid), unit=unit,
                               beam=plan.beam, provenance=_provenance(plan, orientation, config),
                               config_text=config.to_toml(), overwrite=True)
    rms_jy = None if plan.noise_rms is None else float(plan.noise_rms.to_value(_JY_PER_BEAM))
    return SlabWork(job=job, partial=partial, final=final, ranges=ranges, orientation=orientation, grid=plan.grid,
                    beam=plan.beam, luminosity_distance=plan.distances.luminosity_distance,
                    redshift=plan.distances.redshift, rms_jy=rms_jy, started=with_time,
                    peak_memory=peak_memory_mib(), warnings=())


def render_slab(work, channels, context, cache) -> SlabResult:
    """Render channels ``(first, stop)`` of a slab job, write them into its file and measure them."""
    import warnings

    reset_peak_memory()
    first, stop = channels
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        config = context.config_for(work.job)
        plan = plan_run(_roomy(config), snapshot=cache.get(work.job, config))
        model = render_channels(dataclasses.replace(plan, noise_rms=None), work.orientation, channels=channels)
        observed = model.cube
        if plan.noise_rms is not None:
            observed = add_thermal_noise(observed, rms=plan.noise_rms, seed=config["noise.seed"], first_channel=first)
        written = cube_to_kelvin(observed) if config["emission.unit"] == "K" else observed
        write_fits_slab(work.partial, first, written.data)
        full_wcs = make_cube_wcs(plan.grid)
        velocity, width_kms, width_hz = channel_axes(full_wcs)
        correlation = None if plan.noise_rms is None else noise_correlation(plan.beam, plan.grid.pixel_scale)
        sums = measure_channels(np.asarray(observed.data, dtype=np.float64), model.cube.data,
                                pixels_per_beam=pixels_per_beam(full_wcs, plan.beam),
                                velocity_kms=velocity[first:stop], width_kms=width_kms[first:stop],
                                width_hz=width_hz[first:stop], rms_jy=work.rms_jy, correlation=correlation,
                                mask_level=context.mask_level)
    return SlabResult(sums=sums, total_weight=model.total_weight, deposited_weight=model.deposited_weight,
                      peak_memory=peak_memory_mib(), warnings=tuple(str(item.message) for item in caught))


def _cube_chunks(path, n_chan, step):
    """Yield the data of a FITS cube ``step`` channels at a time, each chunk read from the file on its own."""
    with fits.open(path, memmap=False) as opened:
        for first in range(0, n_chan, step):
            yield opened[0].section[first:first + step]


def _jy_chunks(chunks, kelvin_per_jy, step):
    """Yield K chunks (``step`` channels each, in order) back in Jy/beam."""
    for index, chunk in enumerate(chunks):
        yield chunk / kelvin_per_jy[index * step:index * step + len(chunk), np.newaxis, np.newaxis]


def _write_maps(work, sums, config):
    """Write the moment-0 and column-density maps and the preview a whole-cube run writes; return their paths.

    The maps are summed from the finished FITS file, read back a few channels
    at a time; the preview's line profile is the slabs' global profile.
    """
    paths = {kind: path for kind, path in output_paths(config).items() if kind != "cube"}
    if not paths:
        return {}
    unit = u.K if config["emission.unit"] == "K" else _JY_PER_BEAM
    grid = work.grid
    # At most 16 MiB and never more channels than the smallest slab, which the memory budget admits.
    step = max(1, min(_VALUES_PER_CHUNK // (grid.n_x * grid.n_y), *(stop - first for first, stop in work.ranges)))
    wcs = make_cube_wcs(grid)
    map0 = moment0_from_chunks(_cube_chunks(work.final, grid.n_chan, step), wcs, unit)
    if unit == u.K:
        # N_HI from the Jy/beam map, as a whole-cube run does: undo each channel's K factor.
        kelvin_per_jy = jy_per_beam_to_kelvin(grid.channel_frequencies, work.beam).to_value(u.K / _JY_PER_BEAM)
        map_jy = moment0_from_chunks(_jy_chunks(_cube_chunks(work.final, grid.n_chan, step), kelvin_per_jy, step),
                                     wcs, _JY_PER_BEAM)
    else:
        map_jy = map0
    column = column_density_from_flux(map_jy, work.beam, redshift=work.redshift).to(u.cm**-2)
    write_maps(paths, moment0=map0, column_density=column, grid=grid, beam=work.beam,
               velocity=sums.velocity_kms * u.km / u.s, profile=sums.profile_jy * u.Jy, config=config, overwrite=True)
    return paths


def finish_slab_job(work, results, context) -> dict:
    """Finalise the FITS file of a slab job, write its maps and preview, and return its manifest record."""
    reset_peak_memory()
    if sum(result.deposited_weight for result in results) <= 0:
        work.partial.unlink(missing_ok=True)
        raise EmptyFieldError(f"{work.job.name}: no selected gas falls inside the cube's field of view and band; "
                              "check observer.ra/dec, grid.n_chan and grid.channel_width")
    finalise_fits_cube(work.partial, work.final, overwrite=True)
    sums = ChannelSums.combine(result.sums for result in results)
    maps = _write_maps(work, sums, context.config_for(work.job))
    measurements = finish_measurements(sums, luminosity_distance=work.luminosity_distance, rms_jy=work.rms_jy,
                                       context=context)
    measurements["n_slabs"] = len(results)
    outputs = output_record({"cube": work.final, **maps}, context.output_dir)
    record = job_record(work.job, "done", outputs=outputs, wall_time=time.time() - work.started,
                        peak_memory=max([work.peak_memory, peak_memory_mib(),
                                         *(result.peak_memory for result in results)]),
                        measurements=measurements)
    record["warnings"] = [*work.warnings, *(text for result in results for text in result.warnings)]
    return record


def run_slab_job_here(work, context, cache) -> dict:
    """Render every slab of ``work`` in this process, one after the other; return the record."""
    try:
        results = [render_slab(work, channels, context, cache) for channels in work.ranges]
        return finish_slab_job(work, results, context)
    except Exception as err:  # noqa: BLE001 - failure isolation: the error goes into the manifest
        work.partial.unlink(missing_ok=True)
        return job_record(work.job, "failed", wall_time=time.time() - work.started, error=describe_error(err))
