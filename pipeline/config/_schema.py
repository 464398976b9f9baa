"""The parameter table: every config key, its kind, default and meaning.

This one table drives TOML validation, ``--set`` overrides, the output of
``cubewright check``, and the resolved config stored in each FITS file.

Kinds
-----
``angle``, ``length``, ``velocity``, ``frequency``, ``time``, ``temperature``,
``flux_density`` (Jy or Jy/beam), ``memory`` (bytes, e.g. "4 GiB"):
    a quantity string with a unit of that physical type, e.g. "12 arcsec".
``spectral``:
    a velocity or a frequency (a channel width), e.g. "4 km/s" or "20 kHz".
``length3``, ``velocity3``:
    a list of three quantity strings, e.g. ["1 kpc", "0 kpc", "-2 kpc"].
``matrix3``:
    a 3x3 list of numbers (a rotation matrix).
``unit``:
    a unit string, e.g. "kpc" or "1e10 Msun".
``int``, ``float``, ``bool``, ``str``, ``path``:
    plain TOML values; ``choices`` restricts a ``str``.
"""

import dataclasses

__all__ = ["Param", "PARAMS", "PARAMS_BY_KEY", "SNAPSHOT_FIELDS", "REQUIRED", "EXAMPLES", "COMPANIONS", "VALUE_FORMS"]


@dataclasses.dataclass(frozen=True)
class Param:
    """One config key.

    Parameters
    ----------
    key : str
        Dotted path, ``section.name``.
    kind : str
        One of the kinds in the module docstring.
    default : object
        Default in config-file form (a string for quantities); None means unset.
    doc : str
        One-line meaning, shown by ``cubewright check`` and in errors.
    choices : tuple of str, optional
        Allowed values of a ``str`` parameter.
    minimum : float, optional
        Smallest allowed value (numbers, and quantities in their display unit).
    maximum : float, optional
        Largest allowed value (numbers, and quantities in their display unit).
    positive : bool
        Quantity or number must be strictly positive.
    display_unit : str, optional
        Unit a quantity is shown and stored in by ``RunConfig.to_toml``; None
        means the default of its kind (arcsec, kpc, km/s, Hz, s, K, Jy/beam, GiB).
    """

    key: str
    kind: str
    default: object
    doc: str
    choices: tuple = ()
    minimum: float | None = None
    maximum: float | None = None
    positive: bool = False
    display_unit: str | None = None


# Snapshot quantities the reader knows: name -> (default unit, may be a constant).
SNAPSHOT_FIELDS = {
    "position": ("kpc", False),
    "velocity": ("km/s", False),
    "mass": ("Msun", False),
    "smoothing_length": ("kpc", False),
    "temperature": ("K", True),
    "neutral_fraction": ("", True),
    "hydrogen_fraction": ("", True),
    "molecular_fraction": ("", True),
    "metallicity": ("", True),
    "density": ("Msun / kpc3", False),
}

# Fields that must be present (as a dataset or a constant) for a 21-cm run.
REQUIRED = ("position", "velocity", "mass", "smoothing_length", "temperature",
            "neutral_fraction", "hydrogen_fraction")


def _field_params():
    params = []
    for name, (unit, may_be_constant) in SNAPSHOT_FIELDS.items():
        base = f"snapshot.fields.{name}"
        required = name in REQUIRED
        if name == "hydrogen_fraction":
            dataset = None
        else:
            dataset = f"gas/{name}" if required else None
        params.append(Param(f"{base}.dataset", "str", dataset,
                            f"HDF5 dataset holding the {name.replace('_', ' ')}"))
        params.append(Param(f"{base}.unit", "unit", unit,
                            f"unit of the stored {name.replace('_', ' ')} (before h and a factors)"))
        params.append(Param(f"{base}.h_power", "float", 0.0,
                            "the stored value is multiplied by little_h to this power"))
        params.append(Param(f"{base}.a_power", "float", 0.0,
                            "the stored value is multiplied by the scale factor to this power"))
        if may_be_constant:
            params.append(Param(
                f"{base}.value", "float", 0.76 if name == "hydrogen_fraction" else None,
                f"constant {name.replace('_', ' ')} used when no dataset is given",
                minimum=0.0, maximum=1.0 if name.endswith("_fraction") else None))
    return params


PARAMS = (
    # --- snapshot -----------------------------------------------------------------
    Param("snapshot.path", "path", None, "HDF5 snapshot file (relative paths start at the config's folder)"),
    Param("snapshot.chunk_particles", "int", 1_000_000, "particles read per chunk", minimum=1),
    Param("snapshot.little_h", "float", None, "Hubble parameter h = H0 / (100 km/s/Mpc) of the snapshot", positive=True),
    Param("snapshot.little_h_attribute", "str", None, "HDF5 attribute holding little h, as 'group/attribute'"),
    Param("snapshot.scale_factor", "float", None, "cosmological scale factor a of the snapshot", positive=True),
    Param("snapshot.scale_factor_attribute", "str", None, "HDF5 attribute holding a, as 'group/attribute'"),
    *_field_params(),
    # --- geometry -----------------------------------------------------------------
    Param("geometry.centre", "str", "shrinking_sphere", "how the galaxy centre is found",
          choices=("shrinking_sphere", "centre_of_mass", "explicit")),
    Param("geometry.centre_position", "length3", None, "centre when geometry.centre = 'explicit'"),
    Param("geometry.selection_radius", "length", "30 kpc", "gas within this radius of the centre is observed", positive=True),
    Param("geometry.frame", "str", "central_gas", "how the velocity frame is set",
          choices=("central_gas", "explicit")),
    Param("geometry.frame_radius", "length", "5 kpc",
          "radius of the central gas whose mass-weighted mean velocity sets the frame", positive=True),
    Param("geometry.frame_velocity", "velocity3", None, "frame velocity when geometry.frame = 'explicit'"),
    Param("geometry.orientation", "str", "angular_momentum", "reference for the viewing angles",
          choices=("angular_momentum", "simulation_axes", "explicit")),
    Param("geometry.inclination", "angle", "60 deg", "angle between line of sight and disc axis (0 = face-on)",
          minimum=0.0, maximum=180.0, display_unit="deg"),
    Param("geometry.position_angle", "angle", "0 deg", "position angle of the receding major axis, east of north",
          display_unit="deg"),
    Param("geometry.rotation_matrix", "matrix3", None,
          "rows are the sky east, sky north and away-from-observer axes in simulation coordinates "
          "(geometry.orientation = 'explicit')"),
    # --- observer -----------------------------------------------------------------
    Param("observer.distance", "length", None, "distance to the galaxy (nearby sources; give this or redshift)",
          positive=True, display_unit="Mpc"),
    Param("observer.redshift", "float", None, "cosmological redshift of the galaxy, > 0 (give this or distance)", positive=True),
    Param("observer.cosmology", "str", "Planck18", "astropy.cosmology realisation used with redshift",
          choices=("Planck18", "Planck15", "Planck13", "WMAP9", "WMAP7", "WMAP5")),
    Param("observer.systemic_velocity", "velocity", "0 km/s",
          "systemic velocity (optical convention, cz) when a distance is given"),
    Param("observer.ra", "angle", "180 deg", "right ascension of the galaxy centre (ICRS)",
          minimum=0.0, maximum=360.0, display_unit="deg"),
    Param("observer.dec", "angle", "30 deg", "declination of the galaxy centre (ICRS)",
          minimum=-90.0, maximum=90.0, display_unit="deg"),
    # --- grid ---------------------------------------------------------------------
    Param("grid.n_x", "int", 128, "pixels along right ascension", minimum=1),
    Param("grid.n_y", "int", 128, "pixels along declination", minimum=1),
    Param("grid.n_chan", "int", 64, "spectral channels", minimum=1),
    Param("grid.pixel_scale", "angle", "10 arcsec", "pixel size on the sky", positive=True),
    Param("grid.channel_width", "spectral", "4 km/s", "channel width, as a radio velocity or a frequency", positive=True),
    Param("grid.projection", "str", "SIN", "celestial projection of the WCS", choices=("SIN", "TAN")),
    Param("grid.spectral_axis", "str", "FREQ", "spectral axis written to FITS", choices=("FREQ", "VRAD")),
    Param("grid.kernel", "str", "cubic_spline", "SPH kernel used to spread each particle",
          choices=("cubic_spline", "quintic_spline", "wendland_c2", "wendland_c4", "wendland_c6",
                   "gaussian")),
    Param("grid.support_factor", "float", None,
          "kernel support radius in units of the smoothing length (unset: the kernel's usual factor, "
          "2 for cubic_spline and Wendland, 3 for quintic_spline and gaussian; 1 if h is the support)",
          positive=True),
    # --- emission -----------------------------------------------------------------
    Param("grid.line_profile", "str", "gaussian",
          "spectral shape of each particle's line: thermal plus turbulent Gaussian, or all in one channel",
          choices=("gaussian", "delta")),
    Param("emission.turbulent_dispersion", "velocity", "0 km/s",
          "one-dimensional turbulent velocity dispersion added in quadrature to the thermal width", minimum=0.0),
    Param("emission.unit", "str", "Jy/beam", "unit of the written cube", choices=("Jy/beam", "K")),
    # --- beam ---------------------------------------------------------------------
    Param("beam.major", "angle", "30 arcsec", "FWHM of the beam major axis", positive=True),
    Param("beam.minor", "angle", "30 arcsec", "FWHM of the beam minor axis", positive=True),
    Param("beam.position_angle", "angle", "0 deg", "position angle of the beam major axis, east of north",
          display_unit="deg"),
    # --- noise --------------------------------------------------------------------
    Param("noise.mode", "str", "interferometer", "how the thermal noise is set",
          choices=("none", "rms", "single_dish", "interferometer")),
    Param("noise.rms", "flux_density", None, "noise rms per channel, in Jy/beam (noise.mode = 'rms')", positive=True),
    Param("noise.system_temperature", "temperature", "25 K", "system temperature", positive=True),
    Param("noise.dish_diameter", "length", "15 m", "diameter of each dish", positive=True, display_unit="m"),
    Param("noise.aperture_efficiency", "float", 0.7, "aperture efficiency", positive=True, maximum=1.0),
    Param("noise.n_antennas", "int", 64, "number of antennas (interferometer)", minimum=2),
    Param("noise.n_polarisations", "int", 2, "polarisations combined", minimum=1, maximum=2),
    Param("noise.correlator_efficiency", "float", 1.0, "system (correlator) efficiency", positive=True,
          maximum=1.0),
    Param("noise.integration_time", "time", "4 h", "on-source integration time", positive=True),
    Param("noise.seed", "int", 1, "seed of the noise generator", minimum=0),
    # --- output -------------------------------------------------------------------
    Param("output.directory", "path", "output",
          "folder for the written files (relative to the config's folder; to the current one in --set)"),
    Param("output.name", "str", "cube", "base name of the written files"),
    Param("output.moment0", "bool", True, "also write the moment-0 map"),
    Param("output.preview", "bool", True, "also write a PNG preview"),
    # --- run ----------------------------------------------------------------------
    Param("run.memory_budget", "memory", "8 GiB",
          "largest estimated peak memory; a cube that does not fit in it is memory-mapped to disk", positive=True),
    Param("run.scratch_directory", "path", None,
          "folder for the memory-mapped working cube (unset: output.directory; relative as output.directory)"),
    Param("run.threads", "int", 0, "threads for the deposit, beam and noise (0 = all cores)", minimum=0),
)

PARAMS_BY_KEY = {param.key: param for param in PARAMS}


def _field_examples():
    examples = {}
    for name, (_, may_be_constant) in SNAPSHOT_FIELDS.items():
        if may_be_constant:
            examples[f"snapshot.fields.{name}.dataset"] = f"gas/{name}"
            examples[f"snapshot.fields.{name}.value"] = 8000.0 if name == "temperature" else 0.5
    return examples


# A valid value, in config-file form, for each key that only some modes use: the keys of each
# either/or form (the loader's alternatives) and the keys a choice needs (COMPANIONS).  The
# every-mode test builds one run per choice and per form from these and from the choices above.
EXAMPLES = {
    **_field_examples(),
    "observer.distance": "10 Mpc",
    "observer.systemic_velocity": "700 km/s",
    "observer.redshift": 0.003,
    "snapshot.little_h": 0.7,
    "snapshot.little_h_attribute": "/little_h",
    "snapshot.scale_factor": 1.0,
    "snapshot.scale_factor_attribute": "/scale_factor",
    "geometry.centre_position": ["0 kpc", "0 kpc", "0 kpc"],
    "geometry.frame_velocity": ["0 km/s", "0 km/s", "0 km/s"],
    "geometry.rotation_matrix": [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]],
    "noise.rms": "0.2 mJy/beam",
}

# Keys a choice needs before it can run: "key=choice" (one choice) or "key" (every choice)
# -> keys whose EXAMPLES value is given with it.
COMPANIONS = {
    "geometry.centre=explicit": ("geometry.centre_position",),
    "geometry.frame=explicit": ("geometry.frame_velocity",),
    "geometry.orientation=explicit": ("geometry.rotation_matrix",),
    "noise.mode=rms": ("noise.rms",),
    "observer.cosmology": ("observer.redshift",),
}

# Keys whose value takes more than one form, each of which runs: key -> one example per form.
VALUE_FORMS = {
    "grid.channel_width": ("30 km/s", "140 kHz"),
}
