"""The batch config: a base run config swept over snapshots, views, distances, instruments and keys.

A batch file is TOML with three sections::

    [batch]      run_config, output_directory, name (template), detection_threshold, mask_level
    [sweep]      snapshots, distances | redshifts, [sweep.views], [sweep.instruments.NAME], [sweep.keys]
    [cluster]    optional: a batch-queue cluster started through dask-jobqueue

:func:`load_batch` expands the sweep into one `JobSpec` per combination (the
Cartesian product, in the order snapshots, views, distances, instruments, keys),
validates every job's run config and checks the output names before anything
runs.  Errors read ``file:key.path: expected ...; got ...``, a bad swept value
included: each job's overrides carry the batch key that gave them
(``batch.toml:sweep.keys.grid.n_x[1]``), in place of the ``--set`` of the
command line.
"""

import dataclasses
import difflib
import glob
import hashlib
import itertools
import json
import math
import os
import string
import tomllib
from pathlib import Path

import astropy.units as u
import numpy as np

from pipeline.config import PARAMS_BY_KEY, config_from_dict, load_config, read_toml_file
from pipeline.errors import ConfigError

__all__ = ["BatchSpec", "JobSpec", "load_batch", "uniform_sphere_views", "toml_literal", "job_config"]

_TOP = ("batch", "sweep", "cluster")
_BATCH_KEYS = ("run_config", "output_directory", "name", "detection_threshold", "mask_level")
_SWEEP_KEYS = ("snapshots", "distances", "redshifts", "views", "instruments", "keys")
_VIEW_KEYS = ("pairs", "inclinations", "position_angles", "random", "seed", "hemisphere")
_CLUSTER_KEYS = {
    "kind": "one of 'slurm', 'pbs'",
    "jobs": "a whole number of batch-queue jobs, e.g. 4",
    "cores": "a whole number of cores per batch-queue job, e.g. 8",
    "processes": "a whole number of worker processes per batch-queue job, e.g. 4",
    "memory": "memory per batch-queue job as text, e.g. '32 GiB'",
    "walltime": "a wall-time limit as text, e.g. '04:00:00'",
    "queue": "a queue or partition name, e.g. 'compute'",
    "account": "an account or project name, e.g. 'galaxies'",
    "job_extra_directives": "a list of extra scheduler directives, e.g. ['--exclusive']",
    "job_script_prologue": "a list of shell lines run before the worker starts, e.g. ['module load python']",
    "local_directory": "a node-local scratch folder, e.g. '/tmp'",
    "log_directory": "a folder for the batch-queue job logs, e.g. 'dask-logs'",
    "interface": "a network interface name, e.g. 'ib0'",
}
_CLUSTER_INT = ("jobs", "cores", "processes")
_CLUSTER_LISTS = ("job_extra_directives", "job_script_prologue")
_DEFAULT_NAME = "{snapshot}_{index:04d}"
#: Fields every job offers to the name template, besides the swept keys.
_BASE_FIELDS = ("index", "snapshot", "view", "inclination", "position_angle", "distance", "redshift",
                "instrument")
_GLOB_CHARACTERS = frozenset("*?[")


@dataclasses.dataclass(frozen=True)
class JobSpec:
    """One job of a batch: the overrides applied to the base run config, and its parameters.

    Attributes
    ----------
    index : int
        Position in the expansion order (from 0).
    name : str
        Output name from the template; may hold sub-folders (``a/b``).
    overrides : tuple of str
        ``"key.path=value"`` strings applied on top of the base run config,
        output.directory and output.name included.
    origins : tuple of str
        Where each override comes from in the batch file, e.g.
        ``"batch.toml:sweep.keys.grid.n_x[1]"``: errors about its value start
        with it (`RunConfig.replace` ``origin``).
    parameters : dict
        Template fields of the job: ``snapshot`` (file stem), ``view``,
        ``inclination`` and ``position_angle`` (deg), ``distance`` (Mpc, or
        None), ``redshift`` (or None), ``instrument`` and the swept keys.
    snapshot_key : str
        Jobs with equal keys read the same snapshot the same way (path and
        every ``snapshot.*`` override), so they can share one read.
    digest : str
        SHA-256 of the base run config digest and the overrides: equal
        digests make equal outputs.
    """

    index: int
    name: str
    overrides: tuple
    origins: tuple
    parameters: dict
    snapshot_key: str
    digest: str


@dataclasses.dataclass(frozen=True)
class BatchSpec:
    """A validated batch: the base run config, the jobs and the catalogue settings.

    Attributes
    ----------
    source : str
        The batch file as named by the caller.
    base_text : str
        The base run config resolved to TOML (`RunConfig.to_toml`), absolute
        paths included; workers rebuild the config from it.
    base_source : str
        Name of the base run config file, used in its error messages.
    base_dir : pathlib.Path
        Folder of the base run config.
    output_dir : pathlib.Path
        Folder for every output, the manifest and the catalogue.
    jobs : tuple of JobSpec
    detection_threshold : float
        A job is detected when its integrated S/N is at least this.
    mask_level : float
        The source mask holds the voxels of the noise-free cube at or above
        this many channel rms.
    cluster : dict
        The ``[cluster]`` section, validated (empty when absent).
    digest : str
        SHA-256 of everything that decides the outputs (base config, job names
        and overrides, catalogue settings); a manifest records it.
    """

    source: str
    base_text: str
    base_source: str
    base_dir: Path
    output_dir: Path
    jobs: tuple
    detection_threshold: float
    mask_level: float
    cluster: dict
    digest: str

    def base_config(self):
        """Return the base run config (a `~pipeline.config.RunConfig`)."""
        return config_from_dict(tomllib.loads(self.base_text), source=self.base_source, base_dir=self.base_dir)

    def job_config(self, job, *, extra=()):
        """Return the run config of ``job``, with ``extra`` overrides on top."""
        return job_config(self.base_config(), job, extra=extra)


def job_config(base, job, *, extra=()):
    """Return ``base`` with the overrides of ``job`` (named by their places in the batch file) and ``extra``."""
    config = base.replace(job.overrides, origin=job.origins)
    return config.replace(extra) if extra else config


def toml_literal(value) -> str:
    """Return ``value`` (str, bool, int, float, or a list of them) as TOML value text.

    Examples
    --------
    >>> toml_literal("4 h"), toml_literal(True), toml_literal(["1 kpc", 2])
    ('"4 h"', 'true', '["1 kpc", 2]')
    """
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        return repr(float(value))
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_literal(item) for item in value) + "]"
    raise TypeError(f"value must be a TOML string, boolean, number or list; got {value!r}")


def uniform_sphere_views(n_views, *, seed, hemisphere=False):
    """Draw viewing angles uniform on the sphere (or the half facing the spin axis).

    Parameters
    ----------
    n_views : int
        Number of views.
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same views.
    hemisphere : bool
        Draw cos i uniform in [0, 1] (inclinations 0 to 90 deg) instead of
        [-1, 1] (0 to 180 deg).

    Returns
    -------
    inclination, position_angle : `~astropy.units.Quantity` ['angle'], shape (n_views,)
        In deg; position angles uniform in [0, 360).

    Notes
    -----
    A direction is uniform on the sphere when cos i is uniform and the azimuth
    is uniform (Archimedes' hat-box theorem: equal heights of a sphere's zones
    have equal areas).  The position angle is the rotation about the line of
    sight, drawn uniform and independently.

    Examples
    --------
    >>> inclination, position_angle = uniform_sphere_views(3, seed=1)
    >>> inclination.unit, bool(np.all((inclination >= 0 * u.deg) & (inclination <= 180 * u.deg)))
    (Unit("deg"), True)
    """
    rng = np.random.default_rng(seed)
    cos_i = rng.uniform(0.0 if hemisphere else -1.0, 1.0, n_views)
    position_angle = rng.uniform(0.0, 360.0, n_views)
    return np.degrees(np.arccos(cos_i)) * u.deg, position_angle * u.deg


def _show(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "[" + ", ".join(_show(item) for item in value) + "]"
    return repr(value)


def _unknown(origin, prefix, name, allowed):
    key = f"{prefix}.{name}" if prefix else name
    nearest = difflib.get_close_matches(name, list(allowed), n=1, cutoff=0.6)
    if nearest:
        guess = f"{prefix}.{nearest[0]}" if prefix else nearest[0]
        return ConfigError(f"{origin}:{key}: unknown key; did you mean '{guess}'?")
    return ConfigError(f"{origin}:{key}: unknown key; the valid keys are: {', '.join(allowed)}")


def _check_keys(origin, prefix, table, allowed):
    for name in table:
        if name not in allowed:
            raise _unknown(origin, prefix, name, allowed)


def _table(origin, key, value):
    if not isinstance(value, dict):
        raise ConfigError(f"{origin}:{key}: expected a table ([{key}]); got {_show(value)}")
    return value


def _list(origin, key, value, *, minimum=1):
    if not isinstance(value, list) or len(value) < minimum:
        raise ConfigError(f"{origin}:{key}: expected a list of at least {minimum} value(s); got {_show(value)}")
    return value


def _quantity(origin, key, raw, physical_type, example):
    expected = f"{physical_type.replace('_', ' ')}, e.g. '{example}'"
    if not isinstance(raw, str):
        what = " (a bare number; units are never assumed)" if isinstance(raw, (int, float)) else ""
        raise ConfigError(f"{origin}:{key}: expected {expected}; got {_show(raw)}{what}")
    try:
        quantity = u.Quantity(raw)
    except (TypeError, ValueError) as err:
        raise ConfigError(f"{origin}:{key}: expected {expected}; got {raw!r}, which astropy cannot read") from err
    if quantity.ndim != 0 or not np.isfinite(quantity.value) or not quantity.unit.is_equivalent(u.Unit(example.split()[1])):
        raise ConfigError(f"{origin}:{key}: expected {expected}; got {raw!r}")
    return quantity


def _number(origin, key, raw, *, integer=False, low=None, high=None, low_open=False):
    kind = "a whole number" if integer else "a number"
    ok = isinstance(raw, int) if integer else isinstance(raw, (int, float))
    if isinstance(raw, bool) or not ok or not math.isfinite(raw):
        raise ConfigError(f"{origin}:{key}: expected {kind}, e.g. {5 if integer else 5.0}; got {_show(raw)}")
    if low is not None and (raw <= low if low_open else raw < low):
        bound = f"greater than {low:g}" if low_open else f"at least {low:g}"
        raise ConfigError(f"{origin}:{key}: expected {kind} {bound}; got {_show(raw)}")
    if high is not None and raw > high:
        raise ConfigError(f"{origin}:{key}: expected {kind} of at most {high:g}; got {_show(raw)}")
    return raw


def _text(origin, key, raw):
    if not isinstance(raw, str) or not raw.strip():
        raise ConfigError(f"{origin}:{key}: expected a non-empty string; got {_show(raw)}")
    return raw


def _resolve(folder, text):
    path = Path(text).expanduser()
    return (path if path.is_absolute() else folder / path).resolve()


def _override(folder, key, value):
    """Return the ``key=value`` override of a batch-file value; a relative path starts at the batch file's folder."""
    param = PARAMS_BY_KEY.get(key)
    if param is not None and param.kind == "path" and isinstance(value, str):
        value = os.fspath(_resolve(folder, value))
    return f"{key}={toml_literal(value)}"


def _expand_snapshots(origin, folder, entries):
    """Return [(snapshot path, the sweep.snapshots entry that named it)]."""
    paths, places = [], []
    for position, entry in enumerate(_list(origin, "sweep.snapshots", entries)):
        key = f"sweep.snapshots[{position}]"
        entry = _text(origin, key, entry)
        if _GLOB_CHARACTERS & set(entry):
            pattern = os.fspath(_resolve(folder, entry)) if not Path(entry).is_absolute() else entry
            matches = sorted(Path(match).resolve() for match in glob.glob(pattern, recursive=True))
            if not matches:
                raise ConfigError(f"{origin}:{key}: expected a pattern matching snapshot files; "
                                  f"got {entry!r}, which matches no file")
            paths.extend(matches)
            places.extend([key] * len(matches))
        else:
            path = _resolve(folder, entry)
            if not path.is_file():
                raise ConfigError(f"{origin}:{key}: expected an existing snapshot file; got {entry!r} "
                                  f"({path} not found)")
            paths.append(path)
            places.append(key)
    duplicates = sorted({os.fspath(path) for path in paths if paths.count(path) > 1})
    if duplicates:
        raise ConfigError(f"{origin}:sweep.snapshots: expected each snapshot once; got {duplicates[0]} twice")
    return list(zip(paths, places))


def _expand_views(origin, table):
    """Return [(view index, ((inclination override, its place), (position angle override, its place)))]."""
    prefix = "sweep.views"
    _check_keys(origin, prefix, table, _VIEW_KEYS)
    forms = [form for form, keys in (("pairs", ("pairs",)), ("grid", ("inclinations", "position_angles")),
                                     ("random", ("random",))) if any(key in table for key in keys)]
    if len(forms) != 1:
        got = "none of them" if not forms else " and ".join(forms)
        raise ConfigError(f"{origin}:{prefix}: expected exactly one of pairs, inclinations with position_angles, "
                          f"or random; got {got}")
    form = forms[0]
    for key in ("seed", "hemisphere"):
        if key in table and form != "random":
            raise ConfigError(f"{origin}:{prefix}.{key}: expected only with random; got it with {form}")
    if form == "pairs":
        views = []
        for position, pair in enumerate(_list(origin, f"{prefix}.pairs", table["pairs"])):
            key = f"{prefix}.pairs[{position}]"
            if not isinstance(pair, list) or len(pair) != 2:
                raise ConfigError(f"{origin}:{key}: expected [inclination, position_angle], e.g. "
                                  f"['60 deg', '30 deg']; got {_show(pair)}")
            inclination = _quantity(origin, f"{key}[0]", pair[0], "an angle", "60 deg")
            position_angle = _quantity(origin, f"{key}[1]", pair[1], "an angle", "30 deg")
            views.append(((inclination, f"{key}[0]"), (position_angle, f"{key}[1]")))
    elif form == "grid":
        for key in ("inclinations", "position_angles"):
            if key not in table:
                raise ConfigError(f"{origin}:{prefix}.{key}: expected a list of angles to go with the other "
                                  "axis of the grid, e.g. ['0 deg', '90 deg']; got nothing")
        inclinations = [(_quantity(origin, f"{prefix}.inclinations[{k}]", raw, "an angle", "60 deg"),
                         f"{prefix}.inclinations[{k}]")
                        for k, raw in enumerate(_list(origin, f"{prefix}.inclinations", table["inclinations"]))]
        angles = [(_quantity(origin, f"{prefix}.position_angles[{k}]", raw, "an angle", "30 deg"),
                   f"{prefix}.position_angles[{k}]")
                  for k, raw in enumerate(_list(origin, f"{prefix}.position_angles", table["position_angles"]))]
        views = list(itertools.product(inclinations, angles))
    else:
        n_views = _number(origin, f"{prefix}.random", table["random"], integer=True, low=1)
        if "seed" not in table:
            raise ConfigError(f"{origin}:{prefix}.seed: expected a whole number seeding the random views, "
                              "e.g. 7; got nothing")
        seed = _number(origin, f"{prefix}.seed", table["seed"], integer=True, low=0)
        hemisphere = table.get("hemisphere", False)
        if not isinstance(hemisphere, bool):
            raise ConfigError(f"{origin}:{prefix}.hemisphere: expected true or false; got {_show(hemisphere)}")
        inclination, position_angle = uniform_sphere_views(n_views, seed=seed, hemisphere=hemisphere)
        views = [((i, f"{prefix}.random"), (pa, f"{prefix}.random")) for i, pa in zip(inclination, position_angle)]
    return [(index, ((f"geometry.inclination={toml_literal(f'{float(i.to_value(u.deg))!r} deg')}", i_place),
                     (f"geometry.position_angle={toml_literal(f'{float(pa.to_value(u.deg))!r} deg')}", pa_place)))
            for index, ((i, i_place), (pa, pa_place)) in enumerate(views)]


def _flatten_overrides(origin, prefix, table, *, leaf_is_list):
    """Return {run key: raw value} from nested tables (or quoted dotted keys), checking each run key."""
    flat = {}

    def walk(node, path, where):
        for name, value in node.items():
            key = f"{path}.{name}" if path else name
            place = f"{where}.{name}"
            if key in PARAMS_BY_KEY:
                flat[key] = (value, place)
            elif isinstance(value, dict) and any(other.startswith(key + ".") for other in PARAMS_BY_KEY):
                walk(value, key, place)
            else:
                nearest = difflib.get_close_matches(key, list(PARAMS_BY_KEY), n=1, cutoff=0.6)
                hint = f"; did you mean '{nearest[0]}'?" if nearest else ""
                raise ConfigError(f"{origin}:{place}: unknown run config key '{key}'{hint}")

    walk(table, "", prefix)
    for key, (value, place) in flat.items():
        if key.startswith("output."):
            raise ConfigError(f"{origin}:{place}: expected a run key other than output.* (the batch sets the "
                              f"output folder and names); got '{key}'")
        if leaf_is_list:
            _list(origin, place, value)
    return flat


def _check_template(origin, template, fields):
    try:
        parsed = list(string.Formatter().parse(template))
    except ValueError as err:
        raise ConfigError(f"{origin}:batch.name: expected a template such as '{_DEFAULT_NAME}'; got "
                          f"{template!r} ({err})") from err
    for _, field, _, _ in parsed:
        if field is None:
            continue
        base = field.split(".")[0].split("[")[0]
        if base not in fields:
            nearest = difflib.get_close_matches(base, fields, n=1, cutoff=0.6)
            hint = f"did you mean '{{{nearest[0]}}}'?" if nearest else f"the fields are: {', '.join(fields)}"
            raise ConfigError(f"{origin}:batch.name: expected fields of the job in the template; got "
                              f"'{{{field}}}', which is not one; {hint}")


def _format_name(origin, template, parameters, output_dir):
    try:
        name = template.format(**parameters)
    except (ValueError, TypeError, KeyError, IndexError) as err:
        raise ConfigError(f"{origin}:batch.name: expected a template that formats every job; got {template!r}, "
                          f"which fails for job {parameters['index']} ({err})") from err
    target = (output_dir / name).resolve()
    if not name.strip() or Path(name).is_absolute() or not target.is_relative_to(output_dir) \
            or target == output_dir or "\x00" in name:
        raise ConfigError(f"{origin}:batch.name: expected names inside the output folder {output_dir}; got "
                          f"{name!r} for job {parameters['index']}, which leads outside it")
    return name


def _describe(parameters):
    return ", ".join(f"{key}={value}" for key, value in parameters.items() if key != "index" and value is not None)


def _base_parameters(config):
    distance = config["observer.distance"]
    return {
        "inclination": float(config["geometry.inclination"].to_value(u.deg)),
        "position_angle": float(config["geometry.position_angle"].to_value(u.deg)),
        "distance": None if distance is None else float(distance.to_value(u.Mpc)),
        "redshift": config["observer.redshift"],
    }


def _check_cluster(origin, table):
    _check_keys(origin, "cluster", table, tuple(_CLUSTER_KEYS))
    if "kind" not in table:
        raise ConfigError(f"{origin}:cluster.kind: expected one of 'slurm', 'pbs'; got nothing")
    cluster = {}
    for key, value in table.items():
        place = f"cluster.{key}"
        if key == "kind":
            if value not in ("slurm", "pbs"):
                raise ConfigError(f"{origin}:{place}: expected one of 'slurm', 'pbs'; got {_show(value)}")
        elif key in _CLUSTER_INT:
            _number(origin, place, value, integer=True, low=1)
        elif key in _CLUSTER_LISTS:
            if not isinstance(value, list) or not all(isinstance(item, str) for item in value):
                raise ConfigError(f"{origin}:{place}: expected {_CLUSTER_KEYS[key]}; got {_show(value)}")
        elif not isinstance(value, str) or not value.strip():
            raise ConfigError(f"{origin}:{place}: expected {_CLUSTER_KEYS[key]}; got {_show(value)}")
        cluster[key] = value
    if "memory" in cluster:
        _quantity(origin, "cluster.memory", cluster["memory"], "an amount of memory", "32 GiB")
    return cluster


def load_batch(path, *, output_dir=None) -> BatchSpec:
    """Read a batch file, expand its sweep into jobs and validate every job.

    Parameters
    ----------
    path : str or os.PathLike
        The batch TOML file; relative paths in it start at its folder.
    output_dir : str or os.PathLike, optional
        Folder for the outputs, replacing ``batch.output_directory``.

    Returns
    -------
    BatchSpec

    Raises
    ------
    ConfigError
        If a key is unknown or malformed, a glob matches nothing, a view form
        is ambiguous, a job's run config breaks a rule, or the name template
        gives two jobs one name or a name outside the output folder.  The
        message starts with ``file:key.path:``.
    """
    origin = os.fspath(path)
    folder = Path(path).resolve().parent
    document = read_toml_file(path, what="batch file")
    _check_keys(origin, "", document, _TOP)
    batch = _table(origin, "batch", document.get("batch", {}))
    sweep = _table(origin, "sweep", document.get("sweep", {}))
    _check_keys(origin, "batch", batch, _BATCH_KEYS)
    _check_keys(origin, "sweep", sweep, _SWEEP_KEYS)
    cluster = _check_cluster(origin, _table(origin, "cluster", document["cluster"])) if "cluster" in document else {}
    if "run_config" not in batch:
        raise ConfigError(f"{origin}:batch.run_config: expected the base run config file, e.g. "
                          "run_config = 'single_cube.toml'; got nothing (this key is required)")
    base_path = _resolve(folder, _text(origin, "batch.run_config", batch["run_config"]))
    base = load_config(base_path)
    if output_dir is None:
        output_dir = _resolve(folder, _text(origin, "batch.output_directory",
                                             batch.get("output_directory", "batch_output")))
    output_dir = Path(output_dir).resolve()
    template = _text(origin, "batch.name", batch.get("name", _DEFAULT_NAME))
    threshold = float(_number(origin, "batch.detection_threshold", batch.get("detection_threshold", 5.0), low=0,
                              low_open=True))
    mask_level = float(_number(origin, "batch.mask_level", batch.get("mask_level", 0.5), low=0, low_open=True))

    # Each axis of the sweep is a list of settings: (override text, place in the batch file) pairs.
    snapshots = [(base["snapshot.path"], ())]
    if "snapshots" in sweep:
        snapshots = [(path, ((f"snapshot.path={toml_literal(os.fspath(path))}", place),))
                     for path, place in _expand_snapshots(origin, folder, sweep["snapshots"])]
    views = [(None, ())]
    if "views" in sweep:
        views = _expand_views(origin, _table(origin, "sweep.views", sweep["views"]))
    if "distances" in sweep and "redshifts" in sweep:
        raise ConfigError(f"{origin}:sweep.redshifts: expected distances or redshifts, not both; got both")
    distances = [()]
    if "distances" in sweep:
        distances = []
        for k, raw in enumerate(_list(origin, "sweep.distances", sweep["distances"])):
            place = f"sweep.distances[{k}]"
            distance = _quantity(origin, place, raw, "a length", "8.5 Mpc")
            distances.append(((f"observer.distance={toml_literal(distance.to_string())}", place),))
    elif "redshifts" in sweep:
        distances = []
        for k, raw in enumerate(_list(origin, "sweep.redshifts", sweep["redshifts"])):
            place = f"sweep.redshifts[{k}]"
            redshift = float(_number(origin, place, raw, low=0))
            distances.append(((f"observer.redshift={toml_literal(redshift)}", place),))
    instruments = [("base", ())]
    if "instruments" in sweep:
        table = _table(origin, "sweep.instruments", sweep["instruments"])
        if not table:
            raise ConfigError(f"{origin}:sweep.instruments: expected at least one [sweep.instruments.NAME] "
                              "table; got none")
        instruments = []
        for name, overrides in table.items():
            place = f"sweep.instruments.{name}"
            flat = _flatten_overrides(origin, place, _table(origin, place, overrides), leaf_is_list=False)
            instruments.append((name, tuple((_override(folder, key, value), where)
                                            for key, (value, where) in flat.items())))
    swept = {}
    if "keys" in sweep:
        swept = _flatten_overrides(origin, "sweep.keys", _table(origin, "sweep.keys", sweep["keys"]), leaf_is_list=True)
    swept_fields = {key: key.replace(".", "_") for key in swept}
    fields = (*_BASE_FIELDS, *swept_fields.values())
    _check_template(origin, template, fields)

    jobs, by_name = [], {}
    key_values = [[(key, value, (_override(folder, key, value), f"{place}[{k}]")) for k, value in enumerate(raw)]
                  for key, (raw, place) in swept.items()]
    combinations = itertools.product(snapshots, views, distances, instruments, itertools.product(*key_values))
    for index, (snapshot, view, distance, instrument, keyed) in enumerate(combinations):
        settings = [*snapshot[1], *view[1], *distance, *instrument[1], *(setting for _, _, setting in keyed)]
        overrides = [text for text, _ in settings]
        places = [f"{origin}:{place}" for _, place in settings]
        config = base.replace(overrides, origin=places)
        parameters = {"index": index, "snapshot": Path(snapshot[0]).stem, "view": view[0],
                      **_base_parameters(config), "instrument": instrument[0],
                      **{swept_fields[key]: value for key, value, _ in keyed}}
        name = _format_name(origin, template, parameters, output_dir)
        if name in by_name:
            other = by_name[name]
            raise ConfigError(f"{origin}:batch.name: expected a distinct name for every job; got {name!r} for job "
                              f"{other.index} ({_describe(other.parameters)}) and job {index} "
                              f"({_describe(parameters)}); add a field that tells them apart")
        folder_part, _, leaf = name.rpartition("/")
        job_dir = output_dir / folder_part if folder_part else output_dir
        overrides += [f"output.directory={toml_literal(os.fspath(job_dir))}", f"output.name={toml_literal(leaf)}"]
        places += [f"{origin}:batch.output_directory", f"{origin}:batch.name"]
        snapshot_overrides = sorted(text for text in overrides if text.startswith("snapshot."))
        snapshot_key = json.dumps([os.fspath(config["snapshot.path"]), snapshot_overrides])
        digest = hashlib.sha256(json.dumps([base.digest, overrides]).encode()).hexdigest()
        job = JobSpec(index=index, name=name, overrides=tuple(overrides), origins=tuple(places),
                      parameters=parameters, snapshot_key=snapshot_key, digest=digest)
        by_name[name] = job
        jobs.append(job)
    digest = hashlib.sha256(json.dumps([base.digest, [(job.name, job.overrides) for job in jobs], threshold,
                                        mask_level]).encode()).hexdigest()
    return BatchSpec(source=origin, base_text=base.to_toml(), base_source=base.source, base_dir=base.base_dir,
                     output_dir=output_dir, jobs=tuple(jobs), detection_threshold=threshold,
                     mask_level=mask_level, cluster=cluster, digest=digest)

