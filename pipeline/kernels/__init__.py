"""SPH kernel families and their line-of-sight (column) tables, numpy only.

Lengths are in units of the support radius ``H = support_factor * h``, where
``h`` is the smoothing length stored in the snapshot and ``support_factor`` is
the config key ``grid.support_factor`` (2 for Monaghan/Price smoothing lengths,
1 when the snapshot stores the support radius, as Gadget-style codes do).
"""

from ._columns import column_profile, cumulative_column_table
from ._families import KERNEL_FAMILIES, kernel_3d

__all__ = ["KERNEL_FAMILIES", "kernel_3d", "column_profile", "cumulative_column_table"]
