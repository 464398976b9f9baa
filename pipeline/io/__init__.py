"""FITS output and input: cubes and maps with WCS, beam, noise and provenance; atomic writes."""

from ._atomic import atomic_output, check_free_space, check_writable
from ._fits_slabs import create_fits_cube, finalise_fits_cube, write_fits_slab
from ._fits_read import describe_fits, read_config_text, read_cube
from ._fits_write import write_cube, write_image
from ._provenance import config_digest

__all__ = [
    "atomic_output",
    "check_writable",
    "check_free_space",
    "write_cube",
    "write_image",
    "read_cube",
    "read_config_text",
    "describe_fits",
    "config_digest",
    "create_fits_cube",
    "write_fits_slab",
    "finalise_fits_cube",
]
