"""The 21-cm line in the optically thin limit: HI masses, fluxes and column densities.

Conventions
-----------
Every HI constant here is derived, with `astropy.constants`, from two adopted
numbers:

* the Einstein coefficient A_10 = 2.8843e-15 s^-1 (Gould 1994; check-values
  HI-02), which includes the anomalous electron moment and the proton moment;
* the hydrogen-atom mass m_H = 1.007825032 u (check-values, constants).

With this A_10 the classical rounded constants 1.823e18 cm^-2 (K km/s)^-1 and
2.356e5 Msun Mpc^-2 (Jy km/s)^-1 become 1.8127e18 and 2.3435e5, 0.54 % lower
(check-values, "Known disagreements" 1).  A velocity integral is over radio
velocity about the rest frequency, v = c (nu_0 - nu) / nu_0, so
dv = c dnu_obs / nu_0 whatever the redshift (check-values HI-10, HI-13).
"""

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.units import HI_REST_FREQUENCY, strip_units

__all__ = [
    "EINSTEIN_A_HI",
    "hi_mass",
    "hi_flux_integral",
    "hi_mass_from_flux",
    "column_density_from_brightness",
    "column_density_from_flux",
    "thermal_dispersion",
    "hi_weights_jy_hz",
]

#: Einstein A coefficient of the 21-cm transition (Gould 1994; check-values HI-02).
EINSTEIN_A_HI = 2.8843e-15 / u.s

_HYDROGEN_ATOM_MASS = 1.007825032 * const.u
_JY_PER_BEAM = u.Jy / u.beam
_JY_KMS = u.Jy * u.km / u.s
_JY_HZ = u.Jy * u.Hz

# N_HI = C_T ∫T_B dv with C_T = 32 pi k_B nu_0^2 / (3 h c^3 A_10) (check-values HI-03).
_COLUMN_PER_BRIGHTNESS = (32 * np.pi * const.k_B * HI_REST_FREQUENCY**2
                          / (3 * const.h * const.c**3 * EINSTEIN_A_HI)).to(u.cm**-2 / (u.K * u.km / u.s))
# M_HI = K_nu D_L^2 ∫S dnu_obs with K_nu = 16 pi m_H / (3 h nu_0 A_10) (check-values HI-13).
_MASS_PER_FLUX_HZ = (16 * np.pi * _HYDROGEN_ATOM_MASS
                     / (3 * const.h * HI_REST_FREQUENCY * EINSTEIN_A_HI)).to(u.Msun / (u.Mpc**2 * _JY_HZ))
# The same with dnu_obs = nu_0 dv / c: K_M = 16 pi m_H / (3 h c A_10) (check-values HI-06).
_MASS_PER_FLUX_KMS = (_MASS_PER_FLUX_HZ * HI_REST_FREQUENCY / const.c).to(u.Msun / (u.Mpc**2 * _JY_KMS))
_MASS_PER_FLUX_HZ_MSUN = float(_MASS_PER_FLUX_HZ.to_value(u.Msun / (u.Mpc**2 * _JY_HZ)))


def _strip(value, unit, *, name) -> np.ndarray:
    """``strip_units`` keeping the input's shape (0-d for a scalar)."""
    return strip_units(value, unit, name=name).reshape(np.shape(value))


def _as_fraction(value, name) -> np.ndarray:
    """Return a mass fraction as a float64 array, refusing values outside [0, 1]."""
    if isinstance(value, u.Quantity):
        value = _strip(value, u.dimensionless_unscaled, name=name)
    fraction = np.asarray(value, dtype=np.float64)
    if not np.all((fraction >= 0.0) & (fraction <= 1.0)):
        bad = fraction[~((fraction >= 0.0) & (fraction <= 1.0))]
        raise ValueError(f"'{name}' must lie in [0, 1], e.g. 0.76; got {float(bad.flat[0]):g}"
                         + (f" and {bad.size - 1} more value(s) outside" if bad.size > 1 else ""))
    return fraction


def _as_positive(value, unit, name) -> np.ndarray:
    """Return a Quantity in ``unit`` as float64, refusing values that are not finite and > 0."""
    stripped = _strip(value, unit, name=name)
    if not np.all(np.isfinite(stripped) & (stripped > 0.0)):
        raise ValueError(f"'{name}' must be finite and positive, e.g. '10 {unit}'; got {value!r}")
    return stripped


def _hydrogen_atomic_share(hydrogen_fraction, neutral_fraction, molecular_fraction) -> np.ndarray:
    """Return X f_n (1 - f_H2) from validated fractions (f_H2 = 0 when None)."""
    share = (_as_fraction(hydrogen_fraction, "hydrogen_fraction")
             * _as_fraction(neutral_fraction, "neutral_fraction"))
    if molecular_fraction is not None:
        share = share * (1.0 - _as_fraction(molecular_fraction, "molecular_fraction"))
    return share


def hi_mass(mass, *, hydrogen_fraction, neutral_fraction, molecular_fraction=None) -> u.Quantity:
    """Return the atomic-hydrogen mass of gas elements.

    Parameters
    ----------
    mass : `~astropy.units.Quantity` ['mass'], shape (n_particles,) or scalar
        Gas mass of each element.
    hydrogen_fraction : float or array-like, broadcastable to ``mass``
        Hydrogen mass fraction X (0.76 primordial, 0.7381 solar).
    neutral_fraction : float or array-like, broadcastable to ``mass``
        Neutral fraction f_n of the hydrogen (atomic plus molecular).
    molecular_fraction : float or array-like, optional
        Fraction f_H2 of the neutral hydrogen that is molecular; none when omitted.

    Returns
    -------
    `~astropy.units.Quantity` ['mass']
        M_HI in Msun.

    Raises
    ------
    ValueError
        If a fraction lies outside [0, 1].
    astropy.units.UnitsError
        If ``mass`` is not a mass Quantity.

    Notes
    -----
    M_HI = X f_n (1 - f_H2) m (check-values H2-08, common practice).

    Examples
    --------
    >>> import astropy.units as u
    >>> hi_mass(1e5 * u.Msun, hydrogen_fraction=0.76, neutral_fraction=0.5, molecular_fraction=0.2)
    <Quantity 30400. solMass>
    """
    mass_msun = _strip(mass, u.Msun, name="mass")
    share = _hydrogen_atomic_share(hydrogen_fraction, neutral_fraction, molecular_fraction)
    return mass_msun * share * u.Msun


def hi_flux_integral(hi_mass, luminosity_distance) -> u.Quantity:
    """Return the frequency-integrated 21-cm flux ∫S dnu_obs of optically thin HI.

    Parameters
    ----------
    hi_mass : `~astropy.units.Quantity` ['mass']
        Atomic-hydrogen mass (any shape).
    luminosity_distance : `~astropy.units.Quantity` ['length']
        Luminosity distance (equal to the distance for a nearby source).

    Returns
    -------
    `~astropy.units.Quantity`
        ∫S dnu_obs in Jy Hz, over observed frequency.

    Raises
    ------
    ValueError
        If ``luminosity_distance`` is not finite and positive.

    Notes
    -----
    Inverts M_HI = K_nu D_L^2 ∫S dnu_obs with K_nu = 16 pi m_H / (3 h nu_0 A_10)
    = 49.4617 Msun Mpc^-2 (Jy Hz)^-1; this frequency form has no (1 + z) factor
    (check-values HI-13, Meyer et al. 2017).

    Examples
    --------
    >>> import astropy.units as u
    >>> print(f"{hi_flux_integral(1e9 * u.Msun, 10 * u.Mpc):.2f}")
    202176.59 Hz Jy
    """
    mass_msun = _strip(hi_mass, u.Msun, name="hi_mass")
    distance_mpc = _as_positive(luminosity_distance, u.Mpc, "luminosity_distance")
    return mass_msun / (_MASS_PER_FLUX_HZ_MSUN * distance_mpc**2) * _JY_HZ


def hi_mass_from_flux(integrated_flux, distance) -> u.Quantity:
    """Return the HI mass that emits a given integrated 21-cm flux (optically thin).

    Parameters
    ----------
    integrated_flux : `~astropy.units.Quantity`
        Either ∫S dnu_obs (e.g. Jy Hz) over observed frequency, or ∫S dv (e.g.
        Jy km/s) over radio velocity about the rest frequency, v = c (nu_0 - nu) / nu_0.
    distance : `~astropy.units.Quantity` ['length']
        Luminosity distance (equal to the distance for a nearby source).

    Returns
    -------
    `~astropy.units.Quantity` ['mass']
        M_HI in Msun.

    Raises
    ------
    astropy.units.UnitsError
        If ``integrated_flux`` is neither a flux density times a frequency nor
        times a velocity.
    ValueError
        If ``distance`` is not finite and positive.

    Notes
    -----
    Frequency form M_HI = K_nu D_L^2 ∫S dnu_obs, K_nu = 49.4617 (check-values
    HI-13). A velocity integral over radio velocity about nu_0 is c / nu_0 times
    the frequency integral, so M_HI = K_M D_L^2 ∫S dv with K_M = 2.34348e5 and no
    (1 + z) factor at any redshift (check-values HI-06; HI-13, third velocity
    form). A width measured in the source rest frame or as an optical velocity
    c dz must be converted to observed frequency first (HI-13, first two forms).

    Examples
    --------
    >>> import astropy.units as u
    >>> print(f"{hi_mass_from_flux(1 * u.Jy * u.km / u.s, 10 * u.Mpc):.4e}")
    2.3435e+07 solMass
    """
    distance_mpc = _as_positive(distance, u.Mpc, "distance")
    if isinstance(integrated_flux, u.Quantity) and integrated_flux.unit.is_equivalent(_JY_KMS):
        coefficient = _MASS_PER_FLUX_KMS
        flux = _strip(integrated_flux, _JY_KMS, name="integrated_flux")
    elif isinstance(integrated_flux, u.Quantity) and integrated_flux.unit.is_equivalent(_JY_HZ):
        coefficient = _MASS_PER_FLUX_HZ
        flux = _strip(integrated_flux, _JY_HZ, name="integrated_flux")
    else:
        raise u.UnitsError(f"'integrated_flux' must be in Jy km/s (radio velocity) or Jy Hz, "
                           f"e.g. '1.5 Jy km/s'; got {integrated_flux!r}")
    return coefficient.value * distance_mpc**2 * flux * u.Msun


def column_density_from_brightness(integrated_tb) -> u.Quantity:
    """Return the HI column density from a velocity-integrated brightness temperature.

    Parameters
    ----------
    integrated_tb : `~astropy.units.Quantity`
        ∫T_B dv (e.g. K km/s) over radio velocity, any shape (a moment-0 map).

    Returns
    -------
    `~astropy.units.Quantity` ['column density']
        N_HI in cm^-2.

    Raises
    ------
    astropy.units.UnitsError
        If ``integrated_tb`` is not a temperature times a velocity.

    Notes
    -----
    Optically thin: N_HI = C_T ∫T_B dv, C_T = 32 pi k_B nu_0^2 / (3 h c^3 A_10)
    = 1.81271e18 cm^-2 (K km/s)^-1 for A_10 = 2.8843e-15 s^-1 (check-values HI-03;
    Dickey & Lockman 1990 quote 1.823e18 for the older A_10).

    Examples
    --------
    >>> import astropy.units as u
    >>> print(f"{column_density_from_brightness(100 * u.K * u.km / u.s):.5e}")
    1.81271e+20 1 / cm2
    """
    integral = _strip(integrated_tb, u.K * u.km / u.s, name="integrated_tb")
    return integral * _COLUMN_PER_BRIGHTNESS.value * u.cm**-2


def column_density_from_flux(moment0, beam, *, redshift=0.0) -> u.Quantity:
    """Return the HI column density from a moment-0 map in Jy/beam.

    Parameters
    ----------
    moment0 : `~astropy.units.Quantity`
        ∫S dv in Jy/beam km/s over radio velocity about nu_0, or ∫S dnu_obs in
        Jy/beam Hz over observed frequency; any shape.
    beam : `~pipeline.instrument.BeamSpec`
        The beam the map is in (anything with a ``solid_angle`` Quantity).
    redshift : float
        Cosmological redshift z of the gas (surface-brightness dimming).

    Returns
    -------
    `~astropy.units.Quantity` ['column density']
        N_HI in cm^-2.

    Raises
    ------
    astropy.units.UnitsError
        If ``moment0`` is neither Jy/beam km/s nor Jy/beam Hz.
    ValueError
        If ``redshift`` is not a finite number >= 0.

    Notes
    -----
    N_HI = C_T c^3 (1 + z)^4 ∫S dnu_obs / (2 k_B nu_0^3 Omega_beam) (check-values
    HI-14, Meyer et al. 2017); with dnu_obs = nu_0 dv / c this is
    C_T c^2 (1 + z)^4 ∫S dv / (2 k_B nu_0^2 Omega_beam), which at z = 0 is the
    Rayleigh-Jeans conversion of HI-07 times HI-03 (check-values HI-08).

    Examples
    --------
    >>> import astropy.units as u
    >>> from pipeline.instrument import BeamSpec
    >>> beam = BeamSpec(30 * u.arcsec, 30 * u.arcsec, 0 * u.deg)
    >>> print(f"{column_density_from_flux(1 * u.Jy / u.beam * u.km / u.s, beam):.5e}")
    1.22004e+21 1 / cm2
    """
    if not (np.ndim(redshift) == 0 and np.isfinite(redshift) and redshift >= 0):
        raise ValueError(f"'redshift' must be a finite number >= 0, e.g. 0.1; got {redshift!r}")
    omega_sr = _strip(beam.solid_angle, u.sr, name="beam.solid_angle")
    if isinstance(moment0, u.Quantity) and moment0.unit.is_equivalent(_JY_PER_BEAM * u.km / u.s):
        integral_hz = (_strip(moment0, _JY_PER_BEAM * u.km / u.s, name="moment0")
                       * (HI_REST_FREQUENCY / const.c).to_value(u.Hz / (u.km / u.s)))
    elif isinstance(moment0, u.Quantity) and moment0.unit.is_equivalent(_JY_PER_BEAM * u.Hz):
        integral_hz = _strip(moment0, _JY_PER_BEAM * u.Hz, name="moment0")
    else:
        raise u.UnitsError(f"'moment0' must be in Jy/beam km/s (radio velocity) or Jy/beam Hz, "
                           f"e.g. '0.3 Jy km s-1 beam-1'; got {moment0!r}")
    # Per beam, S/Omega_beam is the specific intensity; T_B = c^2 I / (2 k_B nu_0^2) (HI-07).
    coefficient = (_COLUMN_PER_BRIGHTNESS * const.c**3 / (2 * const.k_B * HI_REST_FREQUENCY**3)
                   * u.Jy * u.Hz / u.sr).to_value(u.cm**-2, equivalencies=u.dimensionless_angles())
    return coefficient * (1.0 + redshift)**4 * integral_hz / omega_sr * u.cm**-2


def thermal_dispersion(temperature) -> u.Quantity:
    """Return the one-dimensional thermal velocity dispersion of hydrogen atoms.

    Parameters
    ----------
    temperature : `~astropy.units.Quantity` ['temperature']
        Kinetic temperature, any shape.

    Returns
    -------
    `~astropy.units.Quantity` ['speed']
        sigma_th in km/s (FWHM = sqrt(8 ln 2) sigma_th).

    Raises
    ------
    ValueError
        If a temperature is negative or not finite.

    Notes
    -----
    sigma_th = sqrt(k_B T / m_H) with the hydrogen-atom mass m_H = 1.007825032 u
    (check-values HI-09; Spitzer 1978).

    Examples
    --------
    >>> import astropy.units as u
    >>> print(f"{thermal_dispersion(100 * u.K):.5f}")
    0.90829 km / s
    """
    temperature_k = _strip(temperature, u.K, name="temperature")
    if not np.all(np.isfinite(temperature_k) & (temperature_k >= 0.0)):
        raise ValueError(f"'temperature' must be finite and >= 0 K, e.g. '8000 K'; got {temperature!r}")
    kms2_per_k = (const.k_B / _HYDROGEN_ATOM_MASS).to_value(u.km**2 / u.s**2 / u.K)
    return np.sqrt(kms2_per_k * temperature_k) * u.km / u.s


def hi_weights_jy_hz(mass_msun, hydrogen_fraction, neutral_fraction, molecular_fraction,
                     luminosity_distance_mpc) -> np.ndarray:
    """Return each particle's 21-cm flux integral ∫S dnu_obs in Jy Hz (plain arrays).

    Parameters
    ----------
    mass_msun : numpy.ndarray, shape (n_particles,)
        Gas mass in Msun.
    hydrogen_fraction : numpy.ndarray or float, broadcastable to ``mass_msun``
        Hydrogen mass fraction X.
    neutral_fraction : numpy.ndarray or float, broadcastable to ``mass_msun``
        Neutral fraction of the hydrogen (atomic plus molecular).
    molecular_fraction : numpy.ndarray, float or None
        Molecular fraction of the neutral hydrogen; None means no molecular gas.
    luminosity_distance_mpc : float
        Luminosity distance in Mpc.

    Returns
    -------
    numpy.ndarray, float64, shape (n_particles,)
        X f_n (1 - f_H2) m / (K_nu D_L^2) in Jy Hz.

    Raises
    ------
    ValueError
        If a fraction lies outside [0, 1] or the distance is not finite and positive.

    Notes
    -----
    Same relation as :func:`hi_mass` followed by :func:`hi_flux_integral`
    (check-values H2-08 and HI-13), without Quantities, for the gridding loop.

    Examples
    --------
    >>> import numpy as np
    >>> hi_weights_jy_hz(np.array([1e9]), 1.0, 1.0, None, 10.0).round(2)
    array([202176.59])
    """
    distance_mpc = float(luminosity_distance_mpc)
    if not (np.isfinite(distance_mpc) and distance_mpc > 0.0):
        raise ValueError(f"'luminosity_distance_mpc' must be finite and positive, e.g. 10.0; "
                         f"got {luminosity_distance_mpc!r}")
    share = _hydrogen_atomic_share(hydrogen_fraction, neutral_fraction, molecular_fraction)
    mass = np.asarray(mass_msun, dtype=np.float64)
    return np.ascontiguousarray(mass * share / (_MASS_PER_FLUX_HZ_MSUN * distance_mpc**2))
