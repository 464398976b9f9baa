"""The compiled deposit: particles spread over a spectral cube with exact pixel and channel integrals.

Positions and smoothing lengths are in pixels, line centres and widths in
channels; the kernel support radius is ``H = support_factor * h`` (config key
``grid.support_factor``: 2 for Monaghan/Price smoothing lengths, 1 when the
snapshot stores the support radius).
"""

from ._deposit import DepositReport, deposit_particles

__all__ = ["DepositReport", "deposit_particles"]
