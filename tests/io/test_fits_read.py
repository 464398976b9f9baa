"""read_cube, read_config_text and describe_fits: round trips, refusals and the summary."""

import dataclasses

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.io import fits
from astropy.units import doppler_radio
from astropy.wcs import WCS, FITSFixedWarning

from pipeline.errors import FitsInputError
from pipeline.io import describe_fits, read_config_text, read_cube, write_cube, write_image

CONFIG_TEXT = '[grid]\npixel_scale = "5 arcsec"   \n# ″ µ\tnote\r\npath = "C:\\\\runs"\n\n'


@pytest.mark.parametrize("options", [
    {"spectral": "FREQ", "projection": "SIN"},
    {"spectral": "VRAD", "projection": "TAN"},
    {"spectral": "FREQ", "projection": "SIN", "crval": (359.995, -45.0)},
], ids=["freq-sin", "vrad-tan", "ra-near-360"])
def test_round_trip_preserves_data_world_coordinates_unit_beam_and_provenance(options, make_cube, beam, tmp_path):
    provenance = {"noise_rms_jy_per_beam": 1e-3, "tool": "cubewright", "centre_kpc": [0.5, -1.0, 2.0],
                  "distance": 12.5 * u.Mpc}
    cube = make_cube(beam=beam, provenance=provenance, **options)
    cube.data[2, 3, 4] = np.nan
    path = tmp_path / "cube.fits"
    write_cube(cube, path, config_text=CONFIG_TEXT)
    back = read_cube(path)
    assert back.data.dtype == np.float32 and back.data.dtype.isnative
    np.testing.assert_array_equal(back.data, cube.data)  # bit-exact float32, NaN kept
    pixels = np.array([[0.0, 0.0, 0.0], [6.0, 5.0, 4.0], [2.5, 4.0, 1.0], [3.0, 1.0, 3.0]])
    # astropy.wcs (WCSLIB) on the written header against the original WCS.
    np.testing.assert_allclose(back.wcs.all_pix2world(pixels, 0), cube.wcs.all_pix2world(pixels, 0),
                               rtol=1e-13, atol=1e-10)
    assert back.wcs.wcs.specsys == "BARYCENT"
    assert back.wcs.wcs.restfrq == cube.wcs.wcs.restfrq
    assert back.unit == u.Jy / u.beam
    assert u.allclose(back.beam.major, 30 * u.arcsec, rtol=1e-14)
    assert u.allclose(back.beam.minor, 20 * u.arcsec, rtol=1e-14)
    assert u.allclose(back.beam.position_angle, 45 * u.deg, rtol=1e-14)
    assert back.provenance.keys() == provenance.keys()
    assert back.provenance["centre_kpc"] == [0.5, -1.0, 2.0]
    assert u.allclose(back.provenance["distance"], 12.5 * u.Mpc, rtol=0)


def test_read_world_coordinates_match_check_values_fw05(fw05_wcs, make_cube, tmp_path):
    # Pixel coordinates outside the small array are still valid WCS inputs.
    cube = dataclasses.replace(make_cube(), wcs=fw05_wcs)
    write_cube(cube, tmp_path / "cube.fits")
    wcs = read_cube(tmp_path / "cube.fits").wcs
    # check-values FW-05 (astropy.wcs / WCSLIB), FITS 1-based pixels; tolerance 1e-8 deg, 1e-3 Hz.
    world = wcs.all_pix2world(np.array([[51.0, 51.0, 1.0], [61.0, 61.0, 11.0], [1.0, 1.0, 64.0]]), 1)
    np.testing.assert_allclose(world[:, 0], [150.0, 149.98396025, 150.08013153], rtol=0, atol=1e-8)
    np.testing.assert_allclose(world[:, 1], [30.0, 30.01388792, 29.93053126], rtol=0, atol=1e-8)
    np.testing.assert_allclose(world[:, 2], [1.4e9, 1.4001e9, 1.40063e9], rtol=0, atol=1e-3)


@pytest.mark.parametrize("unit", [u.Jy / u.beam, u.K, u.Jy / u.pix, u.mJy / u.beam])
def test_unit_round_trips_through_bunit(unit, make_cube, tmp_path):
    write_cube(make_cube(unit=unit), tmp_path / "cube.fits")
    assert read_cube(tmp_path / "cube.fits").unit == unit


def test_cube_without_beam_reads_back_without_beam(make_cube, tmp_path):
    write_cube(make_cube(), tmp_path / "cube.fits")
    back = read_cube(tmp_path / "cube.fits")
    assert back.beam is None
    assert back.provenance == {}


def test_read_beam_solid_angle_matches_radio_beam(make_cube, beam, tmp_path):
    write_cube(make_cube(beam=beam), tmp_path / "cube.fits")
    read_beam = read_cube(tmp_path / "cube.fits").beam
    reference = radio_beam.Beam(major=30 * u.arcsec, minor=20 * u.arcsec, pa=45 * u.deg)
    assert u.allclose(read_beam.solid_angle, reference.sr, rtol=1e-12)  # radio-beam


def _write_raw(path, data, **cards):
    header = fits.Header()
    for key, value in cards.items():
        header[key] = value
    fits.PrimaryHDU(data=data, header=header).writeto(path)
    return path


# check-values FW-07: the FW-05 axis as optical velocity, linear in frequency; no RESTFRQ.
_VOPT_F2W = {"CTYPE3": "VOPT-F2W", "CUNIT3": "m/s", "CRVAL3": 4369636.0570, "CDELT3": -2172.58639}


def _cube_cards(**changes):
    cards = {"CTYPE1": "RA---SIN", "CTYPE2": "DEC--SIN", "CTYPE3": "FREQ", "CRVAL3": 1.4e9, "CDELT3": 1e4,
             "CUNIT3": "Hz", "BUNIT": "Jy beam-1"}
    cards.update(changes)
    return {key: value for key, value in cards.items() if value is not None}


def test_foreign_file_noise_keyword_reads_into_provenance(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), NOISERMS=0.002, **_cube_cards())
    assert read_cube(path).provenance == {"noise_rms_jy_per_beam": 0.002}


def test_foreign_file_without_bpa_reads_position_angle_zero(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), BMAJ=0.01, BMIN=0.005,
                      **_cube_cards())
    assert u.allclose(read_cube(path).beam.position_angle, 0 * u.deg, atol=0 * u.deg)


def test_big_endian_float64_data_come_back_native_float64(tmp_path):
    data = np.arange(24, dtype=">f8").reshape(2, 3, 4)
    path = _write_raw(tmp_path / "cube.fits", data, **_cube_cards())
    back = read_cube(path).data
    assert back.dtype == np.float64 and back.dtype.isnative
    np.testing.assert_array_equal(back, data)


def test_missing_file_is_refused(tmp_path):
    with pytest.raises(FitsInputError, match=r"nothere\.fits: no such file"):
        read_cube(tmp_path / "nothere.fits")


def test_folder_is_refused(tmp_path):
    with pytest.raises(FitsInputError, match="is a folder, not a FITS file"):
        read_cube(tmp_path)


@pytest.mark.parametrize("content", [b"", b"[grid]\npixel_scale = 5\n", b"SIMPLE  =" + b" " * 100])
def test_non_fits_file_is_refused(content, tmp_path):
    path = tmp_path / "notes.fits"
    path.write_bytes(content)
    with pytest.raises(FitsInputError, match=r"notes\.fits: not a readable FITS file \("):
        read_cube(path)


def test_truncated_file_is_refused(make_cube, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(make_cube(), path)
    path.write_bytes(path.read_bytes()[:4000])
    with pytest.raises(FitsInputError, match=r"cube\.fits: not a readable FITS file"):
        read_cube(path)


def test_two_dimensional_map_is_refused_as_a_cube(make_wcs, tmp_path):
    path = tmp_path / "map.fits"
    write_image(np.zeros((6, 7)), make_wcs().celestial, u.K, path)
    with pytest.raises(FitsInputError, match=r"HDU 0 must be a 3-axis cube \(NAXIS = 3\); got NAXIS = 2 "
                                             r"with NAXISn = \(7, 6\)"):
        read_cube(path)


def test_file_with_no_image_is_refused(tmp_path):
    path = tmp_path / "table.fits"
    table = fits.BinTableHDU.from_columns([fits.Column(name="A", format="J", array=[1, 2])])
    fits.HDUList([fits.PrimaryHDU(), table]).writeto(path)
    with pytest.raises(FitsInputError, match="no HDU holds image data; expected a 3-axis cube"):
        read_cube(path)


def test_cube_in_an_image_extension_is_read(make_cube, tmp_path):
    cube = make_cube()
    path = tmp_path / "cube.fits"
    header = cube.wcs.to_header()
    header["BUNIT"] = "K"
    fits.HDUList([fits.PrimaryHDU(), fits.ImageHDU(cube.data, header=header)]).writeto(path)
    back = read_cube(path)
    np.testing.assert_array_equal(back.data, cube.data)
    assert back.unit == u.K


def test_cube_without_celestial_axes_is_refused(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32),
                      **_cube_cards(CTYPE1="X", CTYPE2="Y"))
    with pytest.raises(FitsInputError, match=r"HDU 0 has no celestial WCS; expected CTYPE1/CTYPE2 such as "
                                             r"'RA---SIN'/'DEC--SIN'; got \['X', 'Y', 'FREQ'\]"):
        read_cube(path)


def test_cube_with_spectral_axis_first_is_refused(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32),
                      **_cube_cards(CTYPE1="FREQ", CTYPE2="RA---SIN", CTYPE3="DEC--SIN", CUNIT3=None,
                                    CRVAL3=None, CDELT3=None, CUNIT1="Hz", CRVAL1=1.4e9))
    with pytest.raises(FitsInputError, match=r"axes must be \(longitude, latitude, spectral\)"):
        read_cube(path)


def test_unreadable_wcs_is_refused_on_one_line(tmp_path):
    # WCS Paper III: VOPT-F2W needs a rest frequency; WCSLIB's wcsset refuses the header.
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), **_cube_cards(**_VOPT_F2W))
    with pytest.warns(FITSFixedWarning), \
            pytest.raises(FitsInputError, match=r"HDU 0 has an unreadable WCS \(.*rest frequency") as raised:
        read_cube(path)
    assert "\n" not in str(raised.value)


def test_missing_bunit_is_refused(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), **_cube_cards(BUNIT=None))
    with pytest.raises(FitsInputError, match="HDU 0 has no BUNIT; expected a data unit such as 'Jy beam-1'"):
        read_cube(path)


@pytest.mark.parametrize("bunit", ["JY/BEAM", "furlongs"])  # check-values FW-08: 'JY/BEAM' is rejected
def test_bad_bunit_is_refused(bunit, tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), **_cube_cards(BUNIT=bunit))
    with pytest.raises(FitsInputError, match=rf"BUNIT '{bunit}' is not a FITS unit string"):
        read_cube(path)


@pytest.mark.parametrize(("cards", "message"), [
    ({"BMAJ": 0.01}, "has BMAJ but no BMIN; a beam needs both"),
    ({"BMIN": 0.01}, "has BMIN but no BMAJ; a beam needs both"),
    ({"BMAJ": "wide", "BMIN": 0.01}, "BMAJ must be a number of degrees; got 'wide'"),
    ({"BMAJ": 0.01, "BMIN": 0.005, "BPA": True}, "BPA must be a number of degrees; got True"),
    ({"BMAJ": -0.01, "BMIN": 0.005}, "BMAJ and BMIN must be positive"),
    ({"BMAJ": 0.005, "BMIN": 0.01}, "BMAJ/BMIN/BPA do not describe a beam"),
])
def test_bad_beam_keywords_are_refused(cards, message, tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), **cards, **_cube_cards())
    with pytest.raises(FitsInputError, match=message):
        read_cube(path)


def test_config_text_comes_back_exactly(make_cube, make_wcs, tmp_path):
    write_cube(make_cube(), tmp_path / "cube.fits", config_text=CONFIG_TEXT)
    write_image(np.zeros((6, 7)), make_wcs().celestial, u.K, tmp_path / "map.fits", config_text=CONFIG_TEXT)
    assert read_config_text(tmp_path / "cube.fits") == CONFIG_TEXT
    assert read_config_text(tmp_path / "map.fits") == CONFIG_TEXT


def test_file_without_config_has_no_config_text(make_cube, tmp_path):
    write_cube(make_cube(), tmp_path / "cube.fits")
    with pytest.raises(FitsInputError, match="no RUNCONFIG extension; the file was written without a run config"):
        read_config_text(tmp_path / "cube.fits")


def test_altered_config_text_is_detected(make_cube, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(make_cube(), path, config_text="a = 1\nb = 2\n")
    with fits.open(path, mode="update") as hdul:
        hdul["RUNCONFIG"].data["LINE"][0] = "a = 9"
    with pytest.raises(FitsInputError, match="the RUNCONFIG text does not match CWCFGSHA"):
        read_config_text(path)


def test_describe_lists_hdus_axes_unit_beam_noise_and_provenance(fw05_wcs, make_cube, beam, tmp_path):
    cube = dataclasses.replace(make_cube(beam=beam, provenance={"noise_rms_jy_per_beam": 1.5e-3, "tool": "x"}),
                               wcs=fw05_wcs)
    path = tmp_path / "cube.fits"
    write_cube(cube, path, config_text=CONFIG_TEXT)
    text = describe_fits(path)
    assert "HDU 0 PRIMARY: image, BITPIX -32, NAXISn 7 x 6 x 5" in text
    assert "HDU 1 RUNCONFIG: table, 6 rows, columns LINE" in text
    assert "HDU 2 PROVENANCE: table, 2 rows, columns KEY, VALUE, UNIT" in text
    assert "axis 1: RA---SIN, 7 pixels; CRVAL1 150 deg at CRPIX1 51; step -5 arcsec" in text
    assert "axis 3: FREQ, 5 channels; CRVAL3 1.4 GHz at CRPIX3 1; step 10 kHz" in text
    # Channel centres 1400.00 to 1400.04 MHz; radio velocity from check-values HI-10
    # (v_rad = 4306.86124 km/s at 1400 MHz) and astropy doppler_radio for the last channel.
    last = (1.40004e9 * u.Hz).to_value(u.km / u.s, equivalencies=doppler_radio(1420405751.768 * u.Hz))
    assert (f"frequency 1.4 GHz to 1.40004 GHz; radio velocity 4306.86124 km / s to {last:.9g} km / s "
            "(rest frequency 1.42040575 GHz)") in text
    assert "unit (BUNIT): Jy beam-1" in text
    assert "beam: 30 x 20 arcsec, position angle 45 deg" in text
    assert "noise rms per channel (NOISERMS): 0.0015 Jy/beam" in text
    assert "written by: ORIGIN = cubewright, CWVERS = " in text
    assert "run config: RUNCONFIG extension, 6 lines" in text
    assert "provenance record: PROVENANCE extension, items noise_rms_jy_per_beam, tool" in text


def test_describe_vrad_axis_gives_the_frequency_range(make_cube, tmp_path):
    cube = make_cube(spectral="VRAD")
    write_cube(cube, tmp_path / "cube.fits")
    text = describe_fits(tmp_path / "cube.fits")
    velocity = cube.wcs.sub([3]).all_pix2world([0.0, 4.0], 0)[0] * u.m / u.s
    # astropy doppler_radio: nu = nu_0 (1 - v/c) (check-values HI-10).
    frequency = velocity.to(u.GHz, equivalencies=doppler_radio(1420405751.768 * u.Hz))
    assert f"frequency {frequency[0].value:.9g} GHz to {frequency[1].value:.9g} GHz" in text
    assert "axis 3: VRAD, 5 channels; CRVAL3 1200 km / s at CRPIX3 2; step -2 km / s" in text


def test_describe_foreign_file_says_what_is_not_recorded(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32),
                      **_cube_cards(BUNIT=None, CTYPE3="VOPT", CUNIT3="m/s", CRVAL3=4.3e6, CDELT3=-2e3))
    text = describe_fits(path)
    assert "channel centres" in text  # VOPT without a rest frequency cannot become a frequency
    assert "unit (BUNIT): not set" in text
    assert "beam: not set (no BMAJ/BMIN)" in text
    assert "noise rms per channel (NOISERMS): not recorded" in text
    assert "written by: not recorded" in text
    assert "config digest (CWCFGSHA): not recorded" in text
    assert "run config: none (RUNCONFIG extension absent)" in text


def test_describe_frequency_axis_without_rest_frequency(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), **_cube_cards())
    assert "no rest frequency, so no velocity" in describe_fits(path)


def test_describe_file_with_bad_wcs_still_describes_the_rest(tmp_path):
    path = _write_raw(tmp_path / "cube.fits", np.zeros((2, 3, 4), np.float32), **_cube_cards(**_VOPT_F2W))
    with pytest.warns(FITSFixedWarning):
        text = describe_fits(path)
    assert "WCS: cannot be read (" in text
    assert "unit (BUNIT): Jy beam-1" in text


def test_describe_file_without_image(tmp_path):
    path = tmp_path / "table.fits"
    table = fits.BinTableHDU.from_columns([fits.Column(name="A", format="J", array=[1, 2])])
    fits.HDUList([fits.PrimaryHDU(), table]).writeto(path)
    text = describe_fits(path)
    assert "HDU 1 (no name): table, 2 rows, columns A" in text
    assert "data: no HDU holds image data" in text


def test_describe_refuses_a_non_fits_file(tmp_path):
    path = tmp_path / "notes.txt"
    path.write_text("not fits")
    with pytest.raises(FitsInputError, match="not a readable FITS file"):
        describe_fits(path)


def test_describe_of_a_moment_map(make_wcs, beam, tmp_path):
    path = tmp_path / "map.fits"
    write_image(np.zeros((6, 7)), make_wcs().celestial, u.Jy / u.beam * u.km / u.s, path, beam=beam)
    text = describe_fits(path)
    assert "unit (BUNIT): Jy km s-1 beam-1" in text
    assert "axis 3" not in text
    assert WCS(fits.getheader(path)).naxis == 2


def _with_foreign_table(path, name, columns):
    with fits.open(path, mode="append") as hdul:
        hdul.append(fits.BinTableHDU.from_columns(columns, name=name))


def test_foreign_runconfig_table_is_refused(make_cube, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(make_cube(), path)
    _with_foreign_table(path, "RUNCONFIG", [fits.Column(name="TEXT", format="5A", array=["a = 1"])])
    with pytest.raises(FitsInputError, match="the RUNCONFIG extension has no LINE column; it was not written by"):
        read_config_text(path)


@pytest.mark.parametrize(("columns", "detail"), [
    ([fits.Column(name="NAME", format="3A", array=["abc"])], r"\(columns KEY, VALUE, UNIT\)$"),
    ([fits.Column(name=name, format="6A", array=[text]) for name, text in
      (("KEY", "a"), ("VALUE", "{oops"), ("UNIT", ""))], r"\(columns KEY, VALUE, UNIT\): Expecting"),
], ids=["other-columns", "bad-json"])
def test_foreign_provenance_table_is_refused(columns, detail, make_cube, tmp_path):
    path = tmp_path / "cube.fits"
    write_cube(make_cube(), path)
    _with_foreign_table(path, "PROVENANCE", columns)
    with pytest.raises(FitsInputError, match=r"the PROVENANCE extension is not a cubewright record " + detail):
        read_cube(path)
    assert "provenance record: PROVENANCE extension, not in cubewright's layout" in describe_fits(path)


def test_truncated_data_without_checksum_are_refused(tmp_path):
    from astropy.utils.exceptions import AstropyUserWarning

    path = _write_raw(tmp_path / "cube.fits", np.zeros((20, 30, 40), np.float32), **_cube_cards())
    path.write_bytes(path.read_bytes()[:20000])
    with pytest.warns(AstropyUserWarning, match="File may have been truncated"), \
            pytest.raises(FitsInputError, match=r"HDU 0 data cannot be read \(.*\); the file may be truncated"):
        read_cube(path)
