"""Provenance header cards and the lossless text and record tables of each FITS file.

Keywords written into every primary header (names of our own except ORIGIN
and DATE, which are FITS-standard):

========  ===============================================================
ORIGIN    ``'cubewright'``
DATE      UTC time of writing, ``YYYY-MM-DDThh:mm:ss``
CWVERS    cubewright version that wrote the file
CWCFGSHA  sha256 (hex, 64 characters) of the UTF-8 run config text, when
          a config was given; the text itself is in the RUNCONFIG extension
========  ===============================================================

Text tables (RUNCONFIG, PROVENANCE) hold one row per line or per record in
character columns.  FITS character columns take printable ASCII only and
readers strip trailing blanks, so each string is stored in Python's
``unicode_escape`` form (backslash, tab, carriage return and non-ASCII
characters escaped) with trailing blanks written as ``\\x20``.  Ordinary
ASCII text is therefore stored as it reads.
"""

import datetime
import hashlib
import json
import warnings

import astropy.units as u
import numpy as np
from astropy.io import fits

from pipeline import __version__
from pipeline.errors import CubewrightWarning

__all__ = ["provenance_cards", "config_digest", "CONFIG_EXTNAME", "PROVENANCE_EXTNAME",
           "DIGEST_KEYWORD", "VERSION_KEYWORD"]

CONFIG_EXTNAME = "RUNCONFIG"
PROVENANCE_EXTNAME = "PROVENANCE"
DIGEST_KEYWORD = "CWCFGSHA"
VERSION_KEYWORD = "CWVERS"
ORIGIN = "cubewright"


def config_digest(text):
    """Return the sha256 hex digest of ``text`` encoded as UTF-8.

    Parameters
    ----------
    text : str
        Resolved run config.

    Returns
    -------
    str
        64 lower-case hexadecimal characters.

    Examples
    --------
    >>> config_digest("")
    'e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855'
    """
    if not isinstance(text, str):
        raise TypeError(f"'text' must be a str; got {type(text).__name__}")
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def provenance_cards(config_text):
    """Return the provenance header cards for a file written now.

    Parameters
    ----------
    config_text : str or None
        Resolved run config; None leaves out the digest card.

    Returns
    -------
    list of tuple (str, str, str)
        ``(keyword, value, comment)`` for ORIGIN, DATE, CWVERS and, with a
        config, CWCFGSHA.

    Examples
    --------
    >>> [card[0] for card in provenance_cards("a = 1")]
    ['ORIGIN', 'DATE', 'CWVERS', 'CWCFGSHA']
    """
    now = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S")
    cards = [
        ("ORIGIN", ORIGIN, "software that wrote this file"),
        ("DATE", now, "UTC date and time the file was written"),
        (VERSION_KEYWORD, __version__, "cubewright version"),
    ]
    if config_text is not None:
        # 64 hex digits fill the card; there is no room left for a comment.
        cards.append((DIGEST_KEYWORD, config_digest(config_text), ""))
    return cards


def _escape(text):
    """Return ``text`` as printable ASCII that :func:`_unescape` reverses exactly."""
    escaped = text.encode("unicode_escape").decode("ascii")
    kept = escaped.rstrip(" ")
    return kept + "\\x20" * (len(escaped) - len(kept))


def _unescape(stored):
    """Reverse :func:`_escape`."""
    return stored.encode("ascii").decode("unicode_escape")


def _text_column(name, strings):
    """Return a character column holding ``strings`` in escaped form."""
    escaped = [_escape(item) for item in strings]
    width = max([1, *map(len, escaped)])
    return fits.Column(name=name, format=f"{width}A", array=np.array(escaped, dtype=f"S{width}"))


def _column_strings(table, name):
    """Return the unescaped strings of a column written by :func:`_text_column`."""
    return [_unescape(item.decode("ascii") if isinstance(item, bytes) else str(item))
            for item in np.asarray(table.data[name])]


def config_table(config_text):
    """Return the RUNCONFIG table: column LINE, one row per line of ``config_text``."""
    hdu = fits.BinTableHDU.from_columns([_text_column("LINE", config_text.split("\n"))],
                                        name=CONFIG_EXTNAME)
    hdu.header.comments["TTYPE1"] = "run config line, unicode_escape form"
    return hdu


def config_text_from_table(hdu):
    """Return the text stored by :func:`config_table`."""
    return "\n".join(_column_strings(hdu, "LINE"))


def _json_value(value):
    """Return ``(json text, unit text)`` for one provenance value, or None if JSON cannot hold it."""
    if isinstance(value, u.Quantity):
        return json.dumps(value.value.tolist()), value.unit.to_string()
    try:
        return json.dumps(value, default=_plain), ""
    except TypeError:
        return None


def _plain(value):
    """Turn numpy scalars and arrays into plain Python values for JSON."""
    if isinstance(value, (np.generic, np.ndarray)) and not isinstance(value, u.Quantity):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def provenance_table(provenance):
    """Return the PROVENANCE table: columns KEY, VALUE (JSON) and UNIT (astropy unit text).

    A value is stored as JSON; a Quantity as the JSON of its value plus its
    unit.  Anything else JSON cannot hold is stored as its ``str`` with a
    :class:`~pipeline.errors.CubewrightWarning`.
    """
    keys, values, units = [], [], []
    for key, value in provenance.items():
        stored = _json_value(value)
        if stored is None:
            warnings.warn(f"provenance[{key!r}] of type {type(value).__name__} has no lossless FITS form; "
                          "stored as its text", CubewrightWarning, stacklevel=3)
            stored = (json.dumps(str(value)), "")
        keys.append(str(key))
        values.append(stored[0])
        units.append(stored[1])
    hdu = fits.BinTableHDU.from_columns(
        [_text_column("KEY", keys), _text_column("VALUE", values), _text_column("UNIT", units)],
        name=PROVENANCE_EXTNAME)
    hdu.header.comments["TTYPE1"] = "provenance item name"
    hdu.header.comments["TTYPE2"] = "value as JSON text"
    hdu.header.comments["TTYPE3"] = "astropy unit of a Quantity value, else empty"
    return hdu


def provenance_from_table(hdu):
    """Return the dict stored by :func:`provenance_table`."""
    record = {}
    for key, value, unit in zip(*(_column_strings(hdu, name) for name in ("KEY", "VALUE", "UNIT"))):
        decoded = json.loads(value)
        record[key] = u.Quantity(decoded, u.Unit(unit)) if unit else decoded
    return record
