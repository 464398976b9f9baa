"""DATASUM and CHECKSUM arithmetic against astropy's own checksum writer."""

import numpy as np
import pytest
from astropy.io import fits

from pipeline.io._checksum import (bytes_word_sum, encode_checksum, float32_word_sum, ones_complement_sum,
                                   stamp_checksum)


def _astropy_sums(data):
    """DATASUM and CHECKSUM astropy writes for a primary HDU holding ``data``."""
    hdu = fits.PrimaryHDU(data)
    hdu.add_checksum()
    return hdu.header.copy()


@pytest.mark.parametrize("shape", [(2, 3, 4), (3, 5, 7), (1, 1, 1), (4, 64, 64)])
def test_float32_word_sum_gives_astropy_datasum(rng, shape):
    # DATASUM is the ones'-complement sum of the big-endian 32-bit words (FITS Standard 4.0,
    # Appendix J); astropy's add_checksum is the reference.  Odd and even word counts both appear.
    data = (rng.standard_normal(shape) * 10.0 ** rng.uniform(-30, 30, shape)).astype(np.float32)
    expected = _astropy_sums(data.astype(">f4"))
    assert str(ones_complement_sum(float32_word_sum(data))) == expected["DATASUM"]


def test_word_sum_agrees_on_both_byte_orders(rng):
    # The on-disk words (big-endian bytes) and the native float32 bit patterns are the same numbers.
    data = rng.standard_normal(1001).astype(np.float32)
    assert float32_word_sum(data) == bytes_word_sum(data.astype(">f4").tobytes() + b"\0" * 4 * 3)


def test_sum_of_slab_sums_is_sum_of_whole(rng):
    # Ones'-complement addition is associative (Seaman, Pence & Rots 2002): slab sums add up.
    data = rng.standard_normal((6, 17, 19)).astype(np.float32)
    whole = ones_complement_sum(float32_word_sum(data))
    parts = ones_complement_sum(sum(float32_word_sum(data[k:k + 2]) for k in range(0, 6, 2)))
    assert parts == whole


def test_many_all_ones_words_keep_their_carries():
    # 0xFFFFFFFF is negative zero in ones' complement; 3 x 2**18 of them must fold back to 0xFFFFFFFF
    # (the wrapped 64-bit pair sums overflow many times here).
    data = np.full(3 << 18, np.uint32(0xFFFFFFFF)).view(np.float32)
    assert ones_complement_sum(float32_word_sum(data)) == 0xFFFFFFFF
    assert ones_complement_sum(bytes_word_sum(data.astype(">f4").tobytes())) == 0xFFFFFFFF


@pytest.mark.parametrize("fill", [0.0, -1.5e7, 3.25])
def test_stamped_checksum_matches_astropy(fill):
    # astropy's add_checksum and our sum-and-encode give the same CHECKSUM for the same header and
    # data (FITS checksum convention, Seaman, Pence & Rots 2002).
    data = np.full((3, 5, 7), fill, dtype=np.float32)
    expected = _astropy_sums(data.astype(">f4"))
    header = expected.copy()
    stamp_checksum(header, ones_complement_sum(float32_word_sum(data)))
    assert header["CHECKSUM"] == expected["CHECKSUM"] and header["DATASUM"] == expected["DATASUM"]


def test_encoding_avoids_punctuation():
    # The encoding uses only 0-9, A-Z, a-z (Seaman, Pence & Rots 2002).
    for value in (0, 0xFFFFFFFF, 0x3A3B3C3D, 0x5B5C5D5E, 0x12345678):
        assert encode_checksum(value).isalnum()


def test_stamped_file_verifies_in_astropy(rng, tmp_path):
    # astropy checks CHECKSUM and DATASUM on open and warns when either does not verify.
    data = rng.standard_normal((2, 9, 11)).astype(np.float32)
    header = fits.PrimaryHDU(data).header
    header["CHECKSUM"], header["DATASUM"] = "0" * 16, "0"
    padding = bytes(-data.nbytes % 2880)
    text = stamp_checksum(header, ones_complement_sum(float32_word_sum(data)))
    (tmp_path / "s.fits").write_bytes(text + data.astype(">f4").tobytes() + padding)
    with fits.open(tmp_path / "s.fits", checksum=True) as opened:
        np.testing.assert_array_equal(opened[0].data, data)
