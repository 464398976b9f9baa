"""Analysis of cubes: moment maps, line profiles, widths, previews."""

from ._moments import global_profile, integrated_flux, line_width_w50, moment0, moment0_from_chunks
from ._plots import plot_batch_summary, plot_preview
from ._spectral import channel_frequencies, channel_radio_velocities

__all__ = [
    "moment0",
    "moment0_from_chunks",
    "global_profile",
    "integrated_flux",
    "line_width_w50",
    "plot_preview",
    "plot_batch_summary",
    "channel_frequencies",
    "channel_radio_velocities",
]
