"""A cube written slab by slab through a memory map equals write_cube's file; checksums verify."""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits

from pipeline.errors import OutputError
from pipeline.io import create_fits_cube, finalise_fits_cube, write_cube, write_fits_slab

CONFIG_TEXT = "[grid]\nn_x = 7\n"
PROVENANCE = {"noise_rms_jy_per_beam": 1e-3, "centre_kpc": [0.0, 1.0, -2.0]}


def _slabbed(path, cube, ranges, **options):
    partial = create_fits_cube(path, array_shape=cube.data.shape, wcs=cube.wcs, unit=cube.unit, beam=cube.beam,
                               provenance=cube.provenance, config_text=CONFIG_TEXT, **options)
    assert partial.parent == path.parent and partial.name.startswith(".partial-") and not path.exists()
    for first, stop in ranges:
        write_fits_slab(partial, first, cube.data[first:stop])
    finalise_fits_cube(partial, path, **options)
    return path


@pytest.mark.parametrize("ranges", [[(0, 5)], [(3, 5), (0, 1), (1, 3)]])
def test_slabbed_file_equals_write_cube_and_its_checksums_verify(make_cube, beam, tmp_path, ranges):
    cube = make_cube(beam=beam, provenance=dict(PROVENANCE))
    whole = tmp_path / "whole.fits"
    write_cube(cube, whole, config_text=CONFIG_TEXT)
    slabbed = _slabbed(tmp_path / "slabbed.fits", cube, ranges)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # astropy warns when a CHECKSUM or DATASUM does not verify
        with fits.open(whole, checksum=True) as expected, fits.open(slabbed, checksum=True) as got:
            assert len(got) == len(expected) == 3
            np.testing.assert_array_equal(got[0].data, expected[0].data)
            skip = {"DATE", "CHECKSUM", "DATASUM"}
            assert [(c.keyword, c.value) for c in got[0].header.cards if c.keyword not in skip] == \
                [(c.keyword, c.value) for c in expected[0].header.cards if c.keyword not in skip]
            assert got[0].header["DATASUM"] == expected[0].header["DATASUM"]
            for k in (1, 2):
                assert got[k].header["EXTNAME"] == expected[k].header["EXTNAME"]
                assert got[k].data.tobytes() == expected[k].data.tobytes()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".partial-")] == []


@pytest.mark.fitsverify
def test_slabbed_file_passes_fitsverify_with_no_warning(make_cube, beam, fitsverify, tmp_path):
    path = _slabbed(tmp_path / "c.fits", make_cube(beam=beam, provenance=dict(PROVENANCE)), [(0, 2), (2, 5)])
    n_warnings, n_errors, report = fitsverify(path)  # HEASARC fitsverify (check-values FW-10)
    assert (n_warnings, n_errors) == (0, 0), report


def test_kelvin_cube_without_beam_or_config_is_laid_out_too(make_cube, tmp_path):
    cube = make_cube(unit=u.K)
    partial = create_fits_cube(tmp_path / "k.fits", array_shape=cube.data.shape, wcs=cube.wcs, unit=u.K)
    write_fits_slab(partial, 0, cube.data)
    finalise_fits_cube(partial, tmp_path / "k.fits")
    with fits.open(tmp_path / "k.fits", checksum=True) as opened:
        assert len(opened) == 1 and opened[0].header["BUNIT"] == "K"
        np.testing.assert_array_equal(opened[0].data, cube.data)


def test_existing_file_is_refused_without_overwrite_and_kept_until_finalised(make_cube, tmp_path):
    cube = make_cube()
    target = tmp_path / "c.fits"
    target.write_bytes(b"old")
    with pytest.raises(OutputError, match=r"c.fits: exists; pass --overwrite"):
        create_fits_cube(target, array_shape=cube.data.shape, wcs=cube.wcs, unit=cube.unit)
    partial = create_fits_cube(target, array_shape=cube.data.shape, wcs=cube.wcs, unit=cube.unit, overwrite=True)
    assert target.read_bytes() == b"old"
    with pytest.raises(OutputError, match=r"c.fits: exists; pass --overwrite"):
        finalise_fits_cube(partial, target)
    finalise_fits_cube(partial, target, overwrite=True)
    assert fits.getdata(target).shape == cube.data.shape


@pytest.mark.parametrize("first, shape", [(4, (2, 6, 7)), (0, (1, 6, 8)), (-1, (1, 6, 7))])
def test_a_slab_that_does_not_fit_is_refused(make_cube, tmp_path, first, shape):
    cube = make_cube()
    partial = create_fits_cube(tmp_path / "c.fits", array_shape=cube.data.shape, wcs=cube.wcs, unit=cube.unit)
    with pytest.raises(ValueError, match=r"the slab must have shape \(n, 6, 7\) and fit channels 0 to 5"):
        write_fits_slab(partial, first, np.zeros(shape))
