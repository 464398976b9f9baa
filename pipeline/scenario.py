"""The demo scenario: an invented gas-rich disc galaxy written as a snapshot.

*Velmora* is not a simulation and not a real galaxy.  It is a seeded, analytic
model: an exponential, rotating gas disc with a few dense clumps and a mild
outer warp, sampled into equal-mass particles and written in the project's own
HDF5 layout, so that ``cubewright demo`` (and the tests) have a realistic input
that needs no download.
"""

import dataclasses
import os
import secrets
from pathlib import Path

import astropy.units as u
import h5py
import numpy as np
from scipy.special import lambertw

from pipeline import __version__
from pipeline.errors import OutputError
from pipeline.units import LENGTH, MASS, TEMPERATURE, VELOCITY, strip_units

__all__ = ["DISC_GALAXY_PARAMETERS", "DiscGalaxyParameters", "make_disc_galaxy"]

_SCENARIO = "velmora_disc"
_MIN_PARTICLES = 1000
_DATASET_UNITS = {"position": "kpc", "velocity": "km/s", "mass": "Msun",
                  "smoothing_length": "kpc", "temperature": "K", "neutral_fraction": ""}


def _doc(text):
    """A dataclass field whose metadata carries a one-line description."""
    return dataclasses.field(metadata={"doc": text})


@dataclasses.dataclass(frozen=True, eq=False)
class DiscGalaxyParameters:
    """Parameters of the invented demo galaxy, with units.

    The disc frame has its spin axis along +z; the galaxy rotates
    counter-clockwise seen from +z.  Angles of clumps and of the warp's line
    of nodes are azimuths in that frame, measured from +x towards +y.

    Notes
    -----
    Surface density ``Sigma(R) ∝ exp(-R / scale_length)`` for
    ``R <= truncation_radius``; vertical density ``∝ sech^2(z / scale_height)``;
    rotation curve ``v(R) = flat_velocity (1 - exp(-R / turnover_radius))``.
    Each smoothing length is ``h = smoothing_eta (m / rho)^(1/3)`` with ``rho``
    the model's analytic density at the particle (check-values SK-07: eta = 1.2
    gives about 58 neighbours inside the cubic-spline support 2h), clipped to
    ``[h_min, h_max]``.  The warp tilts each ring of radius ``R`` about the line
    of nodes by ``warp_max_tilt ((R - warp_radius) / (truncation_radius -
    warp_radius))^2`` for ``R > warp_radius``.  The disc is then turned so that
    +z points along :attr:`spin_axis` and shifted by ``bulk_offset`` and
    ``bulk_velocity``.
    """

    galaxy: str = _doc("invented name of the galaxy")
    gas_mass: u.Quantity = _doc("total gas mass, disc plus clumps")
    scale_length: u.Quantity = _doc("exponential scale length of the surface density")
    truncation_radius: u.Quantity = _doc("outer edge of the disc")
    scale_height: u.Quantity = _doc("sech^2 scale height of the disc")
    flat_velocity: u.Quantity = _doc("circular velocity of the flat part of the rotation curve")
    turnover_radius: u.Quantity = _doc("radius R_t of v(R) = v_flat (1 - exp(-R / R_t))")
    velocity_dispersion: u.Quantity = _doc("isotropic velocity dispersion of the disc gas")
    disc_temperature: u.Quantity = _doc("median temperature of the neutral disc")
    outskirts_temperature: u.Quantity = _doc("median temperature where the disc is ionised")
    temperature_scatter_dex: float = _doc("log-normal scatter of the temperature, in dex")
    disc_neutral_fraction: float = _doc("neutral fraction of hydrogen in the inner disc")
    ionisation_radius: u.Quantity = _doc("radius where the neutral fraction has halved")
    ionisation_width: u.Quantity = _doc("width of the logistic fall of the neutral fraction")
    clump_radii: u.Quantity = _doc("galactocentric radii of the dense clumps")
    clump_azimuths: u.Quantity = _doc("azimuths of the clumps in the disc frame")
    clump_mass: u.Quantity = _doc("gas mass of each clump")
    clump_size: u.Quantity = _doc("Gaussian radius (sigma) of each clump")
    clump_temperature: u.Quantity = _doc("median temperature of the clump gas")
    clump_dispersion: u.Quantity = _doc("internal velocity dispersion of each clump")
    clump_neutral_fraction: float = _doc("neutral fraction of hydrogen in the clumps")
    warp_radius: u.Quantity = _doc("radius beyond which the mid-plane starts to tilt")
    warp_max_tilt: u.Quantity = _doc("tilt of the mid-plane at the truncation radius")
    warp_node_azimuth: u.Quantity = _doc("azimuth of the warp's line of nodes in the disc frame")
    spin_inclination: u.Quantity = _doc("angle of the spin axis from the snapshot's +z axis")
    spin_azimuth: u.Quantity = _doc("azimuth of the spin axis from +x towards +y")
    bulk_offset: u.Quantity = _doc("position of the galaxy centre in the snapshot")
    bulk_velocity: u.Quantity = _doc("bulk velocity of the galaxy in the snapshot")
    smoothing_eta: float = _doc("eta of h = eta (m / rho)^(1/3) (check-values SK-07)")
    h_min: u.Quantity = _doc("smallest smoothing length written")
    h_max: u.Quantity = _doc("largest smoothing length written")
    little_h: float = _doc("Hubble parameter recorded in the file (lengths carry no h factor)")
    scale_factor: float = _doc("scale factor recorded in the file")

    @property
    def spin_axis(self) -> np.ndarray:
        """Unit vector, shape (3,), of the inner disc's angular momentum in the snapshot."""
        return _orientation_matrix(self)[:, 2]

    def summary(self) -> str:
        """Return the parameters as aligned text lines: name, value, description.

        Examples
        --------
        >>> print(DISC_GALAXY_PARAMETERS.summary().splitlines()[1])
        gas_mass                 1e+10 solMass                total gas mass, disc plus clumps
        """
        lines = []
        for field in dataclasses.fields(self):
            value = getattr(self, field.name)
            if isinstance(value, u.Quantity):
                numbers = ", ".join(f"{number:g}" for number in np.atleast_1d(value.value))
                text = f"({numbers}) {value.unit}" if value.ndim else f"{numbers} {value.unit}"
            else:
                text = str(value)
            lines.append(f"{field.name:<24} {text:<28} {field.metadata['doc']}")
        return "\n".join(lines)


#: The one scenario shipped with cubewright: an invented gas-rich disc galaxy.
DISC_GALAXY_PARAMETERS = DiscGalaxyParameters(
    galaxy="Velmora",
    gas_mass=1.0e10 * u.Msun,
    scale_length=3.5 * u.kpc,
    truncation_radius=17.5 * u.kpc,
    scale_height=0.3 * u.kpc,
    flat_velocity=200.0 * u.km / u.s,
    turnover_radius=1.5 * u.kpc,
    velocity_dispersion=9.0 * u.km / u.s,
    disc_temperature=7000.0 * u.K,
    outskirts_temperature=9500.0 * u.K,
    temperature_scatter_dex=0.07,
    disc_neutral_fraction=0.9,
    ionisation_radius=14.0 * u.kpc,
    ionisation_width=1.0 * u.kpc,
    clump_radii=[6.0, 7.5, 8.5, 9.5] * u.kpc,
    clump_azimuths=[30.0, 150.0, 250.0, 320.0] * u.deg,
    clump_mass=6.0e7 * u.Msun,
    clump_size=0.15 * u.kpc,
    clump_temperature=500.0 * u.K,
    clump_dispersion=4.0 * u.km / u.s,
    clump_neutral_fraction=0.97,
    warp_radius=10.5 * u.kpc,
    warp_max_tilt=10.0 * u.deg,
    warp_node_azimuth=60.0 * u.deg,
    spin_inclination=35.0 * u.deg,
    spin_azimuth=120.0 * u.deg,
    bulk_offset=[2.0, -1.0, 0.5] * u.kpc,
    bulk_velocity=[20.0, -10.0, 5.0] * u.km / u.s,
    smoothing_eta=1.2,
    h_min=0.05 * u.kpc,
    h_max=3.0 * u.kpc,
    little_h=0.7,
    scale_factor=1.0,
)


def make_disc_galaxy(path, *, n_particles=300_000, seed=2026, overwrite=False) -> Path:
    """Write the demo galaxy *Velmora* as an HDF5 snapshot.

    Parameters
    ----------
    path : str or os.PathLike
        File to write; its folder must exist.
    n_particles : int, optional
        Number of equal-mass gas particles (at least 1000).
    seed : int, optional
        Non-negative seed of ``numpy.random.default_rng``; the same seed gives
        the same file contents.
    overwrite : bool, optional
        Replace an existing file.

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    ValueError
        If ``n_particles`` is not an integer of at least 1000, or ``seed`` is
        not a non-negative integer.
    pipeline.errors.OutputError
        If the file exists and ``overwrite`` is false, or it cannot be written.

    Notes
    -----
    The layout is group ``gas`` with float64 datasets ``position`` (kpc,
    shape (n, 3)), ``velocity`` (km/s, (n, 3)), ``mass`` (Msun),
    ``smoothing_length`` (kpc), ``temperature`` (K) and ``neutral_fraction``,
    each with a ``unit`` attribute, and root attributes ``little_h``,
    ``scale_factor``, ``scenario``, ``galaxy``, ``seed``, ``n_particles`` and
    every entry of :data:`DISC_GALAXY_PARAMETERS` in internal units (the unit
    is the attribute name's suffix).  The file is written under a temporary
    name in the same folder and moved into place, so a reader never sees a
    half-written snapshot.  The model is described in
    :class:`DiscGalaxyParameters`.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = make_disc_galaxy(pathlib.Path(folder) / "velmora.h5", n_particles=2000)
    ...     path.name
    'velmora.h5'
    """
    if not _is_integer(n_particles) or n_particles < _MIN_PARTICLES:
        raise ValueError(f"'n_particles' must be an integer of at least {_MIN_PARTICLES}, "
                         f"e.g. 300000; got {n_particles!r}")
    if not _is_integer(seed) or seed < 0:
        raise ValueError(f"'seed' must be a non-negative integer, e.g. 2026; got {seed!r}")
    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputError(f"{path}: file exists; pass overwrite=True (--overwrite) to replace it")
    fields, _ = _draw_particles(int(n_particles), np.random.default_rng(int(seed)))
    attributes = {"scenario": _SCENARIO, "seed": int(seed), "n_particles": int(n_particles),
                  "generator": f"pipeline.scenario.make_disc_galaxy (cubewright {__version__})",
                  **_parameter_attributes(DISC_GALAXY_PARAMETERS)}
    _write_atomically(path, fields, attributes)
    return path


def _is_integer(value):
    """True for a Python or numpy integer that is not a bool."""
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def _write_atomically(path, fields, attributes):
    """Write the snapshot under a temporary name in the target folder, then move it into place."""
    temporary = path.with_name(f".{path.name}.{secrets.token_hex(4)}.part")
    try:
        with h5py.File(temporary, "w") as handle:
            for key, value in attributes.items():
                handle.attrs[key] = value
            group = handle.create_group("gas")
            for key, unit in _DATASET_UNITS.items():
                dataset = group.create_dataset(key, data=fields[key], track_times=False)
                dataset.attrs["unit"] = unit
        os.replace(temporary, path)
    except OSError as err:
        temporary.unlink(missing_ok=True)
        reason = os.strerror(err.errno) if err.errno else str(err)
        raise OutputError(f"{path}: cannot write the snapshot ({reason})") from err


def _parameter_attributes(parameters):
    """Return the parameters as HDF5 attributes, plain numbers in internal units named with their unit."""
    suffixes = {LENGTH: "kpc", VELOCITY: "kms", MASS: "msun", TEMPERATURE: "k", u.deg: "deg"}
    attributes = {}
    for field in dataclasses.fields(parameters):
        value = getattr(parameters, field.name)
        if isinstance(value, u.Quantity):
            unit = next(unit for unit in suffixes if value.unit.is_equivalent(unit))
            stripped = strip_units(value, unit, name=field.name).reshape(value.shape)
            attributes[f"{field.name}_{suffixes[unit]}"] = float(stripped) if value.isscalar else stripped
        else:
            attributes[field.name] = value
    attributes["spin_axis"] = parameters.spin_axis
    return attributes


def _orientation_matrix(parameters):
    """Rotation taking disc-frame vectors to the snapshot frame (disc +z to the spin axis)."""
    inclination = parameters.spin_inclination.to_value(u.rad)
    azimuth = parameters.spin_azimuth.to_value(u.rad)
    cos_i, sin_i = np.cos(inclination), np.sin(inclination)
    cos_a, sin_a = np.cos(azimuth), np.sin(azimuth)
    about_y = np.array([[cos_i, 0.0, sin_i], [0.0, 1.0, 0.0], [-sin_i, 0.0, cos_i]])
    about_z = np.array([[cos_a, -sin_a, 0.0], [sin_a, cos_a, 0.0], [0.0, 0.0, 1.0]])
    return about_z @ about_y


def _draw_particles(n_particles, rng):
    """Sample the galaxy; return the snapshot fields and each particle's clump index (-1 for the disc)."""
    p = _internal_parameters(DISC_GALAXY_PARAMETERS)
    mass_msun = p["gas_mass_msun"] / n_particles
    n_clumps = len(p["clump_radii_kpc"])
    n_per_clump = int(round(p["clump_mass_msun"] / mass_msun))
    n_disc = n_particles - n_clumps * n_per_clump
    clump_index = np.concatenate([np.full(n_disc, -1), np.repeat(np.arange(n_clumps), n_per_clump)])

    # Disc: truncated exponential in R by inverting its cumulative mass
    # 1 - (1 + x) exp(-x), x = R / R_d, with the k = -1 branch of Lambert W.
    x_edge = p["truncation_radius_kpc"] / p["scale_length_kpc"]
    kept = 1.0 - (1.0 + x_edge) * np.exp(-x_edge)
    remaining = 1.0 - rng.uniform(0.0, kept, n_disc)
    radius_kpc = (-1.0 - lambertw(-remaining / np.e, k=-1).real) * p["scale_length_kpc"]
    azimuth = rng.uniform(0.0, 2.0 * np.pi, n_disc)
    # sech^2(z / z_0) / (2 z_0) is the logistic distribution with scale z_0 / 2.
    height_kpc = rng.logistic(0.0, 0.5 * p["scale_height_kpc"], n_disc)
    disc_position = np.column_stack([radius_kpc * np.cos(azimuth), radius_kpc * np.sin(azimuth),
                                     height_kpc])
    v_circular = _circular_velocity_kms(radius_kpc, p)
    disc_velocity = np.column_stack([-v_circular * np.sin(azimuth), v_circular * np.cos(azimuth),
                                     np.zeros(n_disc)])
    disc_velocity += rng.normal(0.0, p["velocity_dispersion_kms"], (n_disc, 3))

    # Clumps: Gaussian spheres in the mid-plane moving with the rotation at their centre.
    centre_kpc = _clump_centres_kpc(p)
    clump_azimuth = np.deg2rad(p["clump_azimuths_deg"])
    clump_v_circular = _circular_velocity_kms(p["clump_radii_kpc"], p)
    centre_velocity = np.column_stack([-clump_v_circular * np.sin(clump_azimuth),
                                       clump_v_circular * np.cos(clump_azimuth),
                                       np.zeros(n_clumps)])
    member = clump_index[n_disc:]
    clump_position = centre_kpc[member] + rng.normal(0.0, p["clump_size_kpc"], (member.size, 3))
    clump_velocity = centre_velocity[member] + rng.normal(0.0, p["clump_dispersion_kms"],
                                                          (member.size, 3))

    position_kpc = np.concatenate([disc_position, clump_position])
    velocity_kms = np.concatenate([disc_velocity, clump_velocity])
    cylindrical_kpc = np.hypot(position_kpc[:, 0], position_kpc[:, 1])
    is_clump = clump_index >= 0

    density = _density_msun_kpc3(position_kpc, p, disc_mass_msun=n_disc * mass_msun,
                                 clump_mass_msun=n_per_clump * mass_msun)
    h_kpc = np.clip(p["smoothing_eta"] * np.cbrt(mass_msun / density), p["h_min_kpc"], p["h_max_kpc"])

    neutral = p["disc_neutral_fraction"] / (
        1.0 + np.exp((cylindrical_kpc - p["ionisation_radius_kpc"]) / p["ionisation_width_kpc"]))
    median_k = p["disc_temperature_k"] + (p["outskirts_temperature_k"] - p["disc_temperature_k"]) * (
        1.0 - neutral / p["disc_neutral_fraction"])
    neutral[is_clump] = p["clump_neutral_fraction"]
    median_k[is_clump] = p["clump_temperature_k"]
    temperature_k = median_k * 10.0 ** rng.normal(0.0, p["temperature_scatter_dex"], n_particles)

    position_kpc, velocity_kms = _warp(position_kpc, velocity_kms, cylindrical_kpc, p)
    rotation = _orientation_matrix(DISC_GALAXY_PARAMETERS)
    fields = {
        "position": position_kpc @ rotation.T + p["bulk_offset_kpc"],
        "velocity": velocity_kms @ rotation.T + p["bulk_velocity_kms"],
        "mass": np.full(n_particles, mass_msun),
        "smoothing_length": h_kpc,
        "temperature": temperature_k,
        "neutral_fraction": neutral,
    }
    fields = {key: np.ascontiguousarray(value, dtype=np.float64) for key, value in fields.items()}
    return fields, clump_index


def _internal_parameters(parameters):
    """Return the parameters as plain floats/arrays keyed by name with the internal-unit suffix."""
    attributes = _parameter_attributes(parameters)
    return {key: value for key, value in attributes.items() if not isinstance(value, str)}


def _circular_velocity_kms(radius_kpc, p):
    """Rotation curve v(R) = v_flat (1 - exp(-R / R_t)), in km/s."""
    return p["flat_velocity_kms"] * -np.expm1(-radius_kpc / p["turnover_radius_kpc"])


def _clump_centres_kpc(p):
    """Disc-frame positions of the clump centres, shape (n_clumps, 3)."""
    azimuth = np.deg2rad(p["clump_azimuths_deg"])
    radius_kpc = p["clump_radii_kpc"]
    return np.column_stack([radius_kpc * np.cos(azimuth), radius_kpc * np.sin(azimuth),
                            np.zeros(azimuth.size)])


def _density_msun_kpc3(position_kpc, p, *, disc_mass_msun, clump_mass_msun):
    """Analytic gas density of the unwarped model at disc-frame positions, in Msun/kpc^3."""
    scale_kpc = p["scale_length_kpc"]
    x_edge = p["truncation_radius_kpc"] / scale_kpc
    sigma_0 = disc_mass_msun / (2.0 * np.pi * scale_kpc**2 * (1.0 - (1.0 + x_edge) * np.exp(-x_edge)))
    radius_kpc = np.hypot(position_kpc[:, 0], position_kpc[:, 1])
    z_ratio = position_kpc[:, 2] / p["scale_height_kpc"]
    density = (sigma_0 * np.exp(-radius_kpc / scale_kpc)
               / (2.0 * p["scale_height_kpc"] * np.cosh(z_ratio) ** 2))
    size_kpc = p["clump_size_kpc"]
    peak = clump_mass_msun / ((2.0 * np.pi) ** 1.5 * size_kpc**3)
    for centre in _clump_centres_kpc(p):
        distance_sq = np.sum((position_kpc - centre) ** 2, axis=1)
        density += peak * np.exp(-0.5 * distance_sq / size_kpc**2)
    return density


def _warp(position_kpc, velocity_kms, radius_kpc, p):
    """Tilt each ring beyond the warp radius about the line of nodes (Rodrigues' rotation)."""
    ramp = np.clip((radius_kpc - p["warp_radius_kpc"])
                   / (p["truncation_radius_kpc"] - p["warp_radius_kpc"]), 0.0, None)
    tilt = np.deg2rad(p["warp_max_tilt_deg"]) * ramp**2
    node = np.deg2rad(p["warp_node_azimuth_deg"])
    axis = np.array([np.cos(node), np.sin(node), 0.0])
    cos_t, sin_t = np.cos(tilt)[:, None], np.sin(tilt)[:, None]

    def rotate(vectors):
        along = vectors @ axis
        return (vectors * cos_t + np.cross(axis, vectors) * sin_t
                + np.outer(along, axis) * (1.0 - cos_t))

    return rotate(position_kpc), rotate(velocity_kms)
