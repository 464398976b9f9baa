"""Gaussian beams: the beam spec, its kernel on the pixel grid, convolution, Jy/beam to K.

Conventions
-----------
* Beam sizes are FWHM; the position angle is that of the major axis, measured
  from north through east (the BPA convention, check-values FW-09).
* On the sky grid, east is toward increasing right ascension.  A WCS with
  CDELT1 < 0 (RA increasing to the left, north up) therefore puts a beam at
  PA = +30 deg with its major axis pointing up and to the left.  The kernel is
  built from the WCS's own pixel-to-sky matrix, so any axis flip or rotation in
  the header is honoured.
* Before the beam a cube is in Jy/pixel (:data:`JY_PER_PIXEL`); after it, in Jy/beam.
"""

import concurrent.futures
import dataclasses
import math
import os

import astropy.units as u
import numpy as np
import scipy.fft
from radio_beam import Beam

from pipeline.cube import Cube
from pipeline.units import strip_units

__all__ = ["JY_PER_PIXEL", "BeamSpec", "beam_kernel", "convolve_with_beam", "jy_per_beam_to_kelvin",
           "cube_to_kelvin"]

#: Unit of a cube before the beam: flux density per pixel; summing pixels gives the total flux.
JY_PER_PIXEL = u.Jy / u.pixel

_JY_PER_BEAM = u.Jy / u.beam
# FWHM = sqrt(8 ln 2) sigma (check-values BM-01).
_FWHM_PER_SIGMA = math.sqrt(8.0 * math.log(2.0))
# The kernel is cut at this many standard deviations along each pixel axis; the
# weight outside is below 4e-9 and the kept part is renormalised to unit sum.
_KERNEL_HALF_WIDTH_SIGMA = 6.0


def _strip(value, unit, *, name) -> np.ndarray:
    """``strip_units`` keeping the input's shape (0-d for a scalar)."""
    return strip_units(value, unit, name=name).reshape(np.shape(value))


def _as_angle(value, name, unit, *, positive):
    """Return a scalar angle Quantity in ``unit``, refusing arrays, non-finite and (if asked) values <= 0."""
    stripped = _strip(value, unit, name=name)
    if stripped.ndim != 0 or not np.isfinite(stripped) or (positive and not stripped > 0):
        kind = "a positive finite angle" if positive else "a finite angle"
        example = "'30 arcsec'" if positive else "'45 deg'"
        raise ValueError(f"'{name}' must be {kind} (one value), e.g. {example}; got {value!r}")
    return float(stripped) * unit


@dataclasses.dataclass(frozen=True)
class BeamSpec:
    """An elliptical Gaussian beam.

    Parameters
    ----------
    major : `~astropy.units.Quantity` ['angle']
        FWHM of the major axis (stored in arcsec).
    minor : `~astropy.units.Quantity` ['angle']
        FWHM of the minor axis, at most ``major`` (stored in arcsec).
    position_angle : `~astropy.units.Quantity` ['angle']
        Position angle of the major axis, east of north (stored in deg).

    Raises
    ------
    ValueError
        If an axis is not positive and finite, ``minor`` exceeds ``major``, or
        a value is not a single number.
    astropy.units.UnitsError
        If a value is not an angle Quantity.

    Examples
    --------
    >>> import astropy.units as u
    >>> beam = BeamSpec(30 * u.arcsec, 20 * u.arcsec, 45 * u.deg)
    >>> print(f"{beam.solid_angle.to(u.arcsec**2):.4f}")
    679.8540 arcsec2
    """

    major: u.Quantity
    minor: u.Quantity
    position_angle: u.Quantity

    def __post_init__(self):
        major = _as_angle(self.major, "major", u.arcsec, positive=True)
        minor = _as_angle(self.minor, "minor", u.arcsec, positive=True)
        position_angle = _as_angle(self.position_angle, "position_angle", u.deg, positive=False)
        if minor > major * (1.0 + 1e-12):
            raise ValueError(f"'minor' must not exceed 'major'; got minor = {minor} > major = {major} "
                             f"(swap them and keep the position angle of the longer axis)")
        object.__setattr__(self, "major", major)
        object.__setattr__(self, "minor", minor)
        object.__setattr__(self, "position_angle", position_angle)

    @property
    def solid_angle(self) -> u.Quantity:
        """Beam solid angle pi theta_maj theta_min / (4 ln 2), in sr (check-values BM-02)."""
        return (math.pi * self.major * self.minor / (4.0 * math.log(2.0))).to(u.sr)

    def to_radio_beam(self) -> Beam:
        """Return the same beam as a `radio_beam.Beam`."""
        return Beam(major=self.major, minor=self.minor, pa=self.position_angle)


def _require_beam_spec(beam, name):
    """Refuse anything but a BeamSpec."""
    if not isinstance(beam, BeamSpec):
        raise TypeError(f"'{name}' must be a BeamSpec, e.g. BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg); "
                        f"got {beam!r}")


def _sky_covariance_deg2(beam) -> np.ndarray:
    """Return the beam's 2x2 covariance on the sky, axes (east, north), in deg^2."""
    sigma_major = beam.major.to_value(u.deg) / _FWHM_PER_SIGMA
    sigma_minor = beam.minor.to_value(u.deg) / _FWHM_PER_SIGMA
    angle = beam.position_angle.to_value(u.rad)
    major_axis = np.array([math.sin(angle), math.cos(angle)])
    minor_axis = np.array([math.cos(angle), -math.sin(angle)])
    return sigma_major**2 * np.outer(major_axis, major_axis) + sigma_minor**2 * np.outer(minor_axis, minor_axis)


def _pixel_covariance(beam, pixel_matrix_deg) -> np.ndarray:
    """Return the beam covariance in pixels, axes (x, y), given d(east, north)/d(x, y) in deg."""
    inverse = np.linalg.inv(pixel_matrix_deg)
    return inverse @ _sky_covariance_deg2(beam) @ inverse.T


def _celestial_pixel_matrix(wcs) -> np.ndarray:
    """Return d(east, north)/d(x, y) in deg for the first two (celestial) pixel axes of a WCS."""
    wcs = wcs.deepcopy()
    wcs.wcs.set()
    lng, lat = wcs.wcs.lng, wcs.wcs.lat
    if sorted((lng, lat)) != [0, 1]:
        raise ValueError(f"the cube WCS must have its celestial axes first; got CTYPE = {list(wcs.wcs.ctype)}")
    matrix = np.asarray(wcs.pixel_scale_matrix, dtype=np.float64)[:2, :2]
    return matrix[[lng, lat], :]


def _kernel_from_covariance(covariance, shape=None) -> np.ndarray:
    """Sample a Gaussian of the given pixel covariance at pixel centres; return it with unit sum."""
    if shape is None:
        half_x = math.ceil(_KERNEL_HALF_WIDTH_SIGMA * math.sqrt(covariance[0, 0]))
        half_y = math.ceil(_KERNEL_HALF_WIDTH_SIGMA * math.sqrt(covariance[1, 1]))
        shape = (2 * half_y + 1, 2 * half_x + 1)
    y = (np.arange(shape[0]) - shape[0] // 2)[:, np.newaxis]
    x = (np.arange(shape[1]) - shape[1] // 2)[np.newaxis, :]
    precision = np.linalg.inv(covariance)
    exponent = precision[0, 0] * x**2 + 2.0 * precision[0, 1] * x * y + precision[1, 1] * y**2
    kernel = np.exp(-0.5 * exponent)
    return kernel / kernel.sum()


def _padded_shape(plane_shape, kernel_shape) -> tuple[int, int]:
    """FFT size per axis: the plane plus the kernel's half-width on each side, rounded up to a fast length."""
    return tuple(scipy.fft.next_fast_len(n + 2 * (k // 2), real=True) for n, k in zip(plane_shape, kernel_shape))


def fft_plane_pixels(plane_shape, beam_major_pixels) -> int:
    """Return the pixels of one padded FFT plane the beam step uses, at most, for a beam of this major axis.

    Parameters
    ----------
    plane_shape : tuple of int
        ``(n_y, n_x)`` of a channel.
    beam_major_pixels : float
        Beam major-axis FWHM in pixels of the (square) grid; the kernel is
        never wider than that of a round beam of this FWHM.

    Returns
    -------
    int
        ``n_y' n_x'`` of the padded plane: each axis grown by the kernel
        half-width on both sides and rounded up to a fast FFT length.
    """
    half = math.ceil(_KERNEL_HALF_WIDTH_SIGMA * beam_major_pixels / _FWHM_PER_SIGMA)
    n_y, n_x = _padded_shape(plane_shape, (2 * half + 1, 2 * half + 1))
    return n_y * n_x


def _kernel_spectrum(kernel, padded_shape, *, dtype=np.float64) -> np.ndarray:
    """Real FFT of the kernel placed with its centre on pixel (0, 0) of the padded grid."""
    wrapped = np.zeros(padded_shape, dtype=dtype)
    wrapped[:kernel.shape[0], :kernel.shape[1]] = kernel
    wrapped = np.roll(wrapped, (-(kernel.shape[0] // 2), -(kernel.shape[1] // 2)), axis=(0, 1))
    return scipy.fft.rfft2(wrapped)


def for_each_channel(n_chan, function, *, threads=None):
    """Call ``function(k)`` for every channel k, on ``threads`` threads (all cores by default)."""
    n_threads = min(n_chan, threads or os.cpu_count() or 1)
    if n_threads <= 1:
        for k in range(n_chan):
            function(k)
        return
    with concurrent.futures.ThreadPoolExecutor(max_workers=n_threads) as pool:
        list(pool.map(function, range(n_chan)))


def _convolve_planes(planes, kernel, out, *, scale, threads=None):
    """Write ``scale`` × (each plane ⊛ kernel) into ``out``, with zeros assumed beyond the edges.

    Each plane is transformed alone in single precision (one plane's FFT stays
    in cache), and ``threads`` threads take planes in turn; scipy's FFTs run
    without the GIL.  The result does not depend on the thread count.
    """
    n_chan, n_y, n_x = planes.shape
    padded = _padded_shape((n_y, n_x), kernel.shape)
    spectrum = _kernel_spectrum(kernel, padded, dtype=np.float32) * np.float32(scale)
    bad_channels = []

    def convolve_plane(k):
        plane = np.asarray(planes[k], dtype=np.float32)
        if not np.isfinite(plane).all():
            bad_channels.append(k)
            return
        transformed = scipy.fft.rfft2(plane, s=padded)
        transformed *= spectrum
        out[k] = scipy.fft.irfft2(transformed, s=padded)[:n_y, :n_x]

    for_each_channel(n_chan, convolve_plane, threads=threads)
    if bad_channels:
        raise ValueError(f"the cube must hold finite values to be convolved; channel {min(bad_channels)} "
                         f"holds NaN or Inf")
    return out


def beam_kernel(beam, pixel_scale, *, shape=None) -> np.ndarray:
    """Return the beam sampled on a square-pixel sky grid, normalised to unit sum.

    Parameters
    ----------
    beam : `BeamSpec`
        The beam.
    pixel_scale : `~astropy.units.Quantity` ['angle']
        Pixel size; pixels are square, RA increases to the left (-x) and
        declination upward (+y), as for a WCS with CDELT1 = -CDELT2.
    shape : tuple of int, optional
        ``(n_y, n_x)``, both odd; the beam centre is the central pixel.  By
        default the kernel reaches 6 standard deviations along each axis.

    Returns
    -------
    numpy.ndarray, shape (n_y, n_x)
        Gaussian values at pixel centres, summing to 1.

    Raises
    ------
    TypeError
        If ``beam`` is not a `BeamSpec`.
    ValueError
        If ``pixel_scale`` is not a positive angle or ``shape`` is not two odd
        positive integers.

    Notes
    -----
    Sky covariance R diag(sigma_maj^2, sigma_min^2) R^T with the major axis along
    (east, north) = (sin PA, cos PA) (check-values BM-05), mapped to pixels by
    the inverse of d(east, north)/d(x, y) = diag(-pixel_scale, pixel_scale).
    Centre sampling matches `radio_beam.Beam.as_kernel`; it is accurate while the
    beam FWHM spans more than about 2 pixels.

    Examples
    --------
    >>> import astropy.units as u
    >>> kernel = beam_kernel(BeamSpec(30 * u.arcsec, 20 * u.arcsec, 30 * u.deg), 5 * u.arcsec)
    >>> kernel.shape, round(float(kernel.sum()), 12)
    ((31, 25), 1.0)
    """
    _require_beam_spec(beam, "beam")
    scale_deg = _as_angle(pixel_scale, "pixel_scale", u.deg, positive=True).value
    if shape is not None:
        if (len(shape) != 2 or not all(isinstance(n, (int, np.integer)) and n > 0 and n % 2 == 1
                                       for n in shape)):
            raise ValueError(f"'shape' must be (n_y, n_x) with both odd and positive, e.g. (31, 31); got {shape!r}")
        shape = (int(shape[0]), int(shape[1]))
    pixel_matrix = np.array([[-scale_deg, 0.0], [0.0, scale_deg]])
    return _kernel_from_covariance(_pixel_covariance(beam, pixel_matrix), shape)


def convolve_with_beam(cube, beam, *, threads=None, out=None) -> Cube:
    """Convolve a Jy/pixel cube with a Gaussian beam and return it in Jy/beam.

    Parameters
    ----------
    cube : `~pipeline.cube.Cube`
        Model cube in Jy/pixel (:data:`JY_PER_PIXEL` or a multiple of it), with a
        WCS whose first two axes are celestial.
    beam : `BeamSpec`
        The beam to apply.
    threads : int, optional
        Threads that convolve channels side by side; all cores by default.
    out : numpy.ndarray, optional
        float32 array of the cube's shape to write into (e.g. a memory map);
        a new array by default.

    Returns
    -------
    `~pipeline.cube.Cube`
        New float32 cube in Jy/beam with ``beam`` set, holding ``out`` when
        given; the WCS is copied and the provenance carried over.

    Raises
    ------
    TypeError
        If ``beam`` is not a `BeamSpec`.
    ValueError
        If the cube is not in Jy/pixel, holds NaN or Inf, its WCS does not
        start with the celestial axes, or ``out`` is not float32 of its shape.

    Notes
    -----
    Each channel is convolved with the unit-sum beam kernel built from the WCS's
    pixel-to-sky matrix at the reference pixel, so the summed Jy/pixel flux is
    kept, then multiplied by Omega_beam / Omega_pixel to give Jy/beam (check-values
    BM-03): a point source of flux F peaks at F Jy/beam.  The convolution uses
    single-precision real FFTs, channel by channel, on a grid padded by the
    kernel half-width on every side (zeros beyond the edges), so nothing wraps
    around; values agree with a double-precision convolution to about 1e-6 of
    the peak, far below any thermal noise.

    Examples
    --------
    >>> import astropy.units as u, numpy as np
    >>> from astropy.wcs import WCS
    >>> from pipeline.cube import Cube
    >>> wcs = WCS(naxis=3)
    >>> wcs.wcs.ctype = ["RA---SIN", "DEC--SIN", "FREQ"]
    >>> wcs.wcs.cdelt = [-5 / 3600, 5 / 3600, 1e4]
    >>> wcs.wcs.crval = [150.0, 30.0, 1.4e9]
    >>> data = np.zeros((1, 41, 41)); data[0, 20, 20] = 2.0
    >>> observed = convolve_with_beam(Cube(data, wcs, JY_PER_PIXEL), BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg))
    >>> observed.unit, round(float(observed.data.max()), 6)
    (Unit("Jy / beam"), 2.0)
    """
    _require_beam_spec(beam, "beam")
    if not cube.unit.is_equivalent(JY_PER_PIXEL):
        raise ValueError(f"the cube must be in Jy/pixel (JY_PER_PIXEL) before the beam; got {cube.unit}")
    matrix = _celestial_pixel_matrix(cube.wcs)
    kernel = _kernel_from_covariance(_pixel_covariance(beam, matrix))
    pixel_area = abs(np.linalg.det(matrix)) * u.deg**2
    scale = float((beam.solid_angle / pixel_area).to_value(u.dimensionless_unscaled)) * cube.unit.to(JY_PER_PIXEL)
    if out is None:
        out = np.empty(cube.data.shape, dtype=np.float32)
    elif out.dtype != np.float32 or out.shape != cube.data.shape:
        raise ValueError(f"'out' must be a float32 array of shape {cube.data.shape}; "
                         f"got {out.dtype} of shape {out.shape}")
    _convolve_planes(cube.data, kernel, out, scale=scale, threads=threads)
    return Cube(out, cube.wcs.deepcopy(), _JY_PER_BEAM, beam=beam, provenance=dict(cube.provenance))


def jy_per_beam_to_kelvin(frequency, beam) -> u.Quantity:
    """Return the Rayleigh-Jeans brightness temperature of 1 Jy/beam.

    Parameters
    ----------
    frequency : `~astropy.units.Quantity` ['frequency']
        Observed frequency, any shape.
    beam : `BeamSpec`
        The beam.

    Returns
    -------
    `~astropy.units.Quantity`, same shape as ``frequency``
        In K / (Jy/beam); multiply a Jy/beam value by it to get K.

    Raises
    ------
    TypeError
        If ``beam`` is not a `BeamSpec`.
    ValueError
        If a frequency is not finite and positive.

    Notes
    -----
    T_B = c^2 S / (2 k_B nu^2 Omega_beam) (check-values HI-07), through astropy's
    ``brightness_temperature`` equivalency.

    Examples
    --------
    >>> import astropy.units as u
    >>> factor = jy_per_beam_to_kelvin(1420.405751768 * u.MHz, BeamSpec(30 * u.arcsec, 20 * u.arcsec, 0 * u.deg))
    >>> print(f"{(1 * u.mJy / u.beam * factor).to(u.K):.6f}")
    1.009573 K
    """
    _require_beam_spec(beam, "beam")
    nu_hz = _strip(frequency, u.Hz, name="frequency")
    if not np.all(np.isfinite(nu_hz) & (nu_hz > 0.0)):
        raise ValueError(f"'frequency' must be finite and positive, e.g. '1.4 GHz'; got {frequency!r}")
    equivalency = u.brightness_temperature(nu_hz * u.Hz, beam_area=beam.solid_angle)
    kelvin = (1.0 * _JY_PER_BEAM).to_value(u.K, equivalencies=equivalency)
    return kelvin * (u.K / _JY_PER_BEAM)


def _channel_frequencies(wcs, n_chan) -> u.Quantity:
    """Return each channel's frequency from the WCS spectral axis (FREQ, VRAD or any WCSLIB type)."""
    wcs = wcs.deepcopy()
    wcs.wcs.set()
    if wcs.wcs.spec != 2:
        raise ValueError(f"the cube WCS must have a spectral third axis; got CTYPE = {list(wcs.wcs.ctype)}")
    coordinate = wcs.spectral.pixel_to_world(np.arange(n_chan, dtype=np.float64))
    try:
        return u.Quantity(coordinate.to(u.Hz))
    except (ValueError, u.UnitConversionError) as err:
        raise ValueError(f"cannot turn the spectral axis {wcs.wcs.ctype[2]!r} into frequencies; "
                         f"a velocity axis needs RESTFRQ in the header") from err


def cube_to_kelvin(cube, *, in_place=False) -> Cube:
    """Return a Jy/beam cube in brightness temperature (K), channel by channel.

    Parameters
    ----------
    cube : `~pipeline.cube.Cube`
        Cube in Jy/beam (or a multiple) with ``beam`` set and a spectral third
        WCS axis (FREQ, VRAD or any type WCSLIB can turn into frequency).
    in_place : bool
        Scale the cube's own float array channel by channel instead of making a
        copy (for a cube too large for a second copy).

    Returns
    -------
    `~pipeline.cube.Cube`
        New cube in K with the same WCS (copied), beam and provenance.

    Raises
    ------
    TypeError
        If the cube's beam is not a `BeamSpec`.
    ValueError
        If the cube is not in Jy/beam or its spectral axis gives no frequency.

    Notes
    -----
    Each channel uses :func:`jy_per_beam_to_kelvin` at its own observed frequency
    (check-values HI-07).
    """
    if not cube.unit.is_equivalent(_JY_PER_BEAM):
        raise ValueError(f"the cube must be in Jy/beam to convert to K; got {cube.unit}")
    _require_beam_spec(cube.beam, "cube.beam")
    frequency = _channel_frequencies(cube.wcs, cube.data.shape[0])
    factor = (jy_per_beam_to_kelvin(frequency, cube.beam) * cube.unit).to_value(u.K)
    if in_place:
        data = cube.data
        for k, plane in enumerate(data):
            plane *= factor[k]
    else:
        data = (cube.data * factor[:, np.newaxis, np.newaxis]).astype(
            np.result_type(cube.data.dtype, np.float32), copy=False)
    return Cube(data, cube.wcs.deepcopy(), u.K, beam=cube.beam, provenance=dict(cube.provenance))
