"""The compiled deposit: particles spread over a spectral cube with exact pixel and channel integrals.

Positions and smoothing lengths are in pixels, line centres and widths in
channels; the kernel support radius is ``H = support_factor * h`` (config key
``grid.support_factor``; unset, the kernel family's usual factor).  The cube
accumulates in float64, in RAM or memory-mapped (:func:`accumulator`).
"""

from ._accumulator import accumulator, allocate_accumulator
from ._deposit import DepositReport, deposit_particles, estimate_chunk_bytes

__all__ = ["DepositReport", "deposit_particles", "estimate_chunk_bytes", "accumulator",
           "allocate_accumulator"]
