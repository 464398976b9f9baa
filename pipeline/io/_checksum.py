"""FITS DATASUM and CHECKSUM arithmetic, fast enough to run while a cube streams to disk.

DATASUM is the ones'-complement sum of a data unit's 32-bit big-endian words;
CHECKSUM is the 16-character ASCII encoding of the complement of the whole
HDU's sum, which makes that sum all ones (FITS Standard 4.0, Appendix J;
Seaman, Pence & Rots 2002).  Ones'-complement addition is associative, so
partial sums over slabs add up to the sum of the whole.
"""

import numpy as np

__all__ = ["ones_complement_sum", "bytes_word_sum", "float32_word_sum", "encode_checksum", "stamp_checksum"]

# Characters the checksum encoding avoids (FITS checksum convention, Seaman, Pence & Rots 2002).
_EXCLUDED = (0x3A, 0x3B, 0x3C, 0x3D, 0x3E, 0x3F, 0x40, 0x5B, 0x5C, 0x5D, 0x5E, 0x5F, 0x60)
# 64-bit words summed per pass: 1 MiB, small enough to stay in cache between the two passes.
_PAIRS_PER_PASS = 1 << 17
_LOW_WORD = (1 << 32) - 1
_TWO_TO_64 = 1 << 64


def ones_complement_sum(words_sum):
    """Fold the carries of a plain integer sum of 32-bit words into a 32-bit ones'-complement sum.

    Parameters
    ----------
    words_sum : int
        Non-negative sum of 32-bit words (or of earlier folded sums).

    Returns
    -------
    int
        The ones'-complement sum, below 2**32.

    Examples
    --------
    >>> ones_complement_sum(0xFFFFFFFF + 2)
    2
    """
    while words_sum >> 32:
        words_sum = (words_sum & _LOW_WORD) + (words_sum >> 32)
    return words_sum


def bytes_word_sum(buffer):
    """Return the plain integer sum of the big-endian 32-bit words of ``buffer`` (length a multiple of 4)."""
    return int(np.sum(np.frombuffer(buffer, dtype=">u4"), dtype=np.uint64))


def float32_word_sum(values):
    """Return the plain integer sum of the 32-bit words float32 ``values`` take on disk in FITS.

    Parameters
    ----------
    values : numpy.ndarray
        C-contiguous float32 array in native byte order.

    Returns
    -------
    int
        Sum of the words; pass it (or several added together) to
        :func:`ones_complement_sum`.

    Notes
    -----
    A big-endian word read as a number equals the native ``uint32`` bit pattern
    of the same float, so no byte swap is needed.  Pairs of words are read as
    one ``uint64`` v = a + 2**32 b (or 2**32 a + b, by byte order): the wrapped
    sum of v and the exact sum of v >> 32 give both halves' sums exactly, with
    no widening cast per word.

    Examples
    --------
    >>> values = np.array([1.0, -2.0, 3.5], dtype=np.float32)
    >>> float32_word_sum(values) == bytes_word_sum(values.astype(">f4").tobytes())
    True
    """
    words = values.reshape(-1).view(np.uint32)
    total = 0
    if words.size % 2:
        total += int(words[-1])
        words = words[:-1]
    pairs = words.view(np.uint64)
    high = np.empty(min(pairs.size, _PAIRS_PER_PASS), dtype=np.uint64)
    for start in range(0, pairs.size, _PAIRS_PER_PASS):
        block = pairs[start:start + _PAIRS_PER_PASS]
        wrapped = int(np.add.reduce(block))
        block_high = high[:block.size]
        np.right_shift(block, np.uint64(32), out=block_high)
        high_sum = int(np.add.reduce(block_high))
        low_sum = (wrapped - (high_sum << 32)) % _TWO_TO_64
        total += low_sum + high_sum
    return total


def encode_checksum(value):
    """Return the 16-character ASCII encoding of a 32-bit checksum.

    Parameters
    ----------
    value : int
        The complement of the HDU's ones'-complement sum.

    Returns
    -------
    str
        Encoded value, rotated one character right as the convention asks
        (FITS checksum convention, Seaman, Pence & Rots 2002).
    """
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


def stamp_checksum(header, data_sum):
    """Set DATASUM and CHECKSUM of ``header`` for a data unit whose ones'-complement sum is ``data_sum``.

    Parameters
    ----------
    header : `~astropy.io.fits.Header`
        Header to stamp in place, already holding CHECKSUM and DATASUM cards
        (their comments are kept), so its length does not change.
    data_sum : int
        Ones'-complement sum of the padded data unit.

    Returns
    -------
    bytes
        The stamped header as written to disk.
    """
    header["DATASUM"] = str(data_sum)
    header["CHECKSUM"] = "0" * 16
    total = ones_complement_sum(bytes_word_sum(header.tostring().encode("ascii")) + data_sum)
    header["CHECKSUM"] = encode_checksum(0xFFFFFFFF - total)
    return header.tostring().encode("ascii")
