"""SPH kernel families and their line-of-sight (column) tables, numpy only.

Lengths are in units of the support radius ``H = support_factor * h``, where
``h`` is the smoothing length stored in the snapshot and ``support_factor`` is
the config key ``grid.support_factor``; unset, it is the family's usual factor
(:func:`default_support_factor`: 2 for the cubic spline and the Wendland
kernels, 3 for the quintic spline and the truncated Gaussian).  Set it to 1
when the snapshot stores the support radius itself, as Gadget-style codes do.
"""

from ._columns import column_profile, quadrant_column_table
from ._families import KERNEL_FAMILIES, default_support_factor, kernel_3d

__all__ = ["KERNEL_FAMILIES", "kernel_3d", "default_support_factor", "column_profile",
           "quadrant_column_table"]
