"""Fixtures for the FITS tests: WCS and cube factories, a beam stand-in, verifier runners."""

import dataclasses
import shutil
import subprocess

import astropy.units as u
import numpy as np
import pytest
from astropy.wcs import WCS

from pipeline.cube import Cube
from pipeline.units import HI_REST_FREQUENCY

#: Asymmetric shape (n_chan, n_y, n_x) so that axis swaps cannot hide.
ARRAY_SHAPE = (5, 6, 7)


@dataclasses.dataclass(frozen=True)
class StandInBeam:
    """The beam interface the writer relies on (major, minor, position_angle)."""

    major: u.Quantity
    minor: u.Quantity
    position_angle: u.Quantity


def build_wcs(*, spectral="FREQ", projection="SIN", crval=(150.0, 30.0), array_shape=ARRAY_SHAPE):
    """Return a 3-axis WCS (RA, Dec, FREQ in Hz or VRAD in m/s) with the reference off centre."""
    n_chan, n_y, n_x = array_shape
    wcs = WCS(naxis=3)
    wcs.wcs.ctype = [f"RA---{projection}", f"DEC--{projection}", spectral]
    wcs.wcs.crpix = [0.4 * n_x + 1, 0.6 * n_y + 1, 2.0]
    if spectral == "FREQ":
        wcs.wcs.crval = [*crval, 1.4e9]
        wcs.wcs.cdelt = [-5.0 / 3600, 5.0 / 3600, 1.0e4]
        wcs.wcs.cunit = ["deg", "deg", "Hz"]
    else:
        wcs.wcs.crval = [*crval, 1.2e6]
        wcs.wcs.cdelt = [-5.0 / 3600, 5.0 / 3600, -2.0e3]
        wcs.wcs.cunit = ["deg", "deg", "m/s"]
    wcs.wcs.restfrq = HI_REST_FREQUENCY.to_value(u.Hz)
    wcs.wcs.specsys = "BARYCENT"
    wcs.wcs.radesys = "ICRS"
    return wcs


def build_fw05_wcs():
    """Return the celestial + frequency header of check-values FW-05."""
    wcs = WCS(naxis=3)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN", "FREQ"]
    wcs.wcs.crpix = [51.0, 51.0, 1.0]
    wcs.wcs.crval = [150.0, 30.0, 1.4e9]
    wcs.wcs.cdelt = [-5.0 / 3600, 5.0 / 3600, 1.0e4]
    wcs.wcs.cunit = ["deg", "deg", "Hz"]
    wcs.wcs.restfrq = 1420405751.768
    wcs.wcs.specsys = "BARYCENT"
    wcs.wcs.radesys = "ICRS"
    return wcs


@pytest.fixture
def make_wcs():
    """Return :func:`build_wcs` (keywords spectral, projection, crval, array_shape)."""
    return build_wcs


@pytest.fixture
def fw05_wcs():
    """The WCS of check-values FW-05."""
    return build_fw05_wcs()


@pytest.fixture
def make_cube(rng):
    """Return a function building a small float32 Cube with random data."""

    def _make(*, unit=u.Jy / u.beam, beam=None, provenance=None, **wcs_options):
        data = rng.normal(0.0, 1.0, ARRAY_SHAPE).astype(np.float32)
        return Cube(data=data, wcs=build_wcs(**wcs_options), unit=unit, beam=beam, provenance=provenance or {})

    return _make


@pytest.fixture
def beam():
    """An elliptical beam at a non-zero position angle (check-values FW-09 example)."""
    return StandInBeam(major=30 * u.arcsec, minor=20 * u.arcsec, position_angle=45 * u.deg)


@pytest.fixture
def wcsware():
    """Return a function feeding lines to ``wcsware <option> FILE`` and giving the parsed numbers.

    ``-x`` turns pixel coordinates into world coordinates, ``-w`` the reverse
    (WCSLIB's wcsp2s / wcss2p).  The result has one row per input line: the
    numbers after ``World:`` (for -x) or ``Pixel:`` (for -w).
    """
    program = shutil.which("wcsware")
    if program is None:
        pytest.skip("wcsware (WCSLIB utilities) is not installed")

    def _run(option, path, rows):
        stdin = "".join(" ".join(repr(float(value)) for value in row) + "\n" for row in rows)
        report = subprocess.run([program, option, str(path)], input=stdin, capture_output=True, text=True,
                                check=True)
        label = "World:" if option == "-x" else "Pixel:"
        lines = [line for line in report.stdout.splitlines() if label in line]
        return np.array([[float(item) for item in line.split(label)[1].split(",")] for line in lines])

    return _run
