"""Per-job measurements (flux, HI mass, S/N, W50, detection) and the batch catalogue (ECSV + PNG).

Measurements are made channel by channel into `ChannelSums`, which add up over
channel slabs, so a cube rendered in slabs is measured exactly as if whole.

Integrated signal-to-noise
--------------------------
The source mask M holds the voxels where the noise-free cube is at least
``mask_level`` times the channel rms sigma (common practice, no source: a mask
from the model rather than from the noisy data, so that noise peaks do not
enter it).  With S the observed cube in Jy/beam and Δv_k the channel widths,

    S/N_int = sum_k Δv_k sum_{i in M_k} S_ik / sqrt(sum_k Δv_k^2 Var_k),
    Var_k = sigma^2 sum_{i, j in M_k} rho(i - j),

the variance of a sum of correlated Gaussian values (sum of every covariance).
rho is the pixel correlation of the thermal noise, which is white noise
convolved with the unit-sum beam kernel K: rho = (K ⋆ K) / sum K^2.  For a mask
much larger than the beam this is sigma^2 N_pix Ω_corr / Ω_pix with Ω_corr =
2 Ω_beam, i.e. the familiar S/N = ∫S dv / (sigma_ch Δv sqrt(N_ch N_beam)) with
N_beam = N_pix Ω_pix / Ω_corr independent beams in the mask (RS-07 of
check-values for a point source; the beam correction is common practice).
The factor Ω_pix / Ω_beam that turns Jy/beam into Jy cancels in the ratio.
"""

import dataclasses
import math

import astropy.units as u
import numpy as np
import scipy.signal

from pipeline.analysis import line_width_w50, plot_batch_summary
from pipeline.emission import hi_mass_from_flux
from pipeline.instrument import beam_kernel
from pipeline.io import atomic_output

__all__ = ["ChannelSums", "measure_channels", "summarise_sums", "CATALOGUE_COLUMNS", "write_catalogue",
           "noise_correlation"]

#: Catalogue columns: name -> (unit or None, description).
CATALOGUE_COLUMNS = {
    "name": (None, "job output name"),
    "index": (None, "job number in expansion order"),
    "status": (None, "done or failed"),
    "snapshot": (None, "snapshot file stem"),
    "instrument": (None, "instrument variant"),
    "inclination": (u.deg, "inclination (0 = face-on)"),
    "position_angle": (u.deg, "position angle of the receding major axis, east of north"),
    "distance": (u.Mpc, "luminosity distance"),
    "redshift": (None, "systemic redshift"),
    "total_flux": (u.Jy * u.km / u.s, "integral of the global profile over velocity"),
    "hi_mass_recovered": (u.Msun, "HI mass from the integrated flux (optically thin)"),
    "peak_snr": (None, "peak of the noise-free cube / channel rms"),
    "integrated_snr": (None, "masked integrated flux / its noise (module notes)"),
    "w50": (u.km / u.s, "line width at 50% of the peak of the global profile"),
    "detected": (None, "integrated S/N at or above the detection threshold"),
}


@dataclasses.dataclass(frozen=True)
class ChannelSums:
    """Per-channel sums of a range of channels; `combine` joins consecutive ranges.

    Attributes
    ----------
    velocity_kms, width_kms, width_hz : numpy.ndarray, shape (n_chan,)
        Channel radio velocity and |Δv|, |Δnu| (from the full band).
    profile_jy : numpy.ndarray, shape (n_chan,)
        Global profile of the observed cube (Jy).
    masked_sum : numpy.ndarray, shape (n_chan,)
        Sum of the observed cube over the mask (Jy/beam).
    masked_variance : numpy.ndarray, shape (n_chan,)
        Noise variance of ``masked_sum`` ((Jy/beam)^2).
    peak_model : float
        Largest noise-free value (Jy/beam).
    """

    velocity_kms: np.ndarray
    width_kms: np.ndarray
    width_hz: np.ndarray
    profile_jy: np.ndarray
    masked_sum: np.ndarray
    masked_variance: np.ndarray
    peak_model: float

    @staticmethod
    def combine(parts) -> "ChannelSums":
        """Join the sums of consecutive channel ranges, in channel order."""
        parts = list(parts)
        arrays = {field.name: np.concatenate([getattr(part, field.name) for part in parts])
                  for field in dataclasses.fields(ChannelSums) if field.name != "peak_model"}
        return ChannelSums(**arrays, peak_model=max(part.peak_model for part in parts))


def noise_correlation(beam, pixel_scale) -> np.ndarray:
    """Return the pixel correlation rho of beam-correlated noise, (K ⋆ K) / sum K^2, peak 1 at the centre."""
    kernel = beam_kernel(beam, pixel_scale)
    correlation = scipy.signal.fftconvolve(kernel, kernel[::-1, ::-1], mode="full")
    return correlation / np.sum(kernel**2)


def measure_channels(observed_jy, model_jy, *, pixels_per_beam, velocity_kms, width_kms, width_hz,
                     rms_jy=None, correlation=None, mask_level=0.5) -> ChannelSums:
    """Measure a range of channels of an observed cube and its noise-free model.

    Parameters
    ----------
    observed_jy, model_jy : numpy.ndarray, shape (n_chan, n_y, n_x)
        Observed and noise-free cube in Jy/beam.
    pixels_per_beam : float
        Ω_beam / Ω_pix.
    velocity_kms, width_kms, width_hz : numpy.ndarray, shape (n_chan,)
        Channel radio velocities and widths.
    rms_jy : float, optional
        Channel noise rms in Jy/beam; None when there is no noise (no mask).
    correlation : numpy.ndarray, optional
        Noise correlation from `noise_correlation` (needed with ``rms_jy``).
    mask_level : float
        Mask threshold in units of ``rms_jy``.

    Returns
    -------
    ChannelSums
    """
    n_chan = observed_jy.shape[0]
    profile = observed_jy.sum(axis=(1, 2), dtype=np.float64) / pixels_per_beam
    masked_sum = np.zeros(n_chan)
    masked_variance = np.zeros(n_chan)
    if rms_jy is not None:
        mask = model_jy >= mask_level * rms_jy
        for k in np.flatnonzero(mask.any(axis=(1, 2))):
            plane = mask[k].astype(np.float64)
            masked_sum[k] = float(np.sum(observed_jy[k][mask[k]], dtype=np.float64))
            covered = scipy.signal.fftconvolve(plane, correlation, mode="same")
            masked_variance[k] = rms_jy**2 * float(np.sum(plane * covered))
    return ChannelSums(velocity_kms=np.asarray(velocity_kms, dtype=np.float64),
                       width_kms=np.asarray(width_kms, dtype=np.float64),
                       width_hz=np.asarray(width_hz, dtype=np.float64), profile_jy=profile,
                       masked_sum=masked_sum, masked_variance=masked_variance,
                       peak_model=float(np.max(model_jy)) if model_jy.size else 0.0)


def summarise_sums(sums, *, luminosity_distance, rms_jy, detection_threshold) -> dict:
    """Return the catalogue numbers of one job from its channel sums.

    Returns
    -------
    dict
        ``total_flux_jy_kms``, ``hi_mass_recovered_msun``, ``peak_snr``,
        ``integrated_snr``, ``w50_kms`` (floats, None when undefined) and
        ``detected`` (bool).
    """
    total_flux = float(np.sum(sums.profile_jy * sums.width_kms))
    flux_jy_hz = float(np.sum(sums.profile_jy * sums.width_hz))
    hi_mass = float(hi_mass_from_flux(flux_jy_hz * u.Jy * u.Hz, luminosity_distance).to_value(u.Msun))
    try:
        w50 = float(line_width_w50(sums.velocity_kms * u.km / u.s, sums.profile_jy * u.Jy).to_value(u.km / u.s))
    except ValueError:
        w50 = None
    peak_snr = integrated_snr = None
    if rms_jy is not None:
        peak_snr = sums.peak_model / rms_jy
        noise = math.sqrt(float(np.sum(sums.masked_variance * sums.width_kms**2)))
        integrated_snr = float(np.sum(sums.masked_sum * sums.width_kms)) / noise if noise > 0 else 0.0
    return {"total_flux_jy_kms": total_flux, "hi_mass_recovered_msun": hi_mass, "peak_snr": peak_snr,
            "integrated_snr": integrated_snr, "w50_kms": w50,
            "detected": integrated_snr is not None and integrated_snr >= detection_threshold}


def _column_value(record, column):
    parameters, measured = record["parameters"], record.get("measurements") or {}
    if column in ("name", "index", "status"):
        return record[column]
    if column == "distance" and measured.get("luminosity_distance_mpc") is not None:
        return measured["luminosity_distance_mpc"]
    if column in parameters:
        return parameters[column]
    key = {"total_flux": "total_flux_jy_kms", "hi_mass_recovered": "hi_mass_recovered_msun",
           "w50": "w50_kms"}.get(column, column)
    return measured.get(key)


def write_catalogue(records, path, *, plot_path=None, detection_threshold=5.0):
    """Write the batch catalogue, one row per job, as ECSV (and optionally its summary PNG).

    Parameters
    ----------
    records : sequence of dict
        Manifest records in job order.
    path : path-like
        ECSV file, written atomically.
    plot_path : path-like, optional
        PNG of S/N and recovered HI mass against inclination and distance.
    detection_threshold : float
        Drawn on the S/N panels and stored in the table metadata.

    Returns
    -------
    `~astropy.table.Table`
        Failed jobs have NaN measurements and ``detected`` false.
    """
    from astropy.table import Table

    table = Table(meta={"detection_threshold": detection_threshold,
                        "integrated_snr": "masked integrated flux over its noise; see pipeline.batch notes"})
    for column, (unit, description) in CATALOGUE_COLUMNS.items():
        values = [_column_value(record, column) for record in records]
        if unit is not None or column in ("redshift", "peak_snr", "integrated_snr"):
            values = np.array([np.nan if value is None else float(value) for value in values])
        elif column == "detected":
            values = np.array([bool(value) for value in values])
        elif column == "index":
            values = np.array(values, dtype=np.int64)
        else:
            values = np.array([str(value) for value in values], dtype=str)
        table[column] = values
        table[column].unit = unit
        table[column].description = description
    with atomic_output(path, overwrite=True) as partial:
        table.write(partial, format="ascii.ecsv")
    if plot_path is not None:
        with atomic_output(plot_path, overwrite=True) as partial:
            plot_batch_summary(table, partial, detection_threshold=detection_threshold)
    return table
