"""A FITS cube filled channel slab by channel slab through a memory map, then finalised.

The cube's size is then limited by disk, not by memory: :func:`create_fits_cube`
lays out the whole file (header, zeroed float32 data, RUNCONFIG and PROVENANCE
extensions) under a hidden temporary name; any process that sees the file
writes its slab with :func:`write_fits_slab`; :func:`finalise_fits_cube`
computes DATASUM and CHECKSUM in chunks and renames the file to its final name.
The header is the one :func:`~pipeline.io.write_cube` writes.
"""

import io
import math
import os
import pathlib
import secrets

import numpy as np
from astropy.io import fits

from pipeline.errors import OutputError

from ._atomic import PARTIAL_PREFIX, check_free_space, check_writable
from ._fits_write import _beam_cards, _noise_cards, _unit_card
from ._provenance import config_table, provenance_cards, provenance_table

__all__ = ["create_fits_cube", "write_fits_slab", "finalise_fits_cube"]

_BLOCK = 2880
_DTYPE = np.dtype(">f4")
# Words summed at once when computing DATASUM (bounded memory, no uint64 overflow).
_WORDS_PER_PASS = 1 << 24
# Characters the checksum encoding avoids (FITS checksum convention, Seaman, Pence & Rots 2002).
_EXCLUDED = (0x3A, 0x3B, 0x3C, 0x3D, 0x3E, 0x3F, 0x40, 0x5B, 0x5C, 0x5D, 0x5E, 0x5F, 0x60)


def _padded(n_bytes):
    return _BLOCK * math.ceil(n_bytes / _BLOCK)


def _primary_header(array_shape, wcs, unit, beam, provenance, config_text, path):
    n_chan, n_y, n_x = array_shape
    header = fits.PrimaryHDU(data=np.zeros((1, 1, 1), dtype=np.float32), header=wcs.to_header()).header
    header["NAXIS1"], header["NAXIS2"], header["NAXIS3"] = n_x, n_y, n_chan
    cards = [_unit_card(unit, path)]
    if beam is not None:
        cards.extend(_beam_cards(beam))
    cards.extend(_noise_cards(provenance or {}))
    for card in [*cards, *provenance_cards(config_text)]:
        header.append(card, end=True)
    header.append(("CHECKSUM", "0" * 16, "HDU checksum"), end=True)
    header.append(("DATASUM", "0", "data unit checksum"), end=True)
    return header


def _extension_bytes(config_text, provenance):
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


def create_fits_cube(path, *, array_shape, wcs, unit, beam=None, provenance=None, config_text=None,
                     overwrite=False) -> pathlib.Path:
    """Lay out a FITS cube with zeroed data under a hidden temporary name beside ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        Final file name (given again to :func:`finalise_fits_cube`).
    array_shape : tuple of int
        ``(n_chan, n_y, n_x)``.
    wcs : `~astropy.wcs.WCS`
        Three-axis WCS of the whole cube.
    unit : `~astropy.units.UnitBase`
        Data unit (BUNIT).
    beam : `~pipeline.instrument.BeamSpec`, optional
        Written as BMAJ, BMIN, BPA.
    provenance : dict, optional
        The cube's provenance record (PROVENANCE extension; its noise rms sets NOISERMS).
    config_text : str, optional
        Resolved run config (RUNCONFIG extension, CWCFGSHA).
    overwrite : bool
        Allow ``path`` to exist (it is replaced only when finalised).

    Returns
    -------
    pathlib.Path
        The temporary file to fill with :func:`write_fits_slab`.

    Raises
    ------
    pipeline.errors.OutputError
        If ``path`` exists without ``overwrite``, the folder is not writable
        or the disk lacks the space.

    Examples
    --------
    >>> import tempfile, astropy.units as u
    >>> from astropy.wcs import WCS
    >>> wcs = WCS(naxis=3); wcs.wcs.ctype = ["RA---SIN", "DEC--SIN", "FREQ"]
    >>> with tempfile.TemporaryDirectory() as scratch:
    ...     target = pathlib.Path(scratch) / "cube.fits"
    ...     partial = create_fits_cube(target, array_shape=(3, 4, 5), wcs=wcs, unit=u.Jy / u.beam)
    ...     write_fits_slab(partial, 1, np.ones((2, 4, 5)))
    ...     finalise_fits_cube(partial, target)
    ...     print(fits.getdata(target).sum(axis=(1, 2)))
    [ 0. 20. 20.]
    """
    path = pathlib.Path(path)
    if path.exists() and not overwrite:
        raise OutputError(f"{path}: exists; pass --overwrite to replace it")
    check_writable(path.parent)
    header = _primary_header(array_shape, wcs, unit, beam, provenance, config_text, path).tostring().encode("ascii")
    data_bytes = _padded(_DTYPE.itemsize * math.prod(array_shape))
    extensions = _extension_bytes(config_text, provenance)
    check_free_space(path.parent, len(header) + data_bytes + len(extensions))
    partial = path.with_name(f"{PARTIAL_PREFIX}{secrets.token_hex(6)}.{path.name}")
    try:
        with open(partial, "wb") as handle:
            handle.write(header)
            handle.truncate(len(header) + data_bytes)
            handle.seek(len(header) + data_bytes)
            handle.write(extensions)
    except OSError as err:
        partial.unlink(missing_ok=True)
        raise OutputError(f"{path}: cannot be written ({err.strerror or err})") from err
    return partial


def _layout(partial):
    """Return (header, header length in bytes, array shape) of a file made by create_fits_cube."""
    with open(partial, "rb") as handle:
        header = fits.Header.fromfile(handle)
    shape = (header["NAXIS3"], header["NAXIS2"], header["NAXIS1"])
    return header, len(header.tostring()), shape


def write_fits_slab(partial, first_channel, data):
    """Write channels ``first_channel`` onwards of a cube made by :func:`create_fits_cube`.

    Parameters
    ----------
    partial : path-like
        The temporary file returned by :func:`create_fits_cube`.
    first_channel : int
        Channel index of ``data[0]`` within the cube.
    data : numpy.ndarray, shape (n, n_y, n_x)
        Values in the cube's unit, stored as float32; separate processes may
        write separate slabs at the same time.

    Raises
    ------
    ValueError
        If the slab does not fit the cube.
    """
    _, offset, shape = _layout(partial)
    data = np.asarray(data)
    stop = first_channel + data.shape[0]
    if data.ndim != 3 or data.shape[1:] != shape[1:] or not 0 <= first_channel < stop <= shape[0]:
        raise ValueError(f"the slab must have shape (n, {shape[1]}, {shape[2]}) and fit channels 0 to {shape[0]}; "
                         f"got shape {data.shape} at channel {first_channel}")
    mapped = np.memmap(partial, dtype=_DTYPE, mode="r+", offset=offset, shape=shape)
    mapped[first_channel:stop] = data
    mapped.flush()
    del mapped


def _ones_complement_sum(words_sum):
    while words_sum >> 32:
        words_sum = (words_sum & 0xFFFFFFFF) + (words_sum >> 32)
    return words_sum


def _word_sum(buffer):
    words = np.frombuffer(buffer, dtype=">u4")
    return int(np.sum(words, dtype=np.uint64))


def _encode_checksum(value):
    """ASCII encoding of a 32-bit checksum (FITS checksum convention, Seaman, Pence & Rots 2002)."""
    characters = [0] * 16
    for position in range(4):
        byte = (value >> (24 - 8 * position)) & 0xFF
        quotient, remainder = byte // 4 + 0x30, byte % 4
        group = [quotient + remainder, quotient, quotient, quotient]
        changed = True
        while changed:
            changed = False
            for excluded in _EXCLUDED:
                for pair in (0, 2):
                    if group[pair] == excluded or group[pair + 1] == excluded:
                        group[pair] += 1
                        group[pair + 1] -= 1
                        changed = True
        for k in range(4):
            characters[4 * k + position] = group[k]
    return bytes(characters[-1:] + characters[:-1]).decode("ascii")


def finalise_fits_cube(partial, path, *, overwrite=False):
    """Set DATASUM and CHECKSUM of a filled cube and rename it to ``path``.

    Parameters
    ----------
    partial : path-like
        The temporary file returned by :func:`create_fits_cube`, every slab written.
    path : str or os.PathLike
        Final name.
    overwrite : bool
        Replace ``path`` if it exists.

    Raises
    ------
    pipeline.errors.OutputError
        If ``path`` exists and ``overwrite`` is false.

    Notes
    -----
    DATASUM is the ones'-complement sum of the data unit's 32-bit words;
    CHECKSUM makes the HDU's sum all ones (FITS Standard 4.0, Appendix J;
    Seaman, Pence & Rots 2002).  The data are read in bounded passes.
    """
    partial, path = pathlib.Path(partial), pathlib.Path(path)
    if path.exists() and not overwrite:
        raise OutputError(f"{path}: exists; pass --overwrite to replace it")
    header, offset, shape = _layout(partial)
    n_words = _padded(_DTYPE.itemsize * math.prod(shape)) // 4
    words = np.memmap(partial, dtype=">u4", mode="r", offset=offset, shape=(n_words,))
    data_sum = 0
    for start in range(0, n_words, _WORDS_PER_PASS):
        data_sum += int(np.sum(words[start:start + _WORDS_PER_PASS], dtype=np.uint64))
    del words
    data_sum = _ones_complement_sum(data_sum)
    header["DATASUM"] = str(data_sum)
    header["CHECKSUM"] = "0" * 16
    text = header.tostring().encode("ascii")
    total = _ones_complement_sum(_word_sum(text) + data_sum)
    header["CHECKSUM"] = _encode_checksum(0xFFFFFFFF - total)
    text = header.tostring().encode("ascii")
    with open(partial, "r+b") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(partial, path)
