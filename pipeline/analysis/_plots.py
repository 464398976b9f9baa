"""PNG previews; matplotlib is imported only inside these functions."""

import astropy.units as u
import numpy as np
from astropy.wcs.utils import proj_plane_pixel_scales

__all__ = ["plot_preview", "plot_batch_summary"]


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
    colorbar.set_label(f"{_map_name(moment_map.unit)} ({moment_map.unit.to_string('latex_inline')}), square-root stretch")
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
    sky.set_title(_map_name(moment_map.unit))

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


def _tick_label(value, _position=None):
    """A log-axis tick as a plain number (``200``, ``0.5``), or as m×10^n beyond 1e5."""
    if value >= 1e5:
        mantissa, exponent = f"{value:.0e}".split("e")
        return rf"${mantissa}\times10^{{{int(exponent)}}}$"
    return f"{value:g}"


def _set_value_scale(axis, values):
    """Log y axis with plain numbers when ``values`` span more than a decade, else a linear one.

    Minor ticks are labelled (at 2 and 5 times a power of ten) only when the
    axis spans at most two decades, so that labels never run into each other.
    """
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    if values.size == 0 or values.max() <= 10 * values.min():
        return
    axis.set_yscale("log")
    plain = FuncFormatter(_tick_label)
    axis.yaxis.set_major_formatter(plain)
    if values.max() <= 100 * values.min():
        axis.yaxis.set_minor_locator(LogLocator(subs=(2.0, 5.0)))
        axis.yaxis.set_minor_formatter(plain)
    else:
        axis.yaxis.set_minor_formatter(NullFormatter())


def plot_batch_summary(table, path, *, detection_threshold=None):
    """Write a 2 x 2 PNG of integrated S/N and recovered HI mass against inclination and distance.

    Parameters
    ----------
    table : `~astropy.table.Table`
        Batch catalogue with columns ``inclination`` (deg), ``distance``
        (Mpc), ``integrated_snr``, ``hi_mass_recovered`` (Msun) and
        ``detected``; rows with NaN values are left out.
    path : path-like
        PNG file to write (the caller makes it atomic).
    detection_threshold : float, optional
        Drawn as a dashed line on the S/N panels.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D

    inclination = np.asarray(table["inclination"], dtype=float)
    distance = np.asarray(table["distance"], dtype=float)
    snr = np.asarray(table["integrated_snr"], dtype=float)
    mass = np.asarray(table["hi_mass_recovered"], dtype=float)
    detected = np.asarray(table["detected"], dtype=bool)
    figure, axes = plt.subplots(2, 2, figsize=(11, 8.5), sharex="col")
    panels = ((0, 0, inclination, snr, distance, "Distance (Mpc)"), (0, 1, distance, snr, inclination, "Inclination (deg)"),
              (1, 0, inclination, mass, distance, "Distance (Mpc)"), (1, 1, distance, mass, inclination, "Inclination (deg)"))
    for row, column, x, y, colour, colour_label in panels:
        axis = axes[row, column]
        good = np.isfinite(x) & np.isfinite(y) & np.isfinite(colour)
        positive = good & (y > 0)
        scatter = None
        for is_detected, marker, label in ((True, "o", "detected"), (False, "x", "not detected")):
            chosen = positive & (detected == is_detected)
            if chosen.any():
                scatter = axis.scatter(x[chosen], y[chosen], c=colour[chosen], marker=marker, cmap="viridis",
                                       vmin=np.nanmin(colour[good]), vmax=np.nanmax(colour[good]), label=label)
        if scatter is not None:
            figure.colorbar(scatter, ax=axis).set_label(colour_label)
            handles = [Line2D([], [], color="0.3", marker=marker, linestyle="", label=label)
                       for marker, label in (("o", "detected"), ("x", "not detected"))]
            if row == 0 and detection_threshold is not None:
                handles.append(Line2D([], [], color="0.4", linestyle="--", linewidth=1,
                                      label=f"threshold (S/N {detection_threshold:g})"))
            axis.legend(handles=handles, loc="best", fontsize="small")
        _set_value_scale(axis, y[positive])
        if row == 0 and detection_threshold is not None:
            axis.axhline(detection_threshold, color="0.4", linestyle="--", linewidth=1)
        axis.set_ylabel("Integrated S/N" if row == 0 else r"Recovered HI mass ($M_\odot$)")
        if row == 1:
            axis.set_xlabel("Inclination (deg)" if column == 0 else "Distance (Mpc)")
    figure.suptitle("Batch summary: integrated S/N and recovered HI mass")
    figure.tight_layout()
    figure.savefig(path, dpi=100, format="png")
    plt.close(figure)


def _map_name(unit):
    """What a 2-D map of this unit shows, for titles."""
    if unit.is_equivalent(u.cm**-2):
        return "HI column density"
    return "Moment 0"
