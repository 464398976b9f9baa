"""FITS writers for cubes and 2-D maps, with WCS, beam, noise and provenance.

Each file is a float32 primary image with the full WCS header, followed by
binary-table extensions RUNCONFIG (the run config, one line per row, when a
config is given) and PROVENANCE (the cube's provenance record, when it has
one).  Header keywords besides the WCS:

========  ===============================================================
BUNIT     data unit in FITS syntax, e.g. ``'Jy beam-1'``,
          ``'Jy km s-1 beam-1'``, ``'K'``, ``'cm-2'``
BMAJ      beam FWHM along the major axis, degrees (when a beam is set)
BMIN      beam FWHM along the minor axis, degrees
BPA       beam position angle, degrees east of north
NOISERMS  thermal noise rms per channel in the cube's unit (BUNIT), from
          ``provenance["noise_rms_jy_per_beam"]``; for a K cube at the
          reference channel (Rayleigh-Jeans, scaling as nu^-2 across the band)
NOISEJY   the same rms in Jy/beam, beside NOISERMS in a K cube
ORIGIN, DATE, CWVERS, CWCFGSHA
          see :mod:`pipeline.io._provenance`
========  ===============================================================

Files carry CHECKSUM and DATASUM and pass ``fitsverify`` with no warning.
"""

import concurrent.futures
import io
import math
import pathlib
import re

import astropy.units as u
import numpy as np
from astropy.io import fits

from pipeline.errors import OutputError

from ._atomic import atomic_output, check_free_space
from ._checksum import float32_word_sum, ones_complement_sum, stamp_checksum
from ._provenance import config_table, provenance_cards, provenance_table

__all__ = ["write_cube", "write_image", "fits_unit_string", "NOISE_KEYWORD", "NOISE_PROVENANCE_KEY"]

NOISE_KEYWORD = "NOISERMS"
NOISE_JY_KEYWORD = "NOISEJY"
NOISE_PROVENANCE_KEY = "noise_rms_jy_per_beam"

_BLOCK = 2880
_DISK_DTYPE = np.dtype(">f4")
# Values converted, summed and written per step (1 MiB of float32).
_VALUES_PER_WRITE = 1 << 18
_KEYWORD = re.compile(r"[A-Z0-9_-]{1,8}")
_REPEATABLE = {"COMMENT", "HISTORY", ""}
# Units that read best at the end of a FITS unit string ('Jy km s-1 beam-1').
_TRAILING_UNITS = (u.beam, u.pix)


def fits_unit_string(unit):
    """Return ``unit`` in FITS unit syntax, positive powers first and beam or pixel last.

    Parameters
    ----------
    unit : `~astropy.units.UnitBase`
        Unit to write.

    Returns
    -------
    str
        A string astropy parses back to ``unit`` with ``format='fits'``.

    Raises
    ------
    ValueError
        If the unit has no FITS form.

    Notes
    -----
    Under FITS rules everything after a '/' is in the denominator, so
    ``'Jy/beam km/s'`` would mean Jy/(beam km s) (FITS Standard 4.0, Sect. 4.3;
    check-values FW-08).  Writing negative powers avoids the trap.

    Examples
    --------
    >>> fits_unit_string(u.Jy / u.beam * u.km / u.s)
    'Jy km s-1 beam-1'
    >>> fits_unit_string(u.K * u.km / u.s), fits_unit_string(u.cm**-2)
    ('K km s-1', 'cm-2')
    """
    unit = u.Unit(unit)
    powers_are_integers = all(float(power).is_integer() for power in unit.powers)
    if unit.scale != 1 or not unit.bases or not powers_are_integers:
        return unit.to_string("fits")
    terms = sorted(zip(unit.bases, unit.powers), key=lambda term: (term[1] < 0, term[0] in _TRAILING_UNITS))
    text = " ".join(base.to_string("fits") + ("" if power == 1 else str(int(power))) for base, power in terms)
    if u.Unit(text, format="fits") != unit:
        return unit.to_string("fits")
    return text


def _unit_card(unit, path):
    """Return the BUNIT card for ``unit``."""
    try:
        text = fits_unit_string(unit)
    except ValueError as err:
        raise OutputError(f"{path}: unit '{unit}' has no FITS form; use units such as Jy/beam, K or cm-2") from err
    return ("BUNIT", text, "unit of the data values")


def _beam_cards(beam):
    """Return BMAJ, BMIN and BPA cards (degrees) for a beam with major, minor and position angle."""
    position_angle = getattr(beam, "position_angle", None)
    if position_angle is None:
        position_angle = beam.pa
    return [
        ("BMAJ", float(beam.major.to_value(u.deg)), "[deg] beam FWHM, major axis"),
        ("BMIN", float(beam.minor.to_value(u.deg)), "[deg] beam FWHM, minor axis"),
        ("BPA", float(position_angle.to_value(u.deg)), "[deg] beam major axis, east of north"),
    ]


def _reference_frequency(wcs):
    """Frequency at the spectral reference pixel of a cube WCS (FREQ, or VRAD with RESTFRQ)."""
    spectral = wcs.spectral
    return u.Quantity(spectral.pixel_to_world(spectral.wcs.crpix[0] - 1).to(u.Hz))


def _noise_cards(provenance, unit, beam, wcs):
    """Return NOISERMS in the cube's unit (and NOISEJY beside it for a K cube) when a noise rms is recorded."""
    if NOISE_PROVENANCE_KEY not in provenance:
        return []
    rms = provenance[NOISE_PROVENANCE_KEY]
    rms_jy_per_beam = rms.to_value(u.Jy / u.beam) if isinstance(rms, u.Quantity) else float(rms)
    in_jy = (NOISE_KEYWORD, float(rms_jy_per_beam), "[Jy beam-1] thermal noise rms per channel")
    if not (unit.is_equivalent(u.K) and beam is not None and wcs is not None and wcs.has_spectral):
        return [in_jy]
    # Rayleigh-Jeans at the reference channel (astropy's brightness_temperature); across the band
    # the K rms of each channel scales as nu^-2 about it.
    frequency = _reference_frequency(wcs)
    beam_area = math.pi / (4 * math.log(2)) * beam.major * beam.minor
    kelvin = (rms_jy_per_beam * u.Jy).to(unit, u.brightness_temperature(frequency, beam_area=beam_area))
    return [(NOISE_KEYWORD, float(kelvin.value), f"[{fits_unit_string(unit)}] noise rms per channel at CRPIX3"),
            (NOISE_JY_KEYWORD, float(rms_jy_per_beam), "[Jy beam-1] thermal noise rms per channel")]


def cube_cards(unit, beam, provenance, path, wcs=None):
    """Return the BUNIT, beam (when set) and noise (when recorded) cards of a cube written to ``path``."""
    cards = [_unit_card(unit, path)]
    if beam is not None:
        cards.extend(_beam_cards(beam))
    cards.extend(_noise_cards(provenance, unit, beam, wcs))
    return cards


def _add_extra_cards(header, extra_cards):
    """Append caller cards, refusing bad keywords and keywords the writer already set."""
    for card in extra_cards or ():
        keyword = card[0]
        if not isinstance(keyword, str) or not _KEYWORD.fullmatch(keyword):
            raise ValueError(f"extra card keyword must be 1-8 characters of A-Z, 0-9, '-', '_'; got {keyword!r}")
        if keyword in header and keyword not in _REPEATABLE:
            raise ValueError(f"extra card {keyword} repeats a keyword the writer sets; choose another name")
        header.append(tuple(card), end=True)


def primary_header(shape, wcs, cards, *, config_text=None, extra_cards=None):
    """Return the primary header of a float32 image of ``shape``, with CHECKSUM and DATASUM to be stamped.

    Parameters
    ----------
    shape : tuple of int
        Array shape in numpy order, e.g. ``(n_chan, n_y, n_x)``.
    wcs : `~astropy.wcs.WCS`
        WCS of the image.
    cards : list of tuple
        Unit, beam and noise cards.
    config_text : str, optional
        Resolved run config, digested into the provenance cards.
    extra_cards : sequence of tuple, optional
        Caller cards appended after the others.

    Returns
    -------
    `~astropy.io.fits.Header`
    """
    header = fits.Header([("SIMPLE", True, "conforms to FITS standard"), ("BITPIX", -32, "array data type"),
                          ("NAXIS", len(shape), "number of array dimensions"),
                          *((f"NAXIS{axis}", n) for axis, n in enumerate(reversed(shape), start=1)),
                          ("EXTEND", True)])
    header.extend(wcs.to_header().cards)
    for card in [*cards, *provenance_cards(config_text)]:
        header.append(card, end=True)
    _add_extra_cards(header, extra_cards)
    header.append(("CHECKSUM", "0" * 16, "HDU checksum"), end=True)
    header.append(("DATASUM", "0", "data unit checksum"), end=True)
    return header


def extension_bytes(config_text, provenance):
    """Return the RUNCONFIG and PROVENANCE extensions as they follow the primary HDU on disk."""
    hdus = []
    if config_text is not None:
        hdus.append(config_table(config_text))
    if provenance:
        hdus.append(provenance_table(provenance))
    if not hdus:
        return b""
    buffer = io.BytesIO()
    fits.HDUList([fits.PrimaryHDU(), *hdus]).writeto(buffer, checksum=True)
    return buffer.getvalue()[len(fits.PrimaryHDU().header.tostring()):]


def padded_bytes(n_bytes):
    """Return ``n_bytes`` rounded up to whole 2880-byte FITS blocks."""
    return _BLOCK * math.ceil(n_bytes / _BLOCK)


def _write_data(handle, data):
    """Write ``data`` as big-endian float32 padded to a whole block; return the data unit's word sum.

    The array goes about 1 MiB at a time, so memory stays bounded for
    memory-mapped input (a non-contiguous array is first copied whole).  A
    second thread converts, sums and byte-swaps the next piece into one of two
    buffers while this one writes the last.
    """
    flat = np.ascontiguousarray(data).reshape(-1)
    starts = range(0, data.size, _VALUES_PER_WRITE)
    native = [np.empty(min(_VALUES_PER_WRITE, data.size), dtype=np.float32) for _ in range(2)]
    big_endian = [np.empty(buffer.shape, dtype=_DISK_DTYPE) for buffer in native]

    def prepare(step):
        start = starts[step]
        stop = min(start + _VALUES_PER_WRITE, data.size)
        piece = flat[start:stop]
        if piece.dtype != np.float32:
            converted = native[step % 2][:stop - start]
            np.copyto(converted, piece, casting="unsafe")
            piece = converted
        swapped = big_endian[step % 2][:stop - start]
        np.copyto(swapped, piece)
        return swapped, float32_word_sum(piece)

    words = 0
    with concurrent.futures.ThreadPoolExecutor(max_workers=1) as converter:
        pending = converter.submit(prepare, 0)
        for step in range(len(starts)):
            swapped, piece_words = pending.result()
            if step + 1 < len(starts):
                pending = converter.submit(prepare, step + 1)
            handle.write(swapped.data)
            words += piece_words
    n_bytes = _DISK_DTYPE.itemsize * data.size
    handle.write(bytes(padded_bytes(n_bytes) - n_bytes))
    return ones_complement_sum(words)


def _write(data, wcs, cards, path, *, overwrite, config_text, provenance, extra_cards):
    """Stream header, data and extensions through :func:`atomic_output`, then stamp the checksums."""
    data = np.asarray(data)
    header = primary_header(data.shape, wcs, cards, config_text=config_text, extra_cards=extra_cards)
    header_bytes = header.tostring().encode("ascii")
    extensions = extension_bytes(config_text, provenance)
    n_bytes = len(header_bytes) + padded_bytes(_DISK_DTYPE.itemsize * data.size) + len(extensions)
    with atomic_output(path, overwrite=overwrite) as partial:
        check_free_space(partial.parent, n_bytes)
        try:
            with open(partial, "wb") as handle:
                handle.write(header_bytes)
                data_sum = _write_data(handle, data)
                handle.write(extensions)
                handle.seek(0)
                handle.write(stamp_checksum(header, data_sum))
        except OSError as err:
            raise OutputError(f"{path}: cannot be written ({err.strerror or err})") from err


def write_cube(cube, path, *, overwrite=False, config_text=None, extra_cards=None):
    """Write a cube to a FITS file.

    Parameters
    ----------
    cube : `~pipeline.cube.Cube`
        Cube to write; data shape (n_chan, n_y, n_x), stored as float32.
    path : str or os.PathLike
        Output file; written to a hidden temporary beside it and renamed.
    overwrite : bool
        Replace an existing file.
    config_text : str, optional
        Resolved run config, stored losslessly in the RUNCONFIG extension and
        digested into CWCFGSHA.
    extra_cards : sequence of tuple, optional
        ``(keyword, value[, comment])`` cards appended to the primary header.

    Raises
    ------
    pipeline.errors.OutputError
        If the file exists without ``overwrite``, the folder is not writable,
        space is short, or the unit has no FITS form.
    ValueError
        If the WCS has no celestial axes or an extra card is refused.

    Notes
    -----
    The beam may be any object with ``major``, ``minor`` and
    ``position_angle`` (or radio-beam's ``pa``) angle Quantities.
    """
    path = pathlib.Path(path)
    if not cube.wcs.has_celestial:
        raise ValueError(f"the cube WCS must have celestial axes; got CTYPE {list(cube.wcs.wcs.ctype)}")
    cards = cube_cards(cube.unit, cube.beam, cube.provenance, path, cube.wcs)
    _write(cube.data, cube.wcs, cards, path, overwrite=overwrite, config_text=config_text,
           provenance=cube.provenance, extra_cards=extra_cards)


def write_image(data2d, wcs2d, unit, path, *, beam=None, overwrite=False, config_text=None, extra_cards=None):
    """Write a 2-D map (moment map, column density) to a FITS file.

    Parameters
    ----------
    data2d : numpy.ndarray or `~astropy.units.Quantity`, shape (n_y, n_x)
        Map values in ``unit`` (a Quantity is converted to ``unit``).
    wcs2d : `~astropy.wcs.WCS`
        Two-axis celestial WCS.
    unit : `~astropy.units.UnitBase`
        Unit of the values, e.g. Jy/beam km/s or cm-2.
    path : str or os.PathLike
        Output file.
    beam : object, optional
        Beam with ``major``, ``minor`` and ``position_angle`` (or ``pa``).
    overwrite, config_text, extra_cards
        As in :func:`write_cube`.

    Raises
    ------
    pipeline.errors.OutputError
        As in :func:`write_cube`.
    ValueError
        If the data are not 2-D or the WCS is not a 2-axis celestial WCS.
    """
    path = pathlib.Path(path)
    unit = u.Unit(unit)
    values = data2d.to_value(unit) if isinstance(data2d, u.Quantity) else data2d
    if np.ndim(values) != 2:
        raise ValueError(f"'data2d' must have shape (n_y, n_x); got shape {np.shape(values)}")
    if wcs2d.naxis != 2 or not wcs2d.has_celestial:
        raise ValueError(f"'wcs2d' must be a 2-axis celestial WCS; got CTYPE {list(wcs2d.wcs.ctype)}")
    cards = [_unit_card(unit, path)]
    if beam is not None:
        cards.extend(_beam_cards(beam))
    _write(values, wcs2d, cards, path, overwrite=overwrite, config_text=config_text,
           provenance={}, extra_cards=extra_cards)
