"""The sky grid: GridSpec, its FITS WCS, and the projection of particles onto it."""

import dataclasses
import numbers

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.wcs import WCS

from ..units import FREQUENCY, HI_REST_FREQUENCY, LENGTH
from ._distance import DistanceSpec

__all__ = ["GridSpec", "make_cube_wcs", "make_image_wcs", "project_to_grid",
           "velocity_dispersion_to_channels"]

_C_KMS = const.c.to_value(u.km / u.s)
_C_MS = const.c.to_value(u.m / u.s)
_NU0_HZ = HI_REST_FREQUENCY.to_value(u.Hz)
_PROJECTIONS = ("SIN", "TAN")
_SPECTRAL_AXES = ("FREQ", "VRAD")


def _check_count(name, value):
    """Refuse anything but a positive int."""
    if not (isinstance(value, numbers.Integral) and not isinstance(value, bool) and value >= 1):
        raise ValueError(f"'{name}' must be an integer >= 1, e.g. 64; got {value!r}")
    return int(value)


def _check_scalar(name, value, physical_type, example, *, positive=False):
    """Refuse anything but a finite scalar Quantity of ``physical_type`` (and > 0 if asked)."""
    if not (isinstance(value, u.Quantity) and value.unit.physical_type == physical_type
            and value.isscalar and np.isfinite(value.value) and (value.value > 0 or not positive)):
        rule = f"a positive {physical_type}" if positive else f"a finite {physical_type}"
        raise ValueError(f"'{name}' must be {rule}, e.g. '{example}'; got {value!r}")
    return value


@dataclasses.dataclass(frozen=True, kw_only=True)
class GridSpec:
    """The pixel and channel grid of a cube on the sky.

    Parameters
    ----------
    n_x, n_y, n_chan : int
        Pixels along right ascension and declination, and spectral channels.
    pixel_scale : `~astropy.units.Quantity` ['angle']
        Pixel size on the sky (square pixels).
    ra, dec : `~astropy.units.Quantity` ['angle']
        ICRS direction of the grid centre (stored as degrees, ``ra`` in [0, 360)).
    centre_frequency : `~astropy.units.Quantity` ['frequency']
        Frequency at the centre of the spectral axis, i.e. of channel
        (n_chan - 1) / 2 (0-based; a half-integer for an even count).
    channel_width : `~astropy.units.Quantity` ['frequency']
        Channel width in frequency (> 0); use `GridSpec.from_channel_width` to
        give it as a radio velocity.
    projection : {"SIN", "TAN"}
        Celestial projection (Calabretta & Greisen 2002, A&A 395, 1077).
    spectral_axis : {"FREQ", "VRAD"}
        Quantity along the written spectral axis.  Along a FREQ axis the
        frequency increases with channel index; along a VRAD axis the radio
        velocity about the HI rest frequency increases, so the frequency
        decreases.

    Raises
    ------
    ValueError
        If a count is not a positive integer, a Quantity has the wrong kind or
        sign, ``dec`` lies outside [-90, 90] deg, or a choice is unknown.

    Examples
    --------
    >>> import astropy.units as u
    >>> grid = GridSpec.from_channel_width(n_x=37, n_y=24, n_chan=11, pixel_scale=3 * u.arcsec,
    ...                                    ra=150 * u.deg, dec=30 * u.deg,
    ...                                    centre_frequency=1.4 * u.GHz, channel_width=10 * u.kHz)
    >>> grid.array_shape
    (11, 24, 37)
    >>> grid.velocity_channel_width.round(6)
    <Quantity 2.110611 km / s>
    """

    n_x: int
    n_y: int
    n_chan: int
    pixel_scale: u.Quantity
    ra: u.Quantity
    dec: u.Quantity
    centre_frequency: u.Quantity
    channel_width: u.Quantity
    projection: str = "SIN"
    spectral_axis: str = "FREQ"

    def __post_init__(self):
        values = {
            "n_x": _check_count("n_x", self.n_x),
            "n_y": _check_count("n_y", self.n_y),
            "n_chan": _check_count("n_chan", self.n_chan),
            "pixel_scale": _check_scalar("pixel_scale", self.pixel_scale, "angle", "10 arcsec",
                                         positive=True),
            "ra": _check_scalar("ra", self.ra, "angle", "150 deg").to(u.deg) % (360 * u.deg),
            "dec": _check_scalar("dec", self.dec, "angle", "30 deg").to(u.deg),
            "centre_frequency": _check_scalar("centre_frequency", self.centre_frequency,
                                              "frequency", "1.4 GHz", positive=True),
            "channel_width": _check_scalar("channel_width", self.channel_width, "frequency",
                                           "10 kHz", positive=True),
        }
        if abs(values["dec"].value) > 90:
            raise ValueError(f"'dec' must lie in [-90, 90] deg; got {self.dec!r}")
        if self.projection not in _PROJECTIONS:
            raise ValueError(f"'projection' must be one of {_PROJECTIONS}; got {self.projection!r}")
        if self.spectral_axis not in _SPECTRAL_AXES:
            raise ValueError(f"'spectral_axis' must be one of {_SPECTRAL_AXES}; got {self.spectral_axis!r}")
        for name, value in values.items():
            object.__setattr__(self, name, value)

    @classmethod
    def from_channel_width(cls, *, n_x, n_y, n_chan, pixel_scale, ra, dec, centre_frequency,
                           channel_width, projection="SIN", spectral_axis="FREQ") -> "GridSpec":
        """Build a GridSpec with the channel width given as a radio velocity or a frequency.

        Parameters
        ----------
        channel_width : `~astropy.units.Quantity` ['speed'] or ['frequency']
            A radio-velocity width about the HI rest frequency nu_0 becomes
            Delta nu = nu_0 Delta v / c (check-values HI-10; WCS Paper III,
            Greisen et al. 2006, A&A 446, 747); a frequency is used as given.
        n_x, n_y, n_chan, pixel_scale, ra, dec, centre_frequency, projection, spectral_axis
            As for `GridSpec`.

        Returns
        -------
        GridSpec

        Raises
        ------
        ValueError
            If ``channel_width`` is neither a positive velocity nor a positive frequency.
        """
        if isinstance(channel_width, u.Quantity) and channel_width.unit.physical_type == "speed":
            _check_scalar("channel_width", channel_width, "speed", "4 km/s", positive=True)
            channel_width = (HI_REST_FREQUENCY * channel_width / const.c).to(u.Hz)
        elif not (isinstance(channel_width, u.Quantity) and channel_width.unit.physical_type == "frequency"):
            raise ValueError(
                f"'channel_width' must be a velocity or frequency, e.g. '2 km/s' or '10 kHz'; got {channel_width!r}")
        return cls(n_x=n_x, n_y=n_y, n_chan=n_chan, pixel_scale=pixel_scale, ra=ra, dec=dec,
                   centre_frequency=centre_frequency, channel_width=channel_width,
                   projection=projection, spectral_axis=spectral_axis)

    @property
    def array_shape(self) -> tuple[int, int, int]:
        """Shape of the cube array in numpy order, (n_chan, n_y, n_x)."""
        return (self.n_chan, self.n_y, self.n_x)

    @property
    def velocity_channel_width(self) -> u.Quantity:
        """Channel width as a radio velocity about the HI rest frequency, c Delta nu / nu_0 (km/s)."""
        return (const.c * self.channel_width / HI_REST_FREQUENCY).to(u.km / u.s)

    @property
    def channel_frequencies(self) -> u.Quantity:
        """Frequency at the centre of each channel (Hz), shape (n_chan,), in channel order.

        Increasing for a FREQ axis, decreasing for a VRAD axis.
        """
        offset = np.arange(self.n_chan) - (self.n_chan - 1) / 2
        step_hz = _channel_step_hz(self)
        return (self.centre_frequency.to_value(u.Hz) + offset * step_hz) * u.Hz


def _channel_step_hz(grid) -> float:
    """Frequency change from one channel to the next (negative along a VRAD axis)."""
    width_hz = float(grid.channel_width.to_value(u.Hz))
    return width_hz if grid.spectral_axis == "FREQ" else -width_hz


def make_cube_wcs(grid: GridSpec) -> WCS:
    """Return the three-axis FITS WCS of ``grid``.

    Parameters
    ----------
    grid : GridSpec

    Returns
    -------
    `~astropy.wcs.WCS`
        Axes RA---SIN/TAN, DEC--SIN/TAN and FREQ (Hz) or VRAD (m/s, radio
        velocity about RESTFRQ), with ``pixel_shape`` (n_x, n_y, n_chan).

    Notes
    -----
    The reference pixel is the grid centre, CRPIX = (n + 1) / 2 in FITS
    1-based pixels (Greisen & Calabretta 2002, A&A 395, 1061), at CRVAL =
    (ra, dec) and the centre frequency.  CDELT1 = -pixel_scale (right
    ascension increases to the left), CDELT2 = +pixel_scale.  LONPOLE is set
    to 180 deg, its default for a zenithal projection away from the celestial
    pole (Calabretta & Greisen 2002), so that the orientation is the same at
    the pole.  RESTFRQ is the HI rest frequency, SPECSYS = 'BARYCENT',
    RADESYS = 'ICRS'.  No EQUINOX: it does not apply to ICRS (WCS Paper II,
    Calabretta & Greisen 2002) and WCSLIB drops it for that frame.
    """
    wcs = WCS(naxis=3)
    scale_deg = float(grid.pixel_scale.to_value(u.deg))
    centre_hz = float(grid.centre_frequency.to_value(u.Hz))
    width_hz = float(grid.channel_width.to_value(u.Hz))
    wcs.wcs.ctype = [f"RA---{grid.projection}", f"DEC--{grid.projection}", grid.spectral_axis]
    if grid.spectral_axis == "FREQ":
        spectral_value, spectral_step, spectral_unit = centre_hz, width_hz, "Hz"
    else:
        spectral_value = _C_MS * (_NU0_HZ - centre_hz) / _NU0_HZ
        spectral_step, spectral_unit = _C_MS * width_hz / _NU0_HZ, "m/s"
    wcs.wcs.crval = [float(grid.ra.to_value(u.deg)), float(grid.dec.to_value(u.deg)), spectral_value]
    wcs.wcs.crpix = [(grid.n_x + 1) / 2, (grid.n_y + 1) / 2, (grid.n_chan + 1) / 2]
    wcs.wcs.cdelt = [-scale_deg, scale_deg, spectral_step]
    wcs.wcs.cunit = ["deg", "deg", spectral_unit]
    wcs.wcs.lonpole = 180.0
    wcs.wcs.restfrq = _NU0_HZ
    wcs.wcs.specsys = "BARYCENT"
    wcs.wcs.radesys = "ICRS"
    wcs.pixel_shape = (grid.n_x, grid.n_y, grid.n_chan)
    wcs.wcs.set()
    return wcs


def make_image_wcs(grid: GridSpec) -> WCS:
    """Return the two-axis celestial WCS of ``grid`` (the sky part of `make_cube_wcs`).

    Parameters
    ----------
    grid : GridSpec

    Returns
    -------
    `~astropy.wcs.WCS`
        Axes RA---SIN/TAN and DEC--SIN/TAN, with ``pixel_shape`` (n_x, n_y).
    """
    return make_cube_wcs(grid).celestial


def _as_vectors(name, values):
    """Return ``values`` as a float64 (n, 3) array or refuse it."""
    array = np.asarray(values, dtype=np.float64)
    if array.ndim != 2 or array.shape[1] != 3:
        raise ValueError(f"'{name}' must have shape (n_particles, 3); got shape {array.shape}")
    return array


def project_to_grid(position_kpc, velocity_kms, *, grid: GridSpec, distances: DistanceSpec):
    """Place oriented particles on the pixel and channel grid of the cube.

    Parameters
    ----------
    position_kpc : numpy.ndarray, shape (n_particles, 3)
        Positions in the observer frame (kpc) relative to the galaxy centre:
        x towards sky east, y towards sky north, z away from the observer.
    velocity_kms : numpy.ndarray, shape (n_particles, 3)
        Velocities in the same frame (km/s), relative to the galaxy's frame;
        v_z > 0 recedes.
    grid : GridSpec
    distances : DistanceSpec
        The galaxy centre lies at the angular-diameter distance D_A in the
        direction (grid.ra, grid.dec), at total redshift ``systemic_redshift``.

    Returns
    -------
    x_pix, y_pix : numpy.ndarray, shape (n_particles,)
        0-based pixel coordinates (pixel i spans i - 0.5 to i + 0.5).
    chan : numpy.ndarray, shape (n_particles,)
        0-based channel coordinate of each particle's observed frequency.
    nu_hz : numpy.ndarray, shape (n_particles,)
        Observed frequency (Hz).
    kpc_to_pix : float
        Pixels per kpc at D_A (for smoothing lengths and widths).

    Raises
    ------
    ValueError
        If an array has the wrong shape, a particle lies at or behind the
        observer (D_A + z <= 0) or moves at or above the speed of light.

    Notes
    -----
    Each particle is seen in its exact direction (x, y, D_A + z) from the
    observer, written in the east/north/line-of-sight frame at the reference
    point.  That frame is the native frame of the zenithal projections with
    the reference point at the native pole and LONPOLE = 180 deg, so the
    intermediate world coordinates are (Calabretta & Greisen 2002, A&A 395,
    1077, Sects. 5.1.3 and 5.1.5): SIN, (x, y) / |r| (orthographic); TAN,
    (x, y) / (D_A + z) (gnomonic); in radians, then divided by CDELT.  This
    is the projection `make_cube_wcs` writes, and it agrees with astropy.wcs
    and WCSLIB.

    The observed frequency is nu = nu_0 / ((1 + z_sys)(1 + z_pec)) with the
    relativistic Doppler factor 1 + z_pec = sqrt((1 + beta) / (1 - beta)),
    beta = v_z / c (redshifts compose multiplicatively; check-values CO-04).
    """
    position_kpc = _as_vectors("position_kpc", position_kpc)
    velocity_kms = _as_vectors("velocity_kms", velocity_kms)
    if position_kpc.shape != velocity_kms.shape:
        raise ValueError(f"'position_kpc' and 'velocity_kms' must have the same shape; "
                         f"got {position_kpc.shape} and {velocity_kms.shape}")
    distance_kpc = float(distances.angular_diameter_distance.to_value(LENGTH))
    line_of_sight_kpc = distance_kpc + position_kpc[:, 2]
    n_behind = int(np.count_nonzero(~(line_of_sight_kpc > 0)))
    if n_behind:
        raise ValueError(f"every particle must lie in front of the observer (D_A + z > 0); "
                         f"got {n_behind} at or behind it with D_A = {distance_kpc:g} kpc: "
                         "increase the distance or reduce the selection radius")
    beta = velocity_kms[:, 2] / _C_KMS
    if not np.all(np.abs(beta) < 1):
        raise ValueError("every particle's line-of-sight speed must be below the speed of light; "
                         f"got up to {np.nanmax(np.abs(velocity_kms[:, 2])):g} km/s")

    if grid.projection == "SIN":
        denominator = np.sqrt(position_kpc[:, 0] ** 2 + position_kpc[:, 1] ** 2 + line_of_sight_kpc ** 2)
    else:
        denominator = line_of_sight_kpc
    scale_rad = float(grid.pixel_scale.to_value(u.rad))
    x_pix = (grid.n_x - 1) / 2 - position_kpc[:, 0] / denominator / scale_rad
    y_pix = (grid.n_y - 1) / 2 + position_kpc[:, 1] / denominator / scale_rad

    one_plus_z_pec = np.sqrt((1 + beta) / (1 - beta))
    nu_hz = _NU0_HZ / ((1 + distances.systemic_redshift) * one_plus_z_pec)
    chan = ((nu_hz - float(grid.centre_frequency.to_value(FREQUENCY))) / _channel_step_hz(grid)
            + (grid.n_chan - 1) / 2)
    kpc_to_pix = 1.0 / distance_kpc / scale_rad
    return x_pix, y_pix, chan, nu_hz, kpc_to_pix


def velocity_dispersion_to_channels(sigma_kms, nu_hz, *, grid: GridSpec):
    """Convert a line-of-sight velocity dispersion to a width in channels.

    Parameters
    ----------
    sigma_kms : numpy.ndarray or float
        One-dimensional velocity dispersion in the emitter's rest frame (km/s),
        per particle or one value for all.
    nu_hz : numpy.ndarray, shape (n_particles,)
        Observed frequency of each particle (Hz), as from `project_to_grid`.
    grid : GridSpec

    Returns
    -------
    numpy.ndarray, shape (n_particles,)
        Gaussian sigma in channels (> 0 where ``sigma_kms`` > 0).

    Notes
    -----
    A rest-frame dispersion sigma_v spreads the emitted frequency by
    nu_0 sigma_v / c; redshifting divides frequencies and their spread alike
    by (1 + z), so the observed spread is sigma_nu = nu sigma_v / c.
    """
    sigma_hz = np.asarray(nu_hz, dtype=np.float64) * np.asarray(sigma_kms, dtype=np.float64) / _C_KMS
    return sigma_hz / float(grid.channel_width.to_value(FREQUENCY))
