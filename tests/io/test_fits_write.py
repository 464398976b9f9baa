"""write_cube and write_image: header content, fitsverify, WCSLIB agreement, atomic behaviour."""

import dataclasses
import shutil
import subprocess

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.io import fits
from astropy.wcs import WCS

from pipeline.cube import Cube
from pipeline.errors import OutputError
from pipeline.io import write_cube, write_image
from pipeline.io._fits_write import fits_unit_string

CONFIG_TEXT = '[grid]\npixel_scale = "5 arcsec"  # ″ µ\tnote\n[beam]\nmajor = "30 arcsec"\n'


# check-values FW-08 and "Known disagreements" 9 (FITS Standard 4.0, Sect. 4.3).
@pytest.mark.parametrize(("unit", "text"), [
    (u.Jy / u.beam, "Jy beam-1"),
    (u.Jy / u.beam * u.km / u.s, "Jy km s-1 beam-1"),
    (u.K, "K"),
    (u.K * u.km / u.s, "K km s-1"),
    (u.cm**-2, "cm-2"),
    (u.Jy / u.pix, "Jy pix-1"),
])
def test_fits_unit_string_writes_negative_powers_with_beam_last(unit, text):
    assert fits_unit_string(unit) == text
    assert u.Unit(text, format="fits") == unit  # astropy's FITS unit parser


def test_fits_unit_string_of_a_scaled_unit_parses_back():
    unit = u.Unit(1e10 * u.Msun)
    assert u.Unit(fits_unit_string(unit), format="fits") == unit  # astropy's FITS unit parser


def test_unit_without_fits_form_is_refused(make_cube, tmp_path):
    cube = make_cube(unit=u.electron)
    with pytest.raises(OutputError, match=r"unit 'electron' has no FITS form"):
        write_cube(cube, tmp_path / "cube.fits")
    assert list(tmp_path.iterdir()) == []


def _primary_header(path):
    with fits.open(path) as hdul:
        return hdul[0].header.copy()


def test_header_holds_float32_data_unit_beam_noise_and_provenance(make_cube, beam, tmp_path):
    cube = make_cube(beam=beam, provenance={"noise_rms_jy_per_beam": 2.5e-3})
    path = tmp_path / "cube.fits"
    write_cube(cube, path, config_text=CONFIG_TEXT)
    header = _primary_header(path)
    assert header["BITPIX"] == -32
    assert [header[f"NAXIS{axis}"] for axis in (1, 2, 3)] == [7, 6, 5]
    assert header["BUNIT"] == "Jy beam-1"
    # check-values FW-09: a 30" x 20" beam at PA 45 deg.
    assert header["BMAJ"] == pytest.approx(8.333333e-3, rel=1e-6)
    assert header["BMIN"] == pytest.approx(5.555556e-3, rel=1e-6)
    assert header["BPA"] == pytest.approx(45.0, rel=1e-12)
    assert header["NOISERMS"] == pytest.approx(2.5e-3, rel=1e-12)
    assert header["ORIGIN"] == "cubewright"
    assert len(header["CWCFGSHA"]) == 64
    assert "CHECKSUM" in header and "DATASUM" in header


def test_noise_rms_given_as_a_quantity_is_written_in_jy_per_beam(make_cube, tmp_path):
    cube = make_cube(provenance={"noise_rms_jy_per_beam": 0.8 * u.mJy / u.beam})
    write_cube(cube, tmp_path / "cube.fits")
    assert _primary_header(tmp_path / "cube.fits")["NOISERMS"] == pytest.approx(8e-4, rel=1e-12)


def test_radio_beam_with_pa_is_accepted(make_cube, tmp_path):
    cube = make_cube(beam=radio_beam.Beam(major=30 * u.arcsec, minor=20 * u.arcsec, pa=-30 * u.deg))
    write_cube(cube, tmp_path / "cube.fits")
    header = _primary_header(tmp_path / "cube.fits")
    assert header["BMAJ"] == pytest.approx(30 / 3600, rel=1e-12)
    assert header["BPA"] == pytest.approx(-30.0, rel=1e-12)


def test_cube_without_beam_or_config_has_no_beam_keywords_and_no_extensions(make_cube, tmp_path):
    write_cube(make_cube(), tmp_path / "cube.fits")
    with fits.open(tmp_path / "cube.fits") as hdul:
        assert len(hdul) == 1
        assert not {"BMAJ", "BMIN", "BPA", "NOISERMS", "CWCFGSHA"} & set(hdul[0].header)


def test_extra_cards_are_appended(make_cube, tmp_path):
    write_cube(make_cube(), tmp_path / "cube.fits", extra_cards=[("MOMORDER", 0, "moment order"), ("OBJECT", "disc")])
    header = _primary_header(tmp_path / "cube.fits")
    assert header["MOMORDER"] == 0 and header.comments["MOMORDER"] == "moment order"
    assert header["OBJECT"] == "disc"


@pytest.mark.parametrize(("keyword", "message"), [
    ("LONGKEYWORD", "must be 1-8 characters"),
    ("bunit", "must be 1-8 characters"),
    ("BUNIT", "extra card BUNIT repeats a keyword the writer sets"),
    ("CRVAL1", "extra card CRVAL1 repeats a keyword the writer sets"),
])
def test_bad_extra_card_is_refused_before_anything_is_written(keyword, message, make_cube, tmp_path):
    with pytest.raises(ValueError, match=message):
        write_cube(make_cube(), tmp_path / "cube.fits", extra_cards=[(keyword, 1)])
    assert list(tmp_path.iterdir()) == []


def test_cube_wcs_without_celestial_axes_is_refused(make_cube, tmp_path):
    wcs = WCS(naxis=3)
    wcs.wcs.ctype = ["X", "Y", "FREQ"]
    cube = dataclasses.replace(make_cube(), wcs=wcs)
    with pytest.raises(ValueError, match=r"the cube WCS must have celestial axes; got CTYPE \['X', 'Y', 'FREQ'\]"):
        write_cube(cube, tmp_path / "cube.fits")


def test_write_image_refuses_a_cube_shaped_array(make_wcs, tmp_path):
    with pytest.raises(ValueError, match=r"'data2d' must have shape \(n_y, n_x\); got shape \(5, 6, 7\)"):
        write_image(np.zeros((5, 6, 7)), make_wcs().celestial, u.K, tmp_path / "map.fits")


def test_write_image_refuses_a_three_axis_wcs(make_wcs, tmp_path):
    with pytest.raises(ValueError, match="'wcs2d' must be a 2-axis celestial WCS"):
        write_image(np.zeros((6, 7)), make_wcs(), u.K, tmp_path / "map.fits")


def test_write_image_converts_a_quantity_to_the_given_unit(make_wcs, tmp_path):
    values = np.full((6, 7), 2.0) * u.mJy / u.beam * u.km / u.s
    write_image(values, make_wcs().celestial, u.Jy / u.beam * u.km / u.s, tmp_path / "map.fits")
    with fits.open(tmp_path / "map.fits") as hdul:
        np.testing.assert_allclose(hdul[0].data, 2.0e-3, rtol=1e-7)
        assert hdul[0].header["BUNIT"] == "Jy km s-1 beam-1"


def test_existing_file_is_not_overwritten_and_keeps_its_bytes(make_cube, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(make_cube(), path)
    before = path.read_bytes()
    with pytest.raises(OutputError, match="exists; pass --overwrite to replace it"):
        write_cube(make_cube(unit=u.K), path)
    assert path.read_bytes() == before


def test_overwrite_replaces_the_file(make_cube, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(make_cube(), path)
    write_cube(make_cube(unit=u.K), path, overwrite=True)
    assert _primary_header(path)["BUNIT"] == "K"
    assert [item.name for item in tmp_path.iterdir()] == ["cube.fits"]


def test_short_disk_space_leaves_no_file_and_no_partial(make_cube, tmp_path, monkeypatch):
    import pipeline.io._atomic as atomic

    class _Usage:
        free = 100

    monkeypatch.setattr(atomic.shutil, "disk_usage", lambda folder: _Usage)
    with pytest.raises(OutputError, match=r"not enough free space; need \d+ bytes, 100 available"):
        write_cube(make_cube(), tmp_path / "cube.fits")
    assert list(tmp_path.iterdir()) == []


def test_unwritable_folder_is_refused(make_cube, tmp_path):
    blocker = tmp_path / "blocker"
    blocker.write_text("")
    with pytest.raises(OutputError, match="not writable"):
        write_cube(make_cube(), blocker / "cube.fits")


CUBE_CASES = [
    pytest.param({"unit": u.Jy / u.beam, "spectral": "FREQ", "with_beam": True}, id="jy_beam-freq-beam"),
    pytest.param({"unit": u.Jy / u.beam, "spectral": "VRAD", "with_beam": True}, id="jy_beam-vrad-beam"),
    pytest.param({"unit": u.K, "spectral": "FREQ", "with_beam": False}, id="k-freq-nobeam"),
    pytest.param({"unit": u.K, "spectral": "VRAD", "with_beam": True, "projection": "TAN"}, id="k-vrad-tan"),
    pytest.param({"unit": u.Jy / u.pix, "spectral": "FREQ", "with_beam": False, "crval": (359.995, -45.0)},
                 id="jy_pix-ra_near_360"),
]


def _cube_for(case, make_cube, beam):
    options = dict(case)
    with_beam = options.pop("with_beam")
    provenance = {"noise_rms_jy_per_beam": 1e-3, "centre_kpc": [0.0, 1.0, -2.0], "distance": 10 * u.Mpc}
    return make_cube(beam=beam if with_beam else None, provenance=provenance, **options)


@pytest.mark.fitsverify
@pytest.mark.parametrize("case", CUBE_CASES)
def test_written_cube_passes_fitsverify_with_no_warning(case, make_cube, beam, fitsverify, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(_cube_for(case, make_cube, beam), path, config_text=CONFIG_TEXT)
    n_warnings, n_errors, report = fitsverify(path)  # HEASARC fitsverify (check-values FW-10)
    assert (n_warnings, n_errors) == (0, 0), report


@pytest.mark.fitsverify
@pytest.mark.parametrize("unit", [u.Jy / u.beam * u.km / u.s, u.cm**-2, u.K * u.km / u.s])
def test_written_map_passes_fitsverify_with_no_warning(unit, beam, make_wcs, fitsverify, tmp_path, rng):
    path = tmp_path / "map.fits"
    write_image(rng.uniform(0.0, 1.0, (6, 7)), make_wcs().celestial, unit, path, beam=beam,
                config_text=CONFIG_TEXT, extra_cards=[("MOMORDER", 0, "moment order")])
    n_warnings, n_errors, report = fitsverify(path)  # HEASARC fitsverify (check-values FW-10)
    assert (n_warnings, n_errors) == (0, 0), report


@pytest.mark.fitsverify
def test_cube_without_config_or_provenance_passes_fitsverify(make_cube, fitsverify, tmp_path):
    write_cube(make_cube(), tmp_path / "cube.fits")
    n_warnings, n_errors, report = fitsverify(tmp_path / "cube.fits")
    assert (n_warnings, n_errors) == (0, 0), report


@pytest.mark.parametrize("case", CUBE_CASES)
def test_wcslib_pixel_to_world_matches_astropy_on_the_written_file(case, make_cube, beam, wcsware, tmp_path):
    cube = _cube_for(case, make_cube, beam)
    path = tmp_path / "cube.fits"
    write_cube(cube, path)
    pixels = np.array([[1.0, 1.0, 1.0], [7.0, 6.0, 5.0], [3.0, 5.0, 2.0]])  # FITS 1-based
    expected = cube.wcs.all_pix2world(pixels, 1)
    # wcsware -x prints angles with 6 decimals and spectral values with 6 significant digits.
    world = wcsware("-x", path, pixels)
    np.testing.assert_allclose(world[:, :2], expected[:, :2], rtol=0, atol=1.5e-6)
    np.testing.assert_allclose(world[:, 2], expected[:, 2], rtol=1e-5)
    # wcsware -w (WCSLIB wcss2p) takes astropy's world coordinates at full precision back to pixels.
    np.testing.assert_allclose(wcsware("-w", path, expected), pixels, rtol=0, atol=1e-4)


def test_wcslib_finds_no_invalid_wcs_keyrecord(make_cube, beam, tmp_path):
    program = shutil.which("wcsware")
    if program is None:
        pytest.skip("wcsware (WCSLIB utilities) is not installed")
    path = tmp_path / "cube.fits"
    write_cube(make_cube(beam=beam, spectral="VRAD"), path, config_text=CONFIG_TEXT)
    # wcsware -l -s: strict lint against the WCS standard (WCSLIB, check-values FW-10).
    report = subprocess.run([program, "-l", "-s", str(path)], capture_output=True, text=True, check=True)
    assert "No invalid WCS keyrecords were found" in report.stdout + report.stderr


@pytest.mark.parametrize("layout", ["float64", "float32", "transposed view"])
def test_cube_written_in_many_pieces_reads_back_and_its_checksums_verify(layout, make_wcs, tmp_path, rng):
    # More than one 1 MiB piece (262144 values), an odd value count, float64 and non-contiguous input:
    # astropy verifies CHECKSUM and DATASUM on open (and warns, an error here, when they do not agree).
    shape = (3, 301, 347)
    data = rng.standard_normal(shape)
    if layout == "float32":
        data = data.astype(np.float32)
    elif layout == "transposed view":
        data = np.ascontiguousarray(data.transpose(2, 1, 0)).transpose(2, 1, 0)
    write_cube(Cube(data, make_wcs(array_shape=shape), u.Jy / u.beam), tmp_path / "big.fits")
    with fits.open(tmp_path / "big.fits", checksum=True) as opened:
        np.testing.assert_array_equal(opened[0].data, data.astype(np.float32))
