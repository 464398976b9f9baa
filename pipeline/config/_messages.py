"""Wording of config errors: what each kind expects, how a value is shown, key suggestions."""

import difflib

import astropy.units as u
import numpy as np

__all__ = ["Problem", "EXPECTED", "show", "suggest", "unit_type_name"]


class Problem(Exception):
    """A value broke its rule; the text reads ``expected ...; got ...`` and gets ``file:key:`` in front."""


#: What each kind expects, with a valid example (the start of every value error).
EXPECTED = {
    "angle": "an angle, e.g. '10 arcsec' or '60 deg'",
    "length": "a length, e.g. '30 kpc' or '8.5 Mpc'",
    "velocity": "a velocity, e.g. '200 km/s'",
    "frequency": "a frequency, e.g. '1.42 GHz'",
    "spectral": "a velocity or frequency, e.g. '4 km/s' or '20 kHz'",
    "time": "a time, e.g. '4 h' or '3600 s'",
    "temperature": "a temperature, e.g. '25 K'",
    "flux_density": "a flux density, e.g. '0.4 mJy/beam' or '2 mJy'",
    "memory": "an amount of memory, e.g. '4 GiB' or '512 MB'",
    "length3": "a list of three lengths, e.g. ['1 kpc', '0 kpc', '-2 kpc']",
    "velocity3": "a list of three velocities, e.g. ['10 km/s', '0 km/s', '-5 km/s']",
    "matrix3": "a rotation matrix as three rows of three numbers, e.g. [[1, 0, 0], [0, 1, 0], [0, 0, 1]]",
    "int": "an integer, e.g. 64",
    "float": "a number, e.g. 0.7",
    "bool": "true or false",
    "str": "a non-empty string",
    "path": "a file or folder path as a string, e.g. 'galaxy.h5'",
}


def show(value) -> str:
    """Render a raw config value the way the user wrote it (TOML spelling where there is one)."""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, dict):
        return "a table {" + ", ".join(f"{key} = {show(item)}" for key, item in value.items()) + "}"
    if isinstance(value, list):
        return "[" + ", ".join(show(item) for item in value) + "]"
    if isinstance(value, (u.Quantity, u.UnitBase)):
        return f"'{value}'"
    return repr(value)


def suggest(name: str, candidates) -> str | None:
    """Return the candidate nearest to ``name`` (difflib), or None when nothing is close."""
    matches = difflib.get_close_matches(name, list(candidates), n=1, cutoff=0.6)
    return matches[0] if matches else None


def unit_type_name(unit: u.UnitBase) -> str:
    """Physical type of ``unit`` in plain words ('length', 'velocity', 'mass density', ...)."""
    return str(unit.physical_type).rsplit("/", 1)[-1]
