"""FITS readers: a cube back into a Cube, the stored run config, and a text summary."""

import contextlib
import math
import pathlib

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.wcs import WCS

from pipeline.cube import Cube
from pipeline.errors import FitsInputError
from pipeline.instrument import BeamSpec

from ._fits_write import NOISE_JY_KEYWORD, NOISE_KEYWORD, NOISE_PROVENANCE_KEY
from ._provenance import (CONFIG_EXTNAME, DIGEST_KEYWORD, PROVENANCE_EXTNAME, VERSION_KEYWORD, config_digest,
                          config_text_from_table, provenance_from_table)

__all__ = ["read_cube", "read_config_text", "describe_fits"]

# Spectral CTYPE (first four characters) -> equivalencies to frequency, given the rest frequency.
_TO_FREQUENCY = {
    "FREQ": lambda rest: [],
    "WAVE": lambda rest: u.spectral(),
    "ENER": lambda rest: u.spectral(),
    "WAVN": lambda rest: u.spectral(),
    "VRAD": u.doppler_radio,
    "VOPT": u.doppler_optical,
    "VELO": u.doppler_relativistic,
}


def _one_line(err):
    """Return an exception message squeezed onto one line."""
    return " ".join(str(err).split())


@contextlib.contextmanager
def _open(path):
    """Open ``path`` as FITS, turning a missing, unreadable or non-FITS file into FitsInputError."""
    if not path.exists():
        raise FitsInputError(f"{path}: no such file")
    if path.is_dir():
        raise FitsInputError(f"{path}: is a folder, not a FITS file")
    # Opening the file ourselves closes it even when astropy gives up half way.
    with path.open("rb") as handle:
        try:
            hdul = fits.open(handle, checksum=True)
        except (OSError, TypeError, ValueError) as err:
            raise FitsInputError(f"{path}: not a readable FITS file ({_one_line(err)})") from err
        with hdul:
            yield hdul


def _find_image(hdul):
    """Return (index, HDU) of the first HDU holding an image, or None."""
    return next(((index, hdu) for index, hdu in enumerate(hdul)
                 if hdu.is_image and hdu.header.get("NAXIS", 0) > 0), None)


def _cube_wcs(header, path, index):
    """Return the 3-axis WCS of a cube header, checking the axis order (lon, lat, spectral)."""
    try:
        wcs = WCS(header)
    except ValueError as err:
        raise FitsInputError(f"{path}: HDU {index} has an unreadable WCS ({_one_line(err)})") from err
    ctypes = list(wcs.wcs.ctype)
    if not wcs.has_celestial:
        raise FitsInputError(f"{path}: HDU {index} has no celestial WCS; expected CTYPE1/CTYPE2 such as "
                             f"'RA---SIN'/'DEC--SIN'; got {ctypes}")
    if (wcs.wcs.lng, wcs.wcs.lat, wcs.wcs.spec) != (0, 1, 2):
        raise FitsInputError(f"{path}: HDU {index} axes must be (longitude, latitude, spectral) such as "
                             f"['RA---SIN', 'DEC--SIN', 'FREQ']; got {ctypes}")
    return wcs


def _unit(header, path, index):
    """Return the unit parsed from BUNIT with FITS rules."""
    if "BUNIT" not in header:
        raise FitsInputError(f"{path}: HDU {index} has no BUNIT; expected a data unit such as 'Jy beam-1' or 'K'")
    text = header["BUNIT"]
    try:
        return u.Unit(text, format="fits")
    except (ValueError, TypeError) as err:
        raise FitsInputError(f"{path}: HDU {index} BUNIT {text!r} is not a FITS unit string; expected e.g. "
                             "'Jy beam-1', 'K' or 'Jy km s-1 beam-1'") from err


def _beam(header, path, index):
    """Return the BeamSpec from BMAJ/BMIN/BPA (degrees), or None when BMAJ and BMIN are absent."""
    present = [key for key in ("BMAJ", "BMIN") if key in header]
    if not present:
        return None
    if len(present) == 1:
        missing = ({"BMAJ", "BMIN"} - set(present)).pop()
        raise FitsInputError(f"{path}: HDU {index} has {present[0]} but no {missing}; a beam needs both")
    values = {}
    for key in ("BMAJ", "BMIN", "BPA"):
        value = header.get(key, 0.0)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise FitsInputError(f"{path}: HDU {index} {key} must be a number of degrees; got {value!r}")
        values[key] = float(value)
    if values["BMAJ"] <= 0 or values["BMIN"] <= 0:
        raise FitsInputError(f"{path}: HDU {index} BMAJ and BMIN must be positive (degrees); "
                             f"got {values['BMAJ']!r}, {values['BMIN']!r}")
    try:
        return BeamSpec(major=values["BMAJ"] * u.deg, minor=values["BMIN"] * u.deg,
                        position_angle=values["BPA"] * u.deg)
    except ValueError as err:
        raise FitsInputError(f"{path}: HDU {index} BMAJ/BMIN/BPA do not describe a beam: {err}") from err


def _stored_record(hdul, path):
    """Return the dict in the PROVENANCE extension, refusing a table of another layout."""
    hdu = hdul[PROVENANCE_EXTNAME]
    layout = f"{path}: the {PROVENANCE_EXTNAME} extension is not a cubewright record (columns KEY, VALUE, UNIT)"
    if not isinstance(hdu, fits.BinTableHDU) or not {"KEY", "VALUE", "UNIT"} <= set(hdu.columns.names):
        raise FitsInputError(layout)
    try:
        return provenance_from_table(hdu)
    except ValueError as err:
        raise FitsInputError(f"{layout}: {_one_line(err)}") from err


def _is_temperature(header):
    """Whether BUNIT is a temperature (NOISERMS is then in K, not Jy/beam)."""
    try:
        return u.Unit(header.get("BUNIT", ""), format="fits").is_equivalent(u.K)
    except ValueError:
        return False


def _provenance(hdul, header, path):
    """Return the PROVENANCE record, or the NOISERMS keyword alone when there is none."""
    if PROVENANCE_EXTNAME in hdul:
        return _stored_record(hdul, path)
    if NOISE_JY_KEYWORD in header:
        return {NOISE_PROVENANCE_KEY: float(header[NOISE_JY_KEYWORD])}
    if NOISE_KEYWORD in header and not _is_temperature(header):
        return {NOISE_PROVENANCE_KEY: float(header[NOISE_KEYWORD])}
    return {}


def read_cube(path):
    """Read a FITS spectral cube.

    Parameters
    ----------
    path : str or os.PathLike
        FITS file whose first image HDU has three axes ordered (longitude,
        latitude, spectral).

    Returns
    -------
    `~pipeline.cube.Cube`
        Data in native byte order (float32 stays float32), shape
        (n_chan, n_y, n_x); the WCS; the unit from BUNIT (FITS syntax); the beam
        as a :class:`~pipeline.instrument.BeamSpec` or None; the provenance record written by
        :func:`~pipeline.io.write_cube` (or ``{"noise_rms_jy_per_beam": NOISERMS}``
        for files with only the keyword).

    Raises
    ------
    pipeline.errors.FitsInputError
        If the file is missing or not FITS, the data are not 3-D, the WCS has
        no celestial or spectral axis in that order, BUNIT is missing or not a
        FITS unit, or the beam keywords are incomplete.

    Notes
    -----
    A missing BPA is read as 0 degrees.  Checksums are verified when present;
    astropy warns on a mismatch.
    """
    path = pathlib.Path(path)
    with _open(path) as hdul:
        found = _find_image(hdul)
        if found is None:
            raise FitsInputError(f"{path}: no HDU holds image data; expected a 3-axis cube")
        index, hdu = found
        header = hdu.header
        if header["NAXIS"] != 3:
            shape = tuple(header.get(f"NAXIS{axis}") for axis in range(1, header["NAXIS"] + 1))
            raise FitsInputError(f"{path}: HDU {index} must be a 3-axis cube (NAXIS = 3); got NAXIS = "
                                 f"{header['NAXIS']} with NAXISn = {shape}")
        wcs = _cube_wcs(header, path, index)
        unit = _unit(header, path, index)
        beam = _beam(header, path, index)
        provenance = _provenance(hdul, header, path)
        try:
            stored = hdu.data
            dtype = np.float32 if stored.dtype.kind == "f" and stored.dtype.itemsize == 4 else np.float64
            data = np.array(stored, dtype=dtype)
        except (OSError, TypeError, ValueError) as err:
            raise FitsInputError(f"{path}: HDU {index} data cannot be read ({_one_line(err)}); "
                                 "the file may be truncated") from err
    return Cube(data=data, wcs=wcs, unit=unit, beam=beam, provenance=provenance)


def read_config_text(path):
    """Return the run config stored in a file's RUNCONFIG extension, exactly as written.

    Parameters
    ----------
    path : str or os.PathLike
        FITS file written by :func:`~pipeline.io.write_cube` or
        :func:`~pipeline.io.write_image` with a config.

    Returns
    -------
    str

    Raises
    ------
    pipeline.errors.FitsInputError
        If the file is missing or not FITS, has no RUNCONFIG extension, or its
        text no longer matches the CWCFGSHA digest in the primary header.
    """
    path = pathlib.Path(path)
    with _open(path) as hdul:
        if CONFIG_EXTNAME not in hdul:
            raise FitsInputError(f"{path}: no {CONFIG_EXTNAME} extension; the file was written without a run config")
        table = hdul[CONFIG_EXTNAME]
        if not isinstance(table, fits.BinTableHDU) or "LINE" not in table.columns.names:
            raise FitsInputError(f"{path}: the {CONFIG_EXTNAME} extension has no LINE column; "
                                 "it was not written by cubewright")
        text = config_text_from_table(table)
        recorded = hdul[0].header.get(DIGEST_KEYWORD)
    if recorded is not None and recorded != config_digest(text):
        raise FitsInputError(f"{path}: the {CONFIG_EXTNAME} text does not match {DIGEST_KEYWORD} "
                             f"({recorded}); the file has been altered")
    return text


def _readable(quantity, *, is_step=False):
    """Format a scalar Quantity in a unit suited to its kind (angles: deg, or arcsec for a step)."""
    if quantity.unit.physical_type == "frequency":
        magnitude = abs(quantity.to_value(u.Hz))
        unit = next((unit for unit in (u.GHz, u.MHz, u.kHz) if magnitude >= unit.to(u.Hz)), u.Hz)
        return f"{quantity.to_value(unit):.9g} {unit}"
    if quantity.unit.physical_type == "speed":
        return f"{quantity.to_value(u.km / u.s):.9g} km / s"
    if quantity.unit.physical_type == "angle":
        unit = u.arcsec if is_step else u.deg
        return f"{quantity.to_value(unit):.9g} {unit}"
    return f"{quantity.value:.9g} {quantity.unit}".rstrip()


def _rest_frequency(wcs):
    """Return the rest frequency of a WCS (RESTFRQ, else from RESTWAV), or None."""
    if wcs.wcs.restfrq > 0:
        return wcs.wcs.restfrq * u.Hz
    if wcs.wcs.restwav > 0:
        return (const.c / (wcs.wcs.restwav * u.m)).to(u.Hz)
    return None


def _spectral_range(wcs, axis, n_pixels):
    """Return the line giving the frequency and radio-velocity range of a spectral axis."""
    spectral = wcs.sub([axis + 1])
    world = spectral.all_pix2world(np.array([0.0, n_pixels - 1.0]), 0)[0] * u.Unit(spectral.wcs.cunit[0])
    rest = _rest_frequency(wcs)
    kind = spectral.wcs.ctype[0][:4]
    if kind not in _TO_FREQUENCY or (rest is None and kind not in ("FREQ", "WAVE", "ENER", "WAVN")):
        return "channel centres " + " to ".join(_readable(value) for value in world)
    frequency = world.to(u.Hz, equivalencies=_TO_FREQUENCY[kind](rest))
    text = "frequency " + " to ".join(_readable(value) for value in frequency)
    if rest is None:
        return text + "; no rest frequency, so no velocity"
    velocity = frequency.to(u.km / u.s, equivalencies=u.doppler_radio(rest))
    return (text + "; radio velocity " + " to ".join(_readable(value) for value in velocity)
            + f" (rest frequency {_readable(rest)})")


def _axis_lines(header, wcs):
    """Return one line per axis (CTYPE, size, CRVAL at CRPIX, CDELT), plus the spectral range."""
    lines = []
    cdelt = wcs.wcs.get_cdelt()
    for axis in range(wcs.naxis):
        n_pixels = header.get(f"NAXIS{axis + 1}", 0)
        unit = u.Unit(str(wcs.wcs.cunit[axis]))
        counted = "channels" if axis == wcs.wcs.spec else "pixels"
        lines.append(f"  axis {axis + 1}: {wcs.wcs.ctype[axis] or '(no CTYPE)'}, {n_pixels} {counted}; "
                     f"CRVAL{axis + 1} {_readable(wcs.wcs.crval[axis] * unit)} at CRPIX{axis + 1} "
                     f"{wcs.wcs.crpix[axis]:g}; step {_readable(cdelt[axis] * unit, is_step=True)}")
        if axis == wcs.wcs.spec and n_pixels > 0:
            lines.append(f"          {_spectral_range(wcs, axis, n_pixels)}")
    return lines


def _hdu_line(index, hdu):
    """Return a one-line summary of an HDU."""
    name = hdu.name or "(no name)"
    if isinstance(hdu, (fits.BinTableHDU, fits.TableHDU)):
        return f"HDU {index} {name}: table, {hdu.header.get('NAXIS2', 0)} rows, columns {', '.join(hdu.columns.names)}"
    shape = " x ".join(str(hdu.header.get(f"NAXIS{axis}")) for axis in range(1, hdu.header.get("NAXIS", 0) + 1))
    return f"HDU {index} {name}: image, BITPIX {hdu.header.get('BITPIX')}, NAXISn {shape or '(none)'}"


def _data_lines(index, header):
    """Return the lines describing the data HDU: axes, unit, beam, noise, provenance."""
    lines = [f"data (HDU {index}):"]
    try:
        wcs = WCS(header)
    except ValueError as err:
        lines.append(f"  WCS: cannot be read ({_one_line(err)})")
    else:
        lines.extend(_axis_lines(header, wcs))
    lines.append(f"  unit (BUNIT): {header.get('BUNIT', 'not set')}")
    if "BMAJ" in header and "BMIN" in header:
        lines.append(f"  beam: {header['BMAJ'] * 3600:.6g} x {header['BMIN'] * 3600:.6g} arcsec, "
                     f"position angle {header.get('BPA', 0.0):.6g} deg (BMAJ, BMIN, BPA)")
    else:
        lines.append("  beam: not set (no BMAJ/BMIN)")
    noise, noise_jy = header.get(NOISE_KEYWORD), header.get(NOISE_JY_KEYWORD)
    unit = header.get("BUNIT", "?") if _is_temperature(header) else "Jy/beam"
    lines.append(f"  noise rms per channel ({NOISE_KEYWORD}): "
                 + ("not recorded" if noise is None else f"{noise:.6g} {unit}")
                 + ("" if noise_jy is None else f" ({NOISE_JY_KEYWORD}: {noise_jy:.6g} Jy/beam)"))
    return lines


def _provenance_lines(hdul, path):
    """Return the lines on who wrote the file and which config and record it carries."""
    primary = hdul[0].header
    written = ", ".join(f"{key} = {primary[key]}" for key in ("ORIGIN", VERSION_KEYWORD, "DATE") if key in primary)
    lines = [f"written by: {written or 'not recorded'}",
             f"config digest ({DIGEST_KEYWORD}): {primary.get(DIGEST_KEYWORD, 'not recorded')}"]
    if CONFIG_EXTNAME in hdul:
        lines.append(f"run config: {CONFIG_EXTNAME} extension, {hdul[CONFIG_EXTNAME].header['NAXIS2']} lines")
    else:
        lines.append(f"run config: none ({CONFIG_EXTNAME} extension absent)")
    if PROVENANCE_EXTNAME in hdul:
        try:
            items = "items " + ", ".join(_stored_record(hdul, path))
        except FitsInputError:
            items = "not in cubewright's layout"
        lines.append(f"provenance record: {PROVENANCE_EXTNAME} extension, {items}")
    return lines


def describe_fits(path):
    """Return a readable summary of a FITS file for ``cubewright inspect``.

    Parameters
    ----------
    path : str or os.PathLike
        Any FITS file; cubes and maps written by cubewright get the fullest
        summary.

    Returns
    -------
    str
        Lines listing the HDUs; for the first image HDU its axes (CTYPE, size,
        reference value and step in readable units, and for a spectral axis the
        frequency and radio-velocity range of the channel centres), BUNIT,
        beam and noise rms; the provenance keywords, and whether a run config
        and a provenance record are stored.

    Raises
    ------
    pipeline.errors.FitsInputError
        If the file is missing or not FITS.
    """
    path = pathlib.Path(path)
    with _open(path) as hdul:
        lines = [f"{path}: {len(hdul)} HDU{'s' if len(hdul) != 1 else ''}"]
        lines.extend(f"  {_hdu_line(index, hdu)}" for index, hdu in enumerate(hdul))
        found = _find_image(hdul)
        if found is None:
            lines.append("data: no HDU holds image data")
        else:
            lines.extend(_data_lines(found[0], found[1].header))
        lines.extend(_provenance_lines(hdul, path))
    return "\n".join(lines)
