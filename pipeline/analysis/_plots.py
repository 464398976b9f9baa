"""PNG previews; matplotlib is imported only inside these functions."""

import astropy.units as u
import numpy as np
from astropy.wcs.utils import proj_plane_pixel_scales

__all__ = ["plot_preview"]


def plot_preview(moment_map, image_wcs, velocity, flux_density, path, *, beam=None, title=""):
    """Write a two-panel PNG: a moment-0 map on sky axes and the global line profile.

    Parameters
    ----------
    moment_map : `~astropy.units.Quantity`, shape (n_y, n_x)
        Map to show (e.g. HI column density or Jy/beam km/s).
    image_wcs : `~astropy.wcs.WCS`
        Celestial WCS of the map.
    velocity, flux_density : `~astropy.units.Quantity`, shape (n_chan,)
        Global profile (radio velocity, Jy).
    path : path-like
        PNG file to write (the caller makes it atomic).
    beam : `~pipeline.instrument.BeamSpec`, optional
        Drawn as an ellipse in the lower-left corner.
    title : str
        Figure title.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import PowerNorm
    from matplotlib.patches import Ellipse

    figure = plt.figure(figsize=(12, 5.2))
    sky = figure.add_subplot(1, 2, 1, projection=image_wcs)
    values = moment_map.value
    vmax = float(np.nanmax(values)) if np.nanmax(values) > 0 else 1.0
    # A square-root stretch shows the faint outer disc and the bright centre together.
    image = sky.imshow(values, origin="lower", cmap="inferno",
                       norm=PowerNorm(gamma=0.5, vmin=0.0, vmax=vmax))
    sky.coords[0].set_axislabel("Right ascension (ICRS)")
    sky.coords[1].set_axislabel("Declination (ICRS)")
    sky.coords[0].set_major_formatter("hh:mm:ss")
    colorbar = figure.colorbar(image, ax=sky, fraction=0.046, pad=0.04)
    colorbar.set_label(moment_map.unit.to_string("latex_inline"))
    if beam is not None:
        pixel_deg = proj_plane_pixel_scales(image_wcs)[1]
        major_pix = beam.major.to_value(u.deg) / pixel_deg
        minor_pix = beam.minor.to_value(u.deg) / pixel_deg
        n_y, n_x = values.shape
        centre = (0.08 * n_x + major_pix / 2, 0.08 * n_y + major_pix / 2)
        # Position angle is east of north; east is to the left, so the ellipse
        # angle from the +x axis is 90 deg + PA.
        sky.add_patch(Ellipse(centre, width=major_pix, height=minor_pix,
                              angle=90.0 + beam.position_angle.to_value(u.deg),
                              edgecolor="white", facecolor="none", linewidth=1.2))
    sky.set_title("Moment 0")

    spectrum = figure.add_subplot(1, 2, 2)
    spectrum.step(velocity.to_value(u.km / u.s), flux_density.to_value(u.mJy), where="mid", color="k")
    spectrum.axhline(0.0, color="0.6", linewidth=0.8)
    spectrum.set_xlabel("Radio velocity (km/s)")
    spectrum.set_ylabel("Flux density (mJy)")
    spectrum.set_title("Global line profile")
    if title:
        figure.suptitle(title)
    figure.tight_layout()
    figure.savefig(path, dpi=110, format="png")
    plt.close(figure)
