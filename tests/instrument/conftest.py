"""A small cube WCS built directly with astropy.wcs, for the instrument tests."""

import pytest
from astropy.wcs import WCS

NU0_HZ = 1_420_405_751.768  # check-values HI-01


@pytest.fixture
def make_wcs():
    """Return a function building a 3-axis SIN + FREQ/VRAD WCS with square pixels.

    ``east_left=True`` gives CDELT1 < 0 (RA increasing to the left); False flips it.
    """

    def _make(n_x, n_y, n_chan, *, pixel_arcsec=5.0, ctype3="FREQ", crval3=1.4e9, cdelt3=1.0e4,
              east_left=True, restfrq=NU0_HZ):
        wcs = WCS(naxis=3)
        wcs.wcs.ctype = ["RA---SIN", "DEC--SIN", ctype3]
        wcs.wcs.cunit = ["deg", "deg", "Hz" if ctype3 == "FREQ" else "m/s"]
        wcs.wcs.crval = [150.0, 30.0, crval3]
        wcs.wcs.crpix = [(n_x + 1) / 2, (n_y + 1) / 2, 1.0]
        sign = -1.0 if east_left else 1.0
        wcs.wcs.cdelt = [sign * pixel_arcsec / 3600, pixel_arcsec / 3600, cdelt3]
        if restfrq is not None:
            wcs.wcs.restfrq = restfrq
        wcs.wcs.specsys = "BARYCENT"
        wcs.pixel_shape = (n_x, n_y, n_chan)
        return wcs

    return _make
