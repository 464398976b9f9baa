"""A FITS cube filled channel slab by channel slab through a memory map, then finalised.

The cube's size is then limited by disk, not by memory: :func:`create_fits_cube`
lays out the whole file (header, zeroed float32 data, RUNCONFIG and PROVENANCE
extensions) under a hidden temporary name; any process that sees the file
writes its slab with :func:`write_fits_slab`; :func:`finalise_fits_cube`
computes DATASUM and CHECKSUM in chunks and renames the file to its final name.
The header is the one :func:`~pipeline.io.write_cube` writes.
"""

import math
import os
import pathlib
import secrets

import numpy as np
from astropy.io import fits

from pipeline.errors import OutputError

from ._atomic import PARTIAL_PREFIX, check_free_space, check_writable
from ._checksum import float32_word_sum, ones_complement_sum, stamp_checksum
from ._fits_write import cube_cards, extension_bytes, padded_bytes, primary_header

__all__ = ["create_fits_cube", "write_fits_slab", "finalise_fits_cube"]

_DTYPE = np.dtype(">f4")
# Values read back per pass when computing DATASUM (bounded memory).
_VALUES_PER_PASS = 1 << 22


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
    cards = cube_cards(unit, beam, provenance or {}, path, wcs)
    header = primary_header(array_shape, wcs, cards, config_text=config_text).tostring().encode("ascii")
    data_bytes = padded_bytes(_DTYPE.itemsize * math.prod(array_shape))
    extensions = extension_bytes(config_text, provenance)
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
    mapped = np.memmap(partial, dtype=_DTYPE, mode="r", offset=offset, shape=shape)
    per_pass = max(1, _VALUES_PER_PASS // (shape[1] * shape[2]))
    words = sum(float32_word_sum(mapped[start:start + per_pass].astype(np.float32))
                for start in range(0, shape[0], per_pass))
    del mapped
    text = stamp_checksum(header, ones_complement_sum(words))
    with open(partial, "r+b") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(partial, path)
