"""Reading, overriding and validating a run config; the resolved :class:`RunConfig`.

Values come in layers: the defaults of the parameter table, then the config file
(or mapping), then each batch of ``--set`` overrides.  A later layer wins key by
key.  Some keys are alternatives (a field's ``dataset`` or its constant
``value``; ``observer.distance`` or ``observer.redshift``): one layer may give
only one of them, and a later layer that gives one drops the others given below it.

Every given value remembers where it came from (``file:key.path``,
``--set:key.path``, or a place a caller of `RunConfig.replace` names, such as a
batch file's sweep key), and an error about it starts with that place.
"""

import copy
import dataclasses
import hashlib
import math
import os
import tomllib
import types
from collections.abc import Mapping
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np

from pipeline.errors import ConfigError

from ._messages import EXPECTED, Problem, show, suggest, unit_type_name
from ._quantity import (QUANTITY_KINDS, VECTOR_KINDS, format_quantity, is_number, parse_quantity, parse_vector,
                        to_display)
from ._schema import PARAMS, PARAMS_BY_KEY, SNAPSHOT_FIELDS

__all__ = ["RunConfig", "load_config", "config_from_dict", "read_toml_file", "describe_config"]

# How errors name a value that came from an override, unless the caller names another origin.
_OVERRIDE_ORIGIN = "--set"

_ROTATION_TOLERANCE = 1e-6


def _make_children():
    children = {}
    for key in PARAMS_BY_KEY:
        parts = key.split(".")
        for depth in range(len(parts)):
            names = children.setdefault(".".join(parts[:depth]), [])
            if parts[depth] not in names:
                names.append(parts[depth])
    return children


# Every table that holds keys ("" is the top level) -> the names allowed directly in it, in table order.
_CHILDREN = _make_children()
_SECTIONS = frozenset(_CHILDREN) - {""}


def _make_alternatives():
    groups = []
    for name, (_, may_be_constant) in SNAPSHOT_FIELDS.items():
        if may_be_constant:
            base = f"snapshot.fields.{name}"
            groups.append(((f"{base}.dataset",), (f"{base}.value",),
                           "a field is read from a dataset or set to a constant value, not both"))
    groups.append((("observer.distance", "observer.systemic_velocity"), ("observer.redshift",),
                   "a redshift sets the systemic velocity itself: give observer.distance (and optionally "
                   "observer.systemic_velocity) or observer.redshift"))
    groups.append((("snapshot.little_h",), ("snapshot.little_h_attribute",),
                   "give little h as a number or as the attribute that holds it, not both"))
    groups.append((("snapshot.scale_factor",), ("snapshot.scale_factor_attribute",),
                   "give the scale factor as a number or as the attribute that holds it, not both"))
    return tuple(groups)


# Keys that exclude each other: (keys of one option, keys of the other, why).  An option is
# chosen by a layer that gives its first key.
_ALTERNATIVES = _make_alternatives()


def _nearest_key(key):
    """The valid key or section nearest to an unknown ``key``, or None."""
    prefix, _, name = key.rpartition(".")
    if prefix and prefix not in _CHILDREN:
        prefix = suggest(prefix, _SECTIONS)
        if prefix is None:
            return None
    nearest = suggest(name, _CHILDREN[prefix])
    if nearest is not None:
        return f"{prefix}.{nearest}" if prefix else nearest
    return next((other for other in PARAMS_BY_KEY if other.rsplit(".", 1)[-1] == name), None)


def _unknown_key_error(origin, key, *, is_table, is_place=False):
    prefix = key.rpartition(".")[0]
    what = "section" if is_table or not prefix else "key"
    lead = f"{origin}: unknown {what} '{key}'" if is_place else f"{origin}:{key}: unknown {what}"
    nearest = _nearest_key(key)
    if nearest is not None:
        return ConfigError(f"{lead}; did you mean '{nearest}'?")
    level = prefix if prefix in _CHILDREN else ""
    listing = "sections are" if not level else f"keys in [{level}] are"
    return ConfigError(f"{lead}; the valid {listing}: {', '.join(_CHILDREN[level])}")


def _flatten(table, origin):
    """Return the leaves of a nested config table as ``{dotted key: raw value}``, refusing unknown keys."""
    flat = {}

    def walk(node, prefix):
        for name, raw in node.items():
            if not isinstance(name, str) or not name or "." in name:
                raise ConfigError(f"{origin}:{prefix}{name}: not a valid key name; write tables and "
                                  "plain names, e.g. [grid] with n_x = 64, or grid.n_x = 64 unquoted")
            key = prefix + name
            if key in PARAMS_BY_KEY:
                flat[key] = copy.deepcopy(raw)
            elif key in _SECTIONS:
                if not isinstance(raw, Mapping):
                    raise ConfigError(f"{origin}:{key}: expected a table of keys ([{key}]); got {show(raw)}")
                walk(raw, key + ".")
            else:
                raise _unknown_key_error(origin, key, is_table=isinstance(raw, Mapping))

    walk(table, "")
    return flat


def _parse_override(text, origin, is_place):
    """Return ``(key, raw value)`` from ``"key.path=value"`` (errors name ``origin``, see `_override_layer`)."""
    key, sep, value_text = text.partition("=")
    key = key.strip()
    if not sep or not key:
        raise ConfigError(f"{origin}: expected 'key.path=value', e.g. 'grid.n_x=64'; got {text!r}")
    if key not in PARAMS_BY_KEY:
        if key in _SECTIONS:
            example = next(other for other in PARAMS_BY_KEY if other.startswith(key + "."))
            lead = f"{origin}: '{key}'" if is_place else f"{origin}:{key}:"
            raise ConfigError(f"{lead} is a section, not a key; give a key, e.g. '{example}=...'")
        raise _unknown_key_error(origin, key, is_table=False, is_place=is_place)
    try:
        document = tomllib.loads(f"value = {value_text}")
    except tomllib.TOMLDecodeError:
        document = {}
    if set(document) != {"value"}:
        return key, value_text.strip()
    value = document["value"]
    if PARAMS_BY_KEY[key].kind in ("str", "path", "unit") and not isinstance(value, str):
        return key, value_text.strip()
    return key, value


def _check_override_texts(overrides):
    if isinstance(overrides, str) or not all(isinstance(text, str) for text in overrides):
        raise TypeError(f"overrides must be a sequence of 'key.path=value' strings; got {overrides!r}")
    return tuple(overrides)


def _override_layer(overrides, origin, base_dir):
    """Return one layer of overrides as ``(base_dir, ((text, origin, is_place), ...))``.

    ``origin`` is a str naming the source of every override (errors read
    ``origin:key.path:``) or one full place per override (errors read ``place:``);
    relative paths in the layer start at ``base_dir``.
    """
    texts = _check_override_texts(overrides)
    if isinstance(origin, str):
        return Path(base_dir), tuple((text, origin, False) for text in texts)
    places = tuple(origin) if isinstance(origin, (list, tuple)) else None
    if places is None or len(places) != len(texts) or not all(isinstance(place, str) for place in places):
        raise TypeError(f"origin must be a string or a sequence of one string per override ({len(texts)}); "
                        f"got {origin!r}")
    return Path(base_dir), tuple((text, place, True) for text, place in zip(texts, places))


def _parse_plain(raw, kind):
    if kind == "bool":
        if isinstance(raw, (bool, np.bool_)):
            return bool(raw)
    elif kind == "int":
        if is_number(raw) and isinstance(raw, (int, np.integer)):
            return int(raw)
    elif kind == "float":
        if is_number(raw):
            if not math.isfinite(raw):
                raise Problem(f"expected a finite number, e.g. 0.7; got {show(raw)}")
            return float(raw)
    elif isinstance(raw, str) and raw.strip():
        return raw
    raise Problem(f"expected {EXPECTED[kind]}; got {show(raw)}")


def _parse_path(raw, base_dir):
    if isinstance(raw, os.PathLike) or (isinstance(raw, str) and raw.strip()):
        path = Path(raw).expanduser()
        return (path if path.is_absolute() else base_dir / path).resolve()
    raise Problem(f"expected {EXPECTED['path']}; got {show(raw)}")


def _parse_unit(raw, param):
    reference = u.Unit(param.default)
    expected = f"a unit of {unit_type_name(reference)}, e.g. '{param.default}'"
    if isinstance(raw, u.UnitBase):
        unit = raw
    elif isinstance(raw, str):
        try:
            unit = u.Unit(raw)
        except ValueError as err:
            raise Problem(f"expected {expected}; got {show(raw)}, which astropy cannot read as a unit") from err
    else:
        raise Problem(f"expected {expected}; got {show(raw)}")
    if not unit.is_equivalent(reference):
        raise Problem(f"expected {expected}; got {show(raw)}, a unit of {unit_type_name(unit)}")
    return unit


def _parse_rotation(raw):
    expected = EXPECTED["matrix3"]
    rows_ok = (isinstance(raw, np.ndarray) and raw.shape == (3, 3) and raw.dtype.kind in "iuf") or (
        isinstance(raw, (list, tuple)) and len(raw) == 3
        and all(isinstance(row, (list, tuple)) and len(row) == 3 and all(is_number(x) for x in row)
                for row in raw))
    if not rows_ok:
        raise Problem(f"expected {expected}; got {show(raw)}")
    matrix = np.array(raw, dtype=np.float64)
    if not np.all(np.isfinite(matrix)):
        raise Problem(f"expected {expected}; got {show(raw)}, which holds a non-finite number")
    deviation = float(np.max(np.abs(matrix @ matrix.T - np.eye(3))))
    if deviation > _ROTATION_TOLERANCE:
        raise Problem(f"expected a rotation matrix with orthonormal rows (to {_ROTATION_TOLERANCE:g}); got "
                      f"rows whose dot products miss the identity by {deviation:.1e} "
                      "(give 8 significant digits)")
    determinant = float(np.linalg.det(matrix))
    if abs(determinant - 1.0) > _ROTATION_TOLERANCE:
        raise Problem(f"expected a rotation matrix (determinant +1); got determinant {determinant:+.6f}, "
                      "a reflection (negate one row)")
    return matrix


def _check_limits(param, value, raw):
    if param.kind in QUANTITY_KINDS:
        magnitude, unit_string = to_display(value, param.kind, override=param.display_unit)
        magnitude, unit_suffix = float(magnitude.value), f" {unit_string}"
    elif param.kind in ("int", "float"):
        magnitude, unit_suffix = value, ""
    else:
        return
    if param.positive and not magnitude > 0:
        raise Problem(f"expected a value greater than 0; got {show(raw)}")
    if param.minimum is not None and magnitude < param.minimum:
        raise Problem(f"expected a value of at least {param.minimum:g}{unit_suffix}; got {show(raw)}")
    if param.maximum is not None and magnitude > param.maximum:
        raise Problem(f"expected a value of at most {param.maximum:g}{unit_suffix}; got {show(raw)}")


def _normalise(param, raw, base_dir):
    """Return ``raw`` in the canonical form of ``param.kind``, or raise `Problem`."""
    kind = param.kind
    if kind in QUANTITY_KINDS:
        value = parse_quantity(raw, kind)
    elif kind in VECTOR_KINDS:
        value = parse_vector(raw, kind)
    elif kind == "matrix3":
        value = _parse_rotation(raw)
    elif kind == "unit":
        value = _parse_unit(raw, param)
    elif kind == "path":
        value = _parse_path(raw, base_dir)
    else:
        value = _parse_plain(raw, kind)
    if param.choices and value not in param.choices:
        choices = ", ".join(repr(choice) for choice in param.choices)
        folded = {str(choice).lower(): choice for choice in param.choices}
        nearest = suggest(str(raw).lower(), folded)
        hint = f" (did you mean {folded[nearest]!r}?)" if nearest is not None else ""
        raise Problem(f"expected one of {choices}; got {show(raw)}{hint}")
    _check_limits(param, value, raw)
    return value


def _merge_layers(layers):
    """Merge ``[({key: place}, {key: raw})]``, later layers winning.

    A layer that gives the first key of one alternative drops the other
    alternatives' keys given by the layers below it.

    Returns
    -------
    given, places, ranks : dict
        Each given key's raw value, the place it was given (``file:key.path``
        or the like) and the index of the layer that gave it.
    """
    given, places, ranks = {}, {}, {}
    for rank, (where, layer) in enumerate(layers):
        for *options, _ in _ALTERNATIVES:
            chosen = [option for option in options if option[0] in layer]
            for option in options:
                if chosen and option not in chosen:
                    for key in option:
                        given.pop(key, None)
        given.update(layer)
        places.update(where)
        ranks.update(dict.fromkeys(layer, rank))
    for *options, why in _ALTERNATIVES:
        present = [next(key for key in option if key in given) for option in options
                   if any(key in given for key in option)]
        if len(present) > 1:
            first, second = present
            raise ConfigError(f"{places[first]}: cannot be combined with {second}; {why}")
    return given, {key: places[key] for key in given}, {key: ranks[key] for key in given}


def _unused_alternatives(given):
    """Keys whose default does not apply because the user chose another alternative."""
    unused = set()
    for *options, _ in _ALTERNATIVES:
        if any(key in given for key in options[1]):
            unused.update(options[0])
        elif any(key in given for key in options[0]):
            unused.update(options[1])
    return unused


def _check_rules(values, source, places, ranks):
    """Raise `ConfigError` for the first cross-key rule the resolved ``values`` break.

    A message names the place where the offending key was given (``places``)
    or, for a default, the config file; of two keys given in different
    layers (``ranks``), the one given last is blamed.
    """

    def where(key):
        return places.get(key, f"{source}:{key}")

    if values["snapshot.path"] is None:
        raise ConfigError(f"{source}:snapshot.path: expected the HDF5 snapshot file, e.g. path = 'galaxy.h5' "
                          "in [snapshot]; got nothing (this key is required)")
    for factor, number, attribute in (("h", "snapshot.little_h", "snapshot.little_h_attribute"),
                                      ("a", "snapshot.scale_factor", "snapshot.scale_factor_attribute")):
        if values[number] is None and values[attribute] is None:
            for name in SNAPSHOT_FIELDS:
                key = f"snapshot.fields.{name}.{factor}_power"
                if values[key] != 0.0:
                    raise ConfigError(f"{where(key)}: is {values[key]:g}, so {number} or {attribute} "
                                      "must be given; got neither")
    if values["observer.distance"] is None and values["observer.redshift"] is None:
        raise ConfigError(f"{source}:observer: expected observer.distance (e.g. '8.5 Mpc') or "
                          "observer.redshift (e.g. 0.02); got neither")
    for switch, needed, example in (("geometry.centre", "geometry.centre_position", "['0 kpc', '0 kpc', '0 kpc']"),
                                    ("geometry.frame", "geometry.frame_velocity", "['0 km/s', '0 km/s', '0 km/s']"),
                                    ("geometry.orientation", "geometry.rotation_matrix",
                                     "[[1, 0, 0], [0, 1, 0], [0, 0, 1]]")):
        if values[switch] == "explicit" and values[needed] is None:
            raise ConfigError(f"{where(needed)}: required when {switch} = 'explicit', e.g. "
                              f"{needed.rsplit('.', 1)[-1]} = {example}; got nothing")
    if values["noise.mode"] == "rms" and values["noise.rms"] is None:
        raise ConfigError(f"{where('noise.rms')}: required when noise.mode = 'rms', e.g. rms = '0.4 mJy/beam'; "
                          "got nothing")
    velocity = values["observer.systemic_velocity"]
    if velocity is not None and not abs(velocity) < const.c:
        raise ConfigError(f"{where('observer.systemic_velocity')}: expected a speed below that of light "
                          f"(cz = c z, e.g. '700 km/s'); got {velocity}")
    name = values["output.name"]
    if name is not None and (name in ("", ".", "..") or "/" in name):
        raise ConfigError(f"{where('output.name')}: expected a file base name without folders "
                          f"(set output.directory for the folder), e.g. 'galaxy'; got {name!r}")
    major, minor = values["beam.major"], values["beam.minor"]
    if minor > major:
        if ranks.get("beam.major", -1) > ranks.get("beam.minor", -1):
            raise ConfigError(f"{where('beam.major')}: expected at least beam.minor ({minor}); got {major}")
        raise ConfigError(f"{where('beam.minor')}: expected at most beam.major ({major}); got {minor}")


def _build(file_values, *, source, base_dir, override_layers):
    layers = [({key: f"{source}:{key}" for key in file_values}, file_values)]
    folders = [base_dir, *(folder for folder, _ in override_layers)]
    for _, overrides in override_layers:
        where, layer = {}, {}
        for text, origin, is_place in overrides:
            key, layer[key] = _parse_override(text, origin, is_place)
            where[key] = origin if is_place else f"{origin}:{key}"
        layers.append((where, layer))
    given, places, ranks = _merge_layers(layers)
    values = {}
    for key, raw in given.items():
        try:
            values[key] = _normalise(PARAMS_BY_KEY[key], raw, folders[ranks[key]])
        except Problem as problem:
            raise ConfigError(f"{places[key]}: {problem}") from problem
    unused = _unused_alternatives(given)
    for param in PARAMS:
        if param.key not in values:
            skip = param.default is None or param.key in unused
            values[param.key] = None if skip else _normalise(param, param.default, base_dir)
    values = {param.key: values[param.key] for param in PARAMS}
    _check_rules(values, source, places, ranks)
    return RunConfig(source=source, base_dir=base_dir, _values=types.MappingProxyType(values),
                     _user_keys=frozenset(given), _file_values=types.MappingProxyType(file_values),
                     _override_layers=override_layers, _places=types.MappingProxyType(places))


def load_config(path, *, overrides=()) -> "RunConfig":
    """Read, override and validate a TOML run config.

    Parameters
    ----------
    path : str or os.PathLike
        The config file.  Relative paths inside it start at its folder.
    overrides : sequence of str, optional
        ``"key.path=value"`` strings, as given to ``--set``.  The value is read
        as a TOML value when it parses as one (``64``, ``true``, ``'a b'``,
        ``["1 kpc", "0 kpc", "0 kpc"]``) and is taken as a bare string otherwise
        (``12 arcsec``); string, path and unit keys always take the text.
        Relative paths in them start at the current folder, as on a command line.

    Returns
    -------
    RunConfig
        Every key resolved (defaults < file < overrides) and validated.

    Raises
    ------
    ConfigError
        If the file cannot be read or parsed, or any key or combination of keys
        breaks its rule; the message starts with ``file:key.path:``.
    TypeError
        If ``overrides`` is a single string rather than a sequence of them.

    Examples
    --------
    >>> from pathlib import Path
    >>> import pipeline
    >>> example = Path(pipeline.__file__).parent.parent / "configs" / "single_cube.toml"
    >>> config = load_config(example, overrides=["grid.n_x=64", "beam.major=40 arcsec"])
    >>> config["grid.n_x"], config["beam.major"]
    (64, <Quantity 40. arcsec>)
    """
    source = os.fspath(path)
    override_layers = (_override_layer(overrides, _OVERRIDE_ORIGIN, Path.cwd()),)
    table = read_toml_file(path, what="config file")
    return _build(_flatten(table, source), source=source, base_dir=Path(path).resolve().parent,
                  override_layers=override_layers)


def read_toml_file(path, *, what) -> dict:
    """Return the table of a TOML file, or raise ConfigError naming the file.

    Parameters
    ----------
    path : path-like
    what : str
        What the file is, for messages ("config file", "batch file").
    """
    source = os.fspath(path)
    try:
        text = Path(path).read_bytes().decode("utf-8")
    except OSError as err:
        raise ConfigError(f"{source}: cannot read the {what}: {err.strerror or err}") from err
    except UnicodeDecodeError as err:
        raise ConfigError(f"{source}: expected UTF-8 text; got a byte that is not UTF-8 at offset {err.start}") from err
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{source}: not valid TOML: {err}") from err


def config_from_dict(mapping, *, source="<dict>", base_dir=None, overrides=()) -> "RunConfig":
    """Validate a config given as nested dictionaries, as TOML would load it.

    Parameters
    ----------
    mapping : Mapping
        Sections to keys, e.g. ``{"grid": {"n_x": 64}}``.  Besides the TOML
        forms, Quantity, Unit and Path objects are accepted for quantity, unit
        and path keys.
    source : str, optional
        Name used at the start of error messages.
    base_dir : str or os.PathLike, optional
        Folder relative paths start at; default the current folder.
    overrides : sequence of str, optional
        ``"key.path=value"`` strings, as in `load_config`.

    Returns
    -------
    RunConfig

    Raises
    ------
    ConfigError
        If any key or combination of keys breaks its rule.
    TypeError
        If ``mapping`` is not a mapping or ``overrides`` is a single string.

    Examples
    --------
    >>> import astropy.units as u
    >>> config = config_from_dict({"snapshot": {"path": "/data/galaxy.h5"},
    ...                            "observer": {"distance": 8.5 * u.Mpc}})
    >>> config["observer.distance"], config.is_set("grid.n_x")
    (<Quantity 8.5 Mpc>, False)
    """
    if not isinstance(mapping, Mapping):
        raise TypeError(f"mapping must be a mapping of config sections; got {type(mapping).__name__}")
    folder = Path.cwd() if base_dir is None else Path(base_dir).resolve()
    override_layers = (_override_layer(overrides, _OVERRIDE_ORIGIN, folder),)
    return _build(_flatten(mapping, source), source=source, base_dir=folder, override_layers=override_layers)


def _check_key(key):
    if key not in PARAMS_BY_KEY:
        nearest = _nearest_key(key)
        hint = f"; did you mean '{nearest}'?" if nearest is not None else ""
        if key in _SECTIONS:
            hint = f"; it is a section: use section({key!r})"
        raise KeyError(f"unknown config key {key!r}{hint}")


def _toml_string(text):
    escaped = []
    for character in text:
        if character in '"\\':
            escaped.append("\\" + character)
        elif ord(character) < 0x20 or ord(character) == 0x7F:
            escaped.append(f"\\u{ord(character):04x}")
        else:
            escaped.append(character)
    return '"' + "".join(escaped) + '"'


def _format_value(param, value):
    """Return ``value`` as TOML text in its display unit."""
    kind = param.kind
    if kind in QUANTITY_KINDS or kind in VECTOR_KINDS:
        text = format_quantity(value, kind, override=param.display_unit)
        return _toml_string(text) if isinstance(text, str) else "[" + ", ".join(map(_toml_string, text)) + "]"
    if kind == "matrix3":
        return "[" + ", ".join("[" + ", ".join(repr(float(x)) for x in row) + "]" for row in value) + "]"
    if kind == "bool":
        return "true" if value else "false"
    if kind in ("int", "float"):
        return repr(value)
    if kind == "unit":
        return _toml_string(value.to_string())
    return _toml_string(str(value))


def _grouped(config, *, include_unset):
    """Yield ``(section, [(param, value)])`` in table order."""
    sections = {}
    for param in PARAMS:
        value = config._values[param.key]
        if value is not None or include_unset:
            sections.setdefault(param.key.rpartition(".")[0], []).append((param, value))
    return sections.items()


@dataclasses.dataclass(frozen=True, eq=False)
class RunConfig:
    """A validated run config: every key of the parameter table resolved.

    Build one with `load_config` or `config_from_dict`, not directly.  Index it
    by dotted key: quantities come back as Quantities in the unit the user gave
    (three-vectors with shape (3,)), ``matrix3`` as a float (3, 3) array,
    ``unit`` as an astropy unit, ``path`` as an absolute Path, and an unset
    optional key as None.

    Attributes
    ----------
    source : str
        The config file as named by the caller (starts every error message).
    base_dir : pathlib.Path
        Folder relative paths were resolved against.

    Examples
    --------
    >>> config = config_from_dict({"snapshot": {"path": "/data/galaxy.h5"},
    ...                            "observer": {"redshift": 0.01}, "grid": {"pixel_scale": "0.1 arcmin"}})
    >>> config["grid.pixel_scale"], config.normalised("grid.pixel_scale")
    (<Quantity 0.1 arcmin>, <Quantity 6. arcsec>)
    >>> config["observer.systemic_velocity"] is None
    True
    """

    source: str
    base_dir: Path
    _values: Mapping = dataclasses.field(repr=False)
    _user_keys: frozenset = dataclasses.field(repr=False)
    _file_values: Mapping = dataclasses.field(repr=False)
    _override_layers: tuple = dataclasses.field(repr=False)
    _places: Mapping = dataclasses.field(repr=False)

    def __getitem__(self, key: str):
        """Return the resolved value of ``key`` (a copy, for arrays)."""
        _check_key(key)
        value = self._values[key]
        return value.copy() if isinstance(value, np.ndarray) else value

    def where(self, key: str) -> str:
        """Return where ``key``'s value was given, the way an error about it starts.

        ``file:key.path`` for a value from the config file (or a default),
        ``--set:key.path`` for an override, or the place a `replace` call
        named as its ``origin``.

        Examples
        --------
        >>> config = config_from_dict({"snapshot": {"path": "/data/galaxy.h5"},
        ...                            "observer": {"distance": "8.5 Mpc"}}, source="run.toml")
        >>> swept = config.replace(["grid.n_x=64"], origin=["batch.toml:sweep.keys.grid.n_x[0]"])
        >>> swept.where("grid.n_x"), swept.where("grid.n_y"), swept.replace(["grid.n_y=8"]).where("grid.n_y")
        ('batch.toml:sweep.keys.grid.n_x[0]', 'run.toml:grid.n_y', '--set:grid.n_y')
        """
        _check_key(key)
        return self._places.get(key, f"{self.source}:{key}")

    def is_set(self, key: str) -> bool:
        """Return True if the user gave ``key`` (in the file or an override), False for a default."""
        _check_key(key)
        return key in self._user_keys

    def normalised(self, key: str):
        """Return the value of ``key`` in its display unit (the form `to_toml` writes).

        Quantities are converted (angles to arcsec or deg, lengths to kpc, Mpc
        or m, velocities to km/s, frequencies to Hz or kHz, times to s,
        temperatures to K, memory to GiB); other kinds come back as from indexing.
        """
        value = self[key]
        param = PARAMS_BY_KEY[key]
        if value is not None and (param.kind in QUANTITY_KINDS or param.kind in VECTOR_KINDS):
            return to_display(value, param.kind, override=param.display_unit)[0]
        return value

    def section(self, name: str) -> dict:
        """Return the keys under ``name`` (a section such as ``"grid"`` or ``"snapshot.fields.mass"``).

        Keys are relative to ``name``, values as from indexing.
        """
        if name not in _SECTIONS:
            nearest = suggest(name, _SECTIONS)
            hint = f"; did you mean '{nearest}'?" if nearest is not None else ""
            raise KeyError(f"unknown config section {name!r}{hint}")
        prefix = name + "."
        return {key[len(prefix):]: self[key] for key in self._values if key.startswith(prefix)}

    def to_toml(self) -> str:
        """Return the whole resolved config as TOML, defaults included and unset keys left out.

        Quantities are written in their display units and paths as absolute paths,
        so loading the text gives a config with the same `digest`.
        """
        blocks = []
        for section, entries in _grouped(self, include_unset=False):
            lines = [f"[{section}]"] + [f"{param.key.rpartition('.')[2]} = {_format_value(param, value)}"
                                        for param, value in entries]
            blocks.append("\n".join(lines) + "\n")
        return "\n".join(blocks)

    @property
    def digest(self) -> str:
        """SHA-256 (hex) of `to_toml`: equal for configs that resolve to the same values."""
        return hashlib.sha256(self.to_toml().encode("utf-8")).hexdigest()

    def replace(self, overrides, *, origin=_OVERRIDE_ORIGIN) -> "RunConfig":
        """Return a new config with ``overrides`` (``"key.path=value"`` strings) applied on top.

        The new overrides form a layer above everything given so far.

        Parameters
        ----------
        overrides : sequence of str
            ``"key.path=value"`` strings, read as in `load_config`; relative
            paths in them start at the config file's folder (`base_dir`).
        origin : str or sequence of str
            Where the overrides come from, for error messages and `where`.  A
            string names their source as a file name would: a bad value reads
            ``<origin>:<key.path>: expected ...; got ...`` (default ``"--set"``,
            as on the command line).  A sequence gives each override its own
            place, which then starts the message whole, e.g.
            ``"batch.toml:sweep.keys.grid.n_x[1]"``.

        Raises
        ------
        ConfigError
            If an override names an unknown key or breaks a rule.
        TypeError
            If ``overrides`` is a single string rather than a sequence of them,
            or ``origin`` is neither a string nor one string per override.

        Examples
        --------
        >>> config = config_from_dict({"snapshot": {"path": "/data/galaxy.h5"},
        ...                            "observer": {"distance": "8.5 Mpc"}})
        >>> config.replace(["grid.n_x=0"], origin=["batch.toml:sweep.keys.grid.n_x[1]"])
        Traceback (most recent call last):
        ...
        pipeline.errors.ConfigError: batch.toml:sweep.keys.grid.n_x[1]: expected a value of at least 1; got 0
        """
        layers = (*self._override_layers, _override_layer(overrides, origin, self.base_dir))
        return _build(dict(self._file_values), source=self.source, base_dir=self.base_dir,
                      override_layers=layers)


def describe_config(config: RunConfig) -> str:
    """Return the resolved config grouped by section, one ``key = value   # doc`` line per key.

    Values are in display units; unset optional keys read ``(not set)``.

    Parameters
    ----------
    config : RunConfig

    Returns
    -------
    str

    Examples
    --------
    >>> config = config_from_dict({"snapshot": {"path": "/data/galaxy.h5"},
    ...                            "observer": {"distance": "8.5 Mpc"}})
    >>> text = describe_config(config)
    >>> print(next(line for line in text.splitlines() if line.startswith("pixel_scale")))
    pixel_scale = "10.0 arcsec"  # pixel size on the sky
    """
    blocks = []
    for section, entries in _grouped(config, include_unset=True):
        pairs = [(param.key.rpartition(".")[2] + " = "
                  + ("(not set)" if value is None else _format_value(param, value)), param.doc)
                 for param, value in entries]
        width = max(len(left) for left, _ in pairs)
        blocks.append("\n".join([f"[{section}]"] + [f"{left:<{width}}  # {doc}" for left, doc in pairs]))
    return "\n\n".join(blocks) + "\n"
