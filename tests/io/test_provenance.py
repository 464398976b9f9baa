"""Provenance cards, the config digest and the lossless text tables."""

import datetime
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.time import Time
from hypothesis import given
from hypothesis import strategies as st

import pipeline
from pipeline.errors import CubewrightWarning
from pipeline.io import config_digest
from pipeline.io._provenance import (_escape, _unescape, config_table, config_text_from_table, provenance_cards,
                                     provenance_from_table, provenance_table)


def test_config_digest_matches_the_fips_180_sha256_example():
    # FIPS 180-2, appendix B.1: SHA-256("abc").
    assert config_digest("abc") == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_config_digest_sees_a_trailing_newline():
    assert config_digest("a = 1\n") != config_digest("a = 1")


def test_config_digest_refuses_bytes():
    with pytest.raises(TypeError, match="'text' must be a str; got bytes"):
        config_digest(b"a = 1")


def test_provenance_cards_name_the_software_version_time_and_digest():
    cards = {keyword: value for keyword, value, _ in provenance_cards("a = 1")}
    assert cards["ORIGIN"] == "cubewright"
    assert cards["CWVERS"] == pipeline.__version__
    assert cards["CWCFGSHA"] == config_digest("a = 1")
    # FITS 4.0 Sect. 4.4.2.1 date format, parsed by astropy.time as UTC.
    written = Time(cards["DATE"], format="isot", scale="utc").to_datetime(timezone=datetime.timezone.utc)
    assert abs(datetime.datetime.now(datetime.timezone.utc) - written) < datetime.timedelta(minutes=1)


def test_provenance_cards_without_config_have_no_digest():
    assert "CWCFGSHA" not in [card[0] for card in provenance_cards(None)]


def test_provenance_cards_fit_in_80_characters_without_truncation():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        images = [fits.Card(*card).image for card in provenance_cards("x")]
    assert all(len(image) == 80 for image in images)


@given(st.text())
def test_escaped_text_is_printable_ascii_without_trailing_blanks_and_reverses_exactly(text):
    stored = _escape(text)
    assert all(32 <= ord(character) <= 126 for character in stored)  # FITS 4.0 Sect. 7.3.3.1
    assert stored == stored.rstrip(" ")
    assert _unescape(stored) == text


def _through_file(hdu, tmp_path):
    path = tmp_path / "table.fits"
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path)
    return fits.open(path)


@pytest.mark.parametrize("text", ["", "\n", "a = 1", "[grid]\npixel_scale = '5 arcsec'  \n\n",
                                  "name = \"µ 15″\"\tx\r\nend\\path\n"])
def test_config_table_gives_back_the_exact_text(text, tmp_path):
    with _through_file(config_table(text), tmp_path) as hdul:
        assert config_text_from_table(hdul["RUNCONFIG"]) == text


def test_provenance_table_gives_back_values_units_and_nesting(tmp_path):
    record = {
        "tool": "cubewright 0.1.0",
        "noise_rms_jy_per_beam": 1.25e-3,
        "centre_kpc": [1.0, -2.5, 3.0],
        "frame_velocity_kms": np.array([10.0, 0.0, -4.0]),
        "n_particles": np.int64(4096),
        "seed": None,
        "thin": True,
        "stages": {"beam": {"kind": "gaussian"}},
        "distance": 12.5 * u.Mpc,
        "edges": [1.0, 2.0] * u.km / u.s,
    }
    with _through_file(provenance_table(record), tmp_path) as hdul:
        restored = provenance_from_table(hdul["PROVENANCE"])
    assert list(restored) == list(record)
    assert restored["centre_kpc"] == [1.0, -2.5, 3.0]
    assert restored["frame_velocity_kms"] == [10.0, 0.0, -4.0]
    assert restored["n_particles"] == 4096
    assert restored["seed"] is None and restored["thin"] is True
    assert restored["stages"] == {"beam": {"kind": "gaussian"}}
    assert restored["noise_rms_jy_per_beam"] == 1.25e-3
    assert u.allclose(restored["distance"], 12.5 * u.Mpc, rtol=0)
    assert u.allclose(restored["edges"], [1.0, 2.0] * u.km / u.s, rtol=0)


def test_provenance_value_json_cannot_hold_is_stored_as_text_with_a_warning(tmp_path):
    with pytest.warns(CubewrightWarning, match=r"provenance\['when'\] of type date has no lossless FITS form"):
        hdu = provenance_table({"when": datetime.date(2026, 1, 2)})
    with _through_file(hdu, tmp_path) as hdul:
        assert provenance_from_table(hdul["PROVENANCE"]) == {"when": "2026-01-02"}
