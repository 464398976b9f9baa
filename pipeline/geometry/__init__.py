"""Centring, viewing angles, distances and the projection onto the sky grid."""

from ._centre import angular_momentum_axis, find_centre, find_frame_velocity
from ._distance import DistanceSpec, resolve_distances
from ._orient import ViewSpec, orient_chunk, rotation_for_view
from ._sky import GridSpec, make_cube_wcs, make_image_wcs, project_to_grid, velocity_dispersion_to_channels

__all__ = [
    "find_centre",
    "find_frame_velocity",
    "angular_momentum_axis",
    "ViewSpec",
    "rotation_for_view",
    "orient_chunk",
    "DistanceSpec",
    "resolve_distances",
    "GridSpec",
    "make_cube_wcs",
    "make_image_wcs",
    "project_to_grid",
    "velocity_dispersion_to_channels",
]
