"""Thermal noise: radiometer sensitivities and noise added to a Jy/beam cube.

Conventions
-----------
``channel_width`` is a frequency width; the noise is quoted per channel, in
Jy/beam, for Stokes I from ``n_polarisations`` combined polarisations.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
import scipy.fft

from pipeline.cube import Cube
from ._beam import (_JY_PER_BEAM, _celestial_pixel_matrix, _kernel_from_covariance, for_each_channel,
                    _kernel_spectrum, _padded_shape, _pixel_covariance, _require_beam_spec, _strip)

__all__ = ["single_dish_rms", "interferometer_rms", "add_thermal_noise"]


def _positive(value, unit, name, example) -> np.ndarray:
    """Return a Quantity in ``unit`` as float64, refusing values that are not finite and > 0."""
    stripped = _strip(value, unit, name=name)
    if not np.all(np.isfinite(stripped) & (stripped > 0.0)):
        raise ValueError(f"'{name}' must be finite and positive, e.g. '{example}'; got {value!r}")
    return stripped


def _efficiency(value, name) -> float:
    """Return an efficiency in (0, 1]."""
    is_number = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
    if not (is_number and 0.0 < value <= 1.0):
        raise ValueError(f"'{name}' must be a number in (0, 1], e.g. 0.7; got {value!r}")
    return float(value)


def _count(value, name, *, minimum, maximum=None) -> int:
    """Return an integer count within [minimum, maximum]."""
    if (isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum
            or (maximum is not None and value > maximum)):
        allowed = f"from {minimum} to {maximum}" if maximum is not None else f">= {minimum}"
        raise ValueError(f"'{name}' must be an integer {allowed}, e.g. {minimum + 1}; got {value!r}")
    return int(value)


def _sefd_jy(system_temperature, dish_diameter, aperture_efficiency) -> np.ndarray:
    """System-equivalent flux density 2 k_B T_sys / A_eff, A_eff = eta_A pi D^2 / 4 (check-values RS-02), in Jy."""
    t_sys_k = _positive(system_temperature, u.K, "system_temperature", "25 K")
    diameter_m = _positive(dish_diameter, u.m, "dish_diameter", "15 m")
    efficiency = _efficiency(aperture_efficiency, "aperture_efficiency")
    effective_area = efficiency * np.pi * diameter_m**2 / 4.0 * u.m**2
    return (2.0 * const.k_B * t_sys_k * u.K / effective_area).to_value(u.Jy)


def _bandwidth_time(channel_width, integration_time) -> np.ndarray:
    """Return Δnu t (dimensionless) from a frequency width and a time."""
    width_hz = _positive(channel_width, u.Hz, "channel_width", "10 kHz")
    time_s = _positive(integration_time, u.s, "integration_time", "4 h")
    return width_hz * time_s


def single_dish_rms(*, system_temperature, dish_diameter, aperture_efficiency, n_polarisations,
                    channel_width, integration_time) -> u.Quantity:
    """Return the per-channel flux-density noise of a single dish.

    Parameters
    ----------
    system_temperature : `~astropy.units.Quantity` ['temperature']
    dish_diameter : `~astropy.units.Quantity` ['length']
    aperture_efficiency : float
        In (0, 1].
    n_polarisations : int
        Polarisations combined, 1 or 2.
    channel_width : `~astropy.units.Quantity` ['frequency']
    integration_time : `~astropy.units.Quantity` ['time']

    Returns
    -------
    `~astropy.units.Quantity`
        sigma_S in Jy/beam.

    Raises
    ------
    ValueError
        If a value is out of range (not positive, efficiency above 1, ...).
    astropy.units.UnitsError
        If a Quantity has the wrong physical type (e.g. a velocity channel width).

    Notes
    -----
    sigma_S = SEFD / sqrt(n_pol Δnu t) with SEFD = 2 k_B T_sys / (eta_A pi D^2 / 4)
    (check-values RS-01, RS-02; ideal total-power receiver, K = 1).

    Examples
    --------
    >>> import astropy.units as u
    >>> rms = single_dish_rms(system_temperature=25 * u.K, dish_diameter=15 * u.m, aperture_efficiency=0.7,
    ...                       n_polarisations=2, channel_width=10 * u.kHz, integration_time=60 * u.s)
    >>> print(f"{rms:.6f}")
    0.509439 Jy / beam
    """
    sefd = _sefd_jy(system_temperature, dish_diameter, aperture_efficiency)
    n_pol = _count(n_polarisations, "n_polarisations", minimum=1, maximum=2)
    return sefd / np.sqrt(n_pol * _bandwidth_time(channel_width, integration_time)) * _JY_PER_BEAM


def interferometer_rms(*, system_temperature, dish_diameter, aperture_efficiency, n_antennas, n_polarisations,
                       correlator_efficiency, channel_width, integration_time) -> u.Quantity:
    """Return the per-channel image noise of an array of identical dishes (natural weighting).

    Parameters
    ----------
    system_temperature : `~astropy.units.Quantity` ['temperature']
    dish_diameter : `~astropy.units.Quantity` ['length']
    aperture_efficiency : float
        In (0, 1].
    n_antennas : int
        At least 2.
    n_polarisations : int
        Polarisations combined into Stokes I, 1 or 2.
    correlator_efficiency : float
        System (correlator and quantisation) efficiency eta_s, in (0, 1].
    channel_width : `~astropy.units.Quantity` ['frequency']
    integration_time : `~astropy.units.Quantity` ['time']
        On-source time.

    Returns
    -------
    `~astropy.units.Quantity`
        sigma_I in Jy/beam.

    Raises
    ------
    ValueError
        If a value is out of range.
    astropy.units.UnitsError
        If a Quantity has the wrong physical type.

    Notes
    -----
    sigma_I = SEFD / (eta_s sqrt(n_pol N (N - 1) Δnu t)) (check-values RS-03;
    Thompson, Moran & Swenson 2017).  Weighting other than natural, tapering and
    flagging raise the noise and are not included.

    Examples
    --------
    >>> import astropy.units as u
    >>> rms = interferometer_rms(system_temperature=25 * u.K, dish_diameter=15 * u.m, aperture_efficiency=0.7,
    ...                          n_antennas=64, n_polarisations=2, correlator_efficiency=1.0,
    ...                          channel_width=10 * u.kHz, integration_time=4 * u.h)
    >>> print(f"{rms.to(u.mJy / u.beam):.4f}")
    0.5179 mJy / beam
    """
    sefd = _sefd_jy(system_temperature, dish_diameter, aperture_efficiency)
    n_ant = _count(n_antennas, "n_antennas", minimum=2)
    n_pol = _count(n_polarisations, "n_polarisations", minimum=1, maximum=2)
    eta_s = _efficiency(correlator_efficiency, "correlator_efficiency")
    products = n_pol * n_ant * (n_ant - 1) * _bandwidth_time(channel_width, integration_time)
    return sefd / (eta_s * np.sqrt(products)) * _JY_PER_BEAM


def _channel_generators(seed, first_channel, n_chan):
    """One generator per channel, keyed by (seed, absolute channel index), so slabs match the whole cube."""
    return [np.random.default_rng([seed, first_channel + k]) for k in range(n_chan)]


def _correlated_noise_maker(array_shape, kernel):
    """Return ``make(generator)``: one channel of unit-variance noise correlated on ``kernel``.

    White noise is drawn on a padded grid, convolved (single-precision FFTs) and
    cropped, so no pixel sees wrapped-around noise.
    """
    _, n_y, n_x = array_shape
    padded = _padded_shape((n_y, n_x), kernel.shape)
    # White noise of unit variance through a kernel K has variance sum(K^2).
    spectrum = _kernel_spectrum(kernel, padded, dtype=np.float32) / np.float32(np.sqrt(np.sum(kernel**2)))
    half_y, half_x = kernel.shape[0] // 2, kernel.shape[1] // 2

    def make(generator):
        transformed = scipy.fft.rfft2(generator.standard_normal(padded).astype(np.float32))
        transformed *= spectrum
        return scipy.fft.irfft2(transformed, s=padded)[half_y:half_y + n_y, half_x:half_x + n_x]

    return make


def add_thermal_noise(cube, *, rms, seed, correlate_on_beam=True, first_channel=0, threads=None,
                      in_place=False) -> Cube:
    """Return a copy of a Jy/beam cube with Gaussian thermal noise added.

    Parameters
    ----------
    cube : `~pipeline.cube.Cube`
        Cube in Jy/beam (or a multiple); it must carry its beam when
        ``correlate_on_beam`` is true.
    rms : `~astropy.units.Quantity`
        Expected noise rms per channel, in Jy/beam (e.g. from
        :func:`interferometer_rms`).
    seed : int
        Seed of the noise; the same seed gives the same noise.  Channel k is
        drawn from ``numpy.random.default_rng([seed, first_channel + k])``.
    correlate_on_beam : bool
        Smooth the noise with the beam, as in a restored image; otherwise each
        pixel is independent.
    first_channel : int
        Index of the cube's first channel within the full band, so that a cube
        made in channel slabs gets exactly the noise of the cube made whole.
    threads : int, optional
        Threads that make channels side by side (all cores by default); the
        noise does not depend on it.
    in_place : bool
        Add the noise to the cube's own float array instead of a copy.

    Returns
    -------
    `~pipeline.cube.Cube`
        New cube; its provenance gains ``noise_rms_jy_per_beam``, ``noise_seed``
        and ``noise_correlated_on_beam``.

    Raises
    ------
    ValueError
        If the cube is not in Jy/beam, ``rms`` is not positive, ``seed`` is not
        a non-negative integer, or a beam is needed and missing.
    TypeError
        If the cube's beam is not a `~pipeline.instrument.BeamSpec`.

    Notes
    -----
    White noise N(0, 1) is drawn channel by channel on the beam-convolution's
    padded grid, convolved with the unit-sum beam kernel K, cropped so that no
    pixel sees wrapped-around noise, and multiplied by rms / sqrt(sum K^2).  The
    expected per-channel rms is then exactly ``rms``; the noise is never rescaled
    by its measured rms.
    """
    if not cube.unit.is_equivalent(_JY_PER_BEAM):
        raise ValueError(f"the cube must be in Jy/beam to add thermal noise; got {cube.unit} "
                         f"(apply convolve_with_beam first)")
    rms_jy = _strip(rms, cube.unit, name="rms")
    if rms_jy.ndim != 0 or not (np.isfinite(rms_jy) and rms_jy > 0.0):
        raise ValueError(f"'rms' must be one finite positive value, e.g. '0.5 mJy/beam'; got {rms!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"'seed' must be a non-negative integer, e.g. 1; got {seed!r}")
    if isinstance(first_channel, bool) or not isinstance(first_channel, (int, np.integer)) or first_channel < 0:
        raise ValueError(f"'first_channel' must be a non-negative integer, e.g. 0; got {first_channel!r}")
    generators = _channel_generators(int(seed), int(first_channel), cube.data.shape[0])
    if correlate_on_beam:
        if cube.beam is None:
            raise ValueError("the cube has no beam to correlate the noise on; apply convolve_with_beam first "
                             "or pass correlate_on_beam=False")
        _require_beam_spec(cube.beam, "cube.beam")
        covariance = _pixel_covariance(cube.beam, _celestial_pixel_matrix(cube.wcs))
        make_noise = _correlated_noise_maker(cube.data.shape, _kernel_from_covariance(covariance))
    else:
        def make_noise(generator):
            return generator.standard_normal(cube.data.shape[1:])
    data = cube.data if in_place else np.array(cube.data, dtype=np.result_type(cube.data.dtype, np.float32))

    def add_channel(k):
        data[k] += float(rms_jy) * make_noise(generators[k])

    for_each_channel(data.shape[0], add_channel, threads=threads)
    provenance = {**cube.provenance,
                  "noise_rms_jy_per_beam": float(_strip(rms, _JY_PER_BEAM, name="rms")),
                  "noise_seed": int(seed),
                  "noise_correlated_on_beam": bool(correlate_on_beam)}
    return Cube(data, cube.wcs.deepcopy(), cube.unit, beam=cube.beam, provenance=provenance)
