"""Where a run keeps its cube, and the peak memory and scratch disk that needs.

A run holds two cubes at its widest point: the float64 accumulator of the
deposit and the float32 cube the beam writes.  When both fit under
``run.memory_budget`` with everything else, they live in RAM; otherwise they
are memory-mapped from files in ``run.scratch_directory`` and only a snapshot
chunk, a few planes per thread and the 2-D maps stay resident.  The estimate
counts anonymous memory; the page cache behind a memory map is the kernel's
to reclaim and is not counted.
"""

import dataclasses
import os
from pathlib import Path

import astropy.units as u

from pipeline.errors import MemoryBudgetError
from pipeline.grid import estimate_chunk_bytes
from pipeline.instrument import fft_plane_pixels
from pipeline.units import format_memory

__all__ = ["MemoryPlan", "plan_memory"]

# Bytes held per particle of a chunk while it is projected: the snapshot arrays
# (15 float64) plus the projected copies (about 10 float64); the deposit's own
# working set comes from pipeline.grid.estimate_chunk_bytes.
_BYTES_PER_CHUNK_PARTICLE = 25 * 8
# The interpreter with numpy, astropy, h5py, matplotlib and the compiled deposit
# loaded, and the FITS writer's buffers: 274 MB resident, measured on the
# project's reference machine.
_BASELINE_BYTES = 280 * 2**20
# Cube bytes per voxel at the widest point: the float64 accumulator and the float32 beam output.
_CUBE_BYTES_PER_VOXEL = 8 + 4
# Per thread, per padded pixel: one channel's white noise (float64), its float32
# copy, spectrum (complex64, half the plane) and inverse (float32); the
# beam's own planes are smaller.  Plus two float32 planes of the field.
_PLANE_BYTES_PER_PADDED_PIXEL = 24
_PLANE_BYTES_PER_PIXEL = 8
# The 2-D maps (moment 0, column density, their float64 sums and the preview's arrays).
_MAP_BYTES_PER_PIXEL = 12 * 8


@dataclasses.dataclass(frozen=True)
class MemoryPlan:
    """How a run holds its cube, and what that costs.

    Attributes
    ----------
    memory_mapped : bool
        True when the working cubes live in files under ``scratch_directory``.
    peak_memory : `~astropy.units.Quantity` ['information']
        Estimated peak resident memory (MiB), page cache of memory maps excluded.
    scratch : `~astropy.units.Quantity` ['information']
        Disk the memory-mapped cubes take at once (MiB; zero in RAM).
    scratch_directory : pathlib.Path or None
        Folder for those files (None in RAM).
    chunk_particles : int
        Particles read per snapshot chunk.
    chunk_memory : `~astropy.units.Quantity` ['information']
        Memory one chunk needs while it is projected and deposited (MiB).
    """

    memory_mapped: bool
    peak_memory: u.Quantity
    scratch: u.Quantity
    scratch_directory: Path | None
    chunk_particles: int
    chunk_memory: u.Quantity


def plan_memory(array_shape, *, beam_major_pixels, chunk_particles, threads, budget, scratch_directory,
                allow_memory_map=True, budget_place="run.memory_budget") -> MemoryPlan:
    """Choose RAM or memory maps for a run's cube and estimate its peak memory.

    Parameters
    ----------
    array_shape : tuple of int
        ``(n_chan, n_y, n_x)`` of the cube.
    beam_major_pixels : float
        Beam major-axis FWHM in pixels (sets the FFT padding).
    chunk_particles : int
        Particles per snapshot chunk.
    threads : int or None
        Threads of the beam and noise steps (None: all cores).
    budget : `~astropy.units.Quantity` ['information']
        ``run.memory_budget``.
    scratch_directory : path-like
        Folder for memory-mapped cubes.
    allow_memory_map : bool
        With False a cube that does not fit in RAM is an error (batch runs cut
        such cubes into channel slabs instead).
    budget_place : str
        Where ``run.memory_budget`` was given, as `RunConfig.where` puts it
        (``file:run.memory_budget``); starts the error messages.

    Returns
    -------
    MemoryPlan

    Raises
    ------
    pipeline.errors.MemoryBudgetError
        If the cube does not fit in RAM and may not be memory-mapped, or the
        budget is too small even for one chunk with the cube memory-mapped;
        the message gives the smallest budget that would do.

    Examples
    --------
    >>> import astropy.units as u
    >>> plan = plan_memory((256, 1024, 1024), beam_major_pixels=4.0, chunk_particles=1_000_000, threads=2,
    ...                    budget=2 * u.GiB, scratch_directory="scratch")
    >>> plan.memory_mapped, round(float(plan.scratch.to_value(u.GiB)), 2), bool(plan.peak_memory < 2 * u.GiB)
    (True, 3.0, True)
    """
    n_chan, n_y, n_x = array_shape
    n_threads = threads or os.cpu_count() or 1
    planes = n_threads * (_PLANE_BYTES_PER_PADDED_PIXEL * fft_plane_pixels((n_y, n_x), beam_major_pixels)
                          + _PLANE_BYTES_PER_PIXEL * n_y * n_x)
    chunk = _BYTES_PER_CHUNK_PARTICLE * chunk_particles + estimate_chunk_bytes(chunk_particles)
    resident = _BASELINE_BYTES + planes + _MAP_BYTES_PER_PIXEL * n_y * n_x + chunk
    cubes = _CUBE_BYTES_PER_VOXEL * n_chan * n_y * n_x
    budget_bytes = budget.to_value(u.byte)
    common = dict(chunk_particles=chunk_particles, chunk_memory=(chunk * u.byte).to(u.MiB))
    if resident + cubes <= budget_bytes:
        return MemoryPlan(memory_mapped=False, peak_memory=((resident + cubes) * u.byte).to(u.MiB),
                          scratch=0 * u.MiB, scratch_directory=None, **common)
    shape_text = " x ".join(map(str, array_shape))
    if not allow_memory_map:
        raise MemoryBudgetError(
            f"{budget_place}: the run needs about {format_memory((resident + cubes) * u.byte)} "
            f"for a {shape_text} cube, more than the budget of {format_memory(budget)}; reduce grid.n_x, "
            f"grid.n_y or grid.n_chan, or raise run.memory_budget")
    if resident > budget_bytes:
        raise MemoryBudgetError(
            f"{budget_place}: {format_memory(budget)} is too small even with the {shape_text} cube "
            f"memory-mapped to disk; the minimum is {format_memory(resident * u.byte)}, of which "
            f"{format_memory(chunk * u.byte)} for each snapshot chunk of {chunk_particles} particles; raise "
            f"run.memory_budget to at least that, or lower snapshot.chunk_particles")
    return MemoryPlan(memory_mapped=True, peak_memory=(resident * u.byte).to(u.MiB),
                      scratch=(cubes * u.byte).to(u.MiB), scratch_directory=Path(scratch_directory), **common)
