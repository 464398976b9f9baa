"""Opening HDF5 snapshots: cheap checks at open, chunked reads, and a readable listing."""

import dataclasses
import difflib
import math
import os
import pathlib

import h5py
import numpy as np

from ..errors import SnapshotError
from ._chunks import ParticleChunk
from ._fields import (FIELD_KINDS, REQUIRED_FIELDS, FieldSource, conversion_factor, count_values_with,
                      find_bad_values)

__all__ = ["Snapshot", "open_snapshot", "iter_positions", "describe_hdf5"]

_N_SUGGESTIONS = 5


@dataclasses.dataclass(frozen=True, eq=False)
class Snapshot:
    """An opened, checked snapshot file; reads particles chunk by chunk.

    Made by :func:`open_snapshot`, which checks everything this object
    relies on; build it through that function, not directly.  It holds no
    open file handle (each read opens and closes the file), so it is cheap
    to keep and can be pickled and sent to worker processes.

    Parameters
    ----------
    path : pathlib.Path
        The snapshot file.
    n_particles : int
        Number of gas particles in the file.
    little_h : float or None
        Hubble parameter h = H0 / (100 km/s/Mpc), if given or read.
    scale_factor : float or None
        Cosmological scale factor a, if given or read.
    chunk_particles : int
        Particles read per chunk.
    fields : dict of str to FieldSource
        Where each quantity comes from, keyed by field name.
    conversion_factors : dict of str to float
        Factor taking each field's stored numbers to internal units (kpc,
        km/s, Msun, K, 1, Msun/kpc^3), h and a factors included.
    """

    path: pathlib.Path
    n_particles: int
    little_h: float | None
    scale_factor: float | None
    chunk_particles: int
    fields: dict[str, FieldSource]
    conversion_factors: dict[str, float]

    def iter_chunks(self):
        """Yield every particle as `ParticleChunk` blocks of at most ``chunk_particles`` rows.

        Every field of the map is read, constants are broadcast, and each
        block is checked before it is yielded, so memory stays bounded by the
        chunk size whatever the file size.

        Yields
        ------
        ParticleChunk
            Consecutive particles, in file order, in internal units.

        Raises
        ------
        SnapshotError
            If the file can no longer be read or a value breaks its rule:
            NaN or infinite anywhere; mass, smoothing length, temperature or
            density zero or negative; a fraction outside [0, 1]; a negative
            metallicity.  The message names the dataset and the first bad
            row (counted from 0 in the file).
        """
        for arrays in _iter_arrays(self, tuple(self.fields)):
            yield ParticleChunk(**{FIELD_KINDS[name].attribute: values for name, values in arrays.items()})


def open_snapshot(path, *, fields, little_h=None, little_h_attribute=None, scale_factor=None,
                  scale_factor_attribute=None, chunk_particles=1_000_000):
    """Open an HDF5 snapshot and check, without reading the particle data, that it can be used.

    Parameters
    ----------
    path : str or os.PathLike
        The snapshot file.
    fields : dict of str to FieldSource
        Field map keyed by quantity: ``position``, ``velocity``, ``mass``,
        ``smoothing_length``, ``temperature``, ``neutral_fraction`` and
        ``hydrogen_fraction`` are required; ``molecular_fraction``,
        ``metallicity`` and ``density`` are optional.  Only ``temperature``
        and the fractions and metallicity may be constants.
    little_h : float, optional
        Hubble parameter h = H0 / (100 km/s/Mpc).  Give this or
        ``little_h_attribute`` when any field has a non-zero ``h_power``.
    little_h_attribute : str, optional
        HDF5 attribute holding little h, as ``"group/attribute"`` or
        ``"attribute"`` (on the root group).
    scale_factor : float, optional
        Cosmological scale factor a.  Give this or ``scale_factor_attribute``
        when any field has a non-zero ``a_power``.
    scale_factor_attribute : str, optional
        HDF5 attribute holding a, as for ``little_h_attribute``.
    chunk_particles : int, optional
        Particles read per chunk by `Snapshot.iter_chunks`.

    Returns
    -------
    Snapshot

    Raises
    ------
    SnapshotError
        If the file is missing, unreadable or not HDF5; a field is unknown,
        missing or may not be a constant; a dataset is missing, not numeric,
        of the wrong shape, or of a different length from the others; a unit
        has the wrong physical type; little h or the scale factor is needed
        but not given, missing from the file, or not a positive number.

    Notes
    -----
    Each field's stored numbers are multiplied by ``unit.to(internal) ×
    h**h_power × a**a_power``, the internal units being kpc, km/s, Msun, K,
    1 and Msun/kpc^3.  Gadget-style files, for example, store comoving
    lengths in kpc/h (``h_power=-1, a_power=1``), masses in 1e10 Msun/h
    (``h_power=-1``) and velocities such that the peculiar velocity is
    sqrt(a) times the stored one (``a_power=0.5``).
    """
    label = os.fspath(path)
    chunk_particles = _check_chunk_particles(chunk_particles, label=label)
    fields = _check_field_map(fields, label=label)
    path = _check_file(path)
    try:
        with h5py.File(path, "r") as handle:
            little_h = _resolve_parameter(handle, "little_h", little_h, little_h_attribute, label=label)
            scale_factor = _resolve_parameter(handle, "scale_factor", scale_factor, scale_factor_attribute,
                                              label=label)
            n_particles = _check_datasets(handle, fields, label=label)
    except OSError as err:
        raise SnapshotError(f"{label}: cannot be read: {err}") from err
    factors = {}
    for name, source in fields.items():
        field_label = f"{label}:{source.dataset}" if source.dataset is not None else f"{label}:{name} value"
        _check_parameter_given(name, source, little_h=little_h, scale_factor=scale_factor, label=label)
        factors[name] = conversion_factor(name, source, little_h=little_h, scale_factor=scale_factor,
                                          label=field_label)
        if source.dataset is None:
            bad = find_bad_values(np.array([source.value * factors[name]]), name)
            if bad is not None:
                stated = f"{source.value:g} {source.unit}".strip()
                raise SnapshotError(f"{label}: the constant {name} ({stated}) is {bad[2]}")
    return Snapshot(path=path, n_particles=n_particles, little_h=little_h, scale_factor=scale_factor,
                    chunk_particles=chunk_particles, fields=fields, conversion_factors=factors)


def iter_positions(snapshot, *, with_velocity=False):
    """Yield positions and masses (and velocities) chunk by chunk, for geometry passes.

    Reads only the datasets a centring or orientation pass needs.

    Parameters
    ----------
    snapshot : Snapshot or MemorySnapshot
        An opened snapshot, or one held in memory (whose chunks are then
        served from memory).
    with_velocity : bool, optional
        Also read the velocities.

    Yields
    ------
    position_kpc : numpy.ndarray, shape (n, 3)
    mass_msun : numpy.ndarray, shape (n,)
    velocity_kms : numpy.ndarray, shape (n, 3), or None
        None unless ``with_velocity``.

    Raises
    ------
    SnapshotError
        As for `Snapshot.iter_chunks`, for the quantities read.
    """
    if not isinstance(snapshot, Snapshot):
        for chunk in snapshot.iter_chunks():
            yield chunk.position_kpc, chunk.mass_msun, chunk.velocity_kms if with_velocity else None
        return
    names = ("position", "mass", "velocity") if with_velocity else ("position", "mass")
    for arrays in _iter_arrays(snapshot, names):
        yield arrays["position"], arrays["mass"], arrays.get("velocity")


def describe_hdf5(path):
    """Return an indented listing of every group, dataset and attribute of an HDF5 file.

    Datasets are shown with their shape and dtype; attributes as
    ``@name = value``, with long arrays and strings shortened.  Soft and
    external links are shown with their targets and not followed.

    Parameters
    ----------
    path : str or os.PathLike
        The HDF5 file.

    Returns
    -------
    str
        One line per item; nesting is shown by two-space indentation.

    Raises
    ------
    SnapshotError
        If the file is missing, unreadable or not HDF5.
    """
    label = os.fspath(path)
    path = _check_file(path)
    lines = [label]
    try:
        with h5py.File(path, "r") as handle:
            _describe_group(handle, 1, lines, seen={handle.id: "/"})
    except OSError as err:
        raise SnapshotError(f"{label}: cannot be read: {err}") from err
    return "\n".join(lines)


def _check_chunk_particles(chunk_particles, *, label):
    """Return chunk_particles as an int after checking it is at least 1."""
    if isinstance(chunk_particles, bool) or not isinstance(chunk_particles, (int, np.integer)) \
            or chunk_particles < 1:
        raise SnapshotError(f"{label}: chunk_particles must be a whole number of at least 1, "
                            f"e.g. 1000000; got {chunk_particles!r}")
    return int(chunk_particles)


def _check_field_map(fields, *, label):
    """Return a copy of the field map after checking names, required fields and constants."""
    if not isinstance(fields, dict):
        raise SnapshotError(f"{label}: fields must be a dict of field name to FieldSource; got {fields!r}")
    for name, source in fields.items():
        if name not in FIELD_KINDS:
            raise SnapshotError(f"{label}: unknown field {name!r}; known fields: {', '.join(FIELD_KINDS)}")
        if not isinstance(source, FieldSource):
            raise SnapshotError(f"{label}: field '{name}' must be given as a FieldSource; got {source!r}")
        if source.dataset is None and not FIELD_KINDS[name].may_be_constant:
            allowed = ", ".join(key for key, kind in FIELD_KINDS.items() if kind.may_be_constant)
            raise SnapshotError(f"{label}: field '{name}' must come from a dataset; "
                                f"only {allowed} may be constants")
    missing = [name for name in REQUIRED_FIELDS if name not in fields]
    if missing:
        raise SnapshotError(f"{label}: required field(s) {', '.join(missing)} missing from the field map; "
                            "give each a dataset or a constant value")
    return {name: fields[name] for name in FIELD_KINDS if name in fields}


def _check_file(path):
    """Return path as a Path after checking it is a readable HDF5 file."""
    label = os.fspath(path)
    path = pathlib.Path(path)
    if not path.exists():
        raise SnapshotError(f"{label}: file not found")
    try:
        with open(path, "rb"):
            pass
    except OSError as err:
        raise SnapshotError(f"{label}: cannot be read: {err.strerror or err}") from err
    if not h5py.is_hdf5(path):
        raise SnapshotError(f"{label}: not an HDF5 file")
    return path


def _resolve_parameter(handle, name, value, attribute, *, label):
    """Return little h or the scale factor, given directly or read from an attribute, or None."""
    if value is not None and attribute is not None:
        raise SnapshotError(f"{label}: give {name} or {name}_attribute, not both; "
                            f"got {value!r} and {attribute!r}")
    if attribute is not None:
        value = _read_attribute(handle, attribute, name, label=label)
        source = f" (attribute '{attribute}')"
    elif value is not None:
        source = ""
    else:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) \
            or not math.isfinite(value) or value <= 0:
        raise SnapshotError(f"{label}: {name}{source} must be a positive finite number; got {value!r}")
    return float(value)


def _read_attribute(handle, spec, name, *, label):
    """Return the single number stored in attribute ``spec`` ('group/attribute' or 'attribute')."""
    if not isinstance(spec, str) or not spec.strip("/"):
        raise SnapshotError(f"{label}: {name}_attribute must be 'group/attribute' or 'attribute'; "
                            f"got {spec!r}")
    owner_path, _, attribute = spec.strip("/").rpartition("/")
    if owner_path and owner_path not in handle:
        raise SnapshotError(f"{label}: attribute '{spec}' for {name} not found: "
                            f"the file has no group or dataset '{owner_path}'")
    owner = handle[owner_path] if owner_path else handle
    if attribute not in owner.attrs:
        present = ", ".join(sorted(owner.attrs)) or "none"
        raise SnapshotError(f"{label}: attribute '{spec}' for {name} not found; "
                            f"attributes of '{owner.name}': {present}")
    stored = np.asarray(owner.attrs[attribute])
    if stored.size != 1 or stored.dtype.kind not in "iuf":
        raise SnapshotError(f"{label}: attribute '{spec}' for {name} must hold a single number; "
                            f"got {_format_attribute(owner.attrs[attribute])}")
    return stored.reshape(()).item()


def _check_datasets(handle, fields, *, label):
    """Return the particle count after checking every dataset's presence, dtype and shape."""
    n_particles = None
    reference = None
    for name, source in fields.items():
        if source.dataset is None:
            continue
        dataset_label = f"{label}:{source.dataset}"
        dataset = handle.get(source.dataset)
        if not isinstance(dataset, h5py.Dataset):
            what = "is a group, not a dataset" if isinstance(dataset, h5py.Group) else "dataset not found"
            raise SnapshotError(f"{dataset_label}: {what}; {_nearby_datasets(handle, source.dataset)}")
        if dataset.dtype.kind not in "iuf":
            raise SnapshotError(f"{dataset_label}: expected numbers (integer or floating point), "
                                f"got dtype {dataset.dtype}")
        is_vector = FIELD_KINDS[name].is_vector
        expected_ndim = 2 if is_vector else 1
        if dataset.ndim != expected_ndim or (is_vector and dataset.shape[1] != 3):
            expected = "(n, 3)" if is_vector else "(n,)"
            raise SnapshotError(f"{dataset_label}: expected shape {expected} for the {name}, "
                                f"got {dataset.shape}")
        if n_particles is None:
            n_particles, reference = dataset.shape[0], source.dataset
            if n_particles == 0:
                raise SnapshotError(f"{dataset_label}: holds no particles")
        elif dataset.shape[0] != n_particles:
            kind = "rows" if is_vector else "values"
            raise SnapshotError(f"{dataset_label}: expected {n_particles} {kind} (as {reference}), "
                                f"got {dataset.shape[0]}")
    return int(n_particles)


def _nearby_datasets(handle, wanted):
    """Return 'datasets in the file: ...' listing the names closest to ``wanted``."""
    names = []
    handle.visititems(lambda name, item: names.append(name) if isinstance(item, h5py.Dataset) else None)
    if not names:
        return "the file holds no datasets"
    close = difflib.get_close_matches(wanted.strip("/"), names, n=_N_SUGGESTIONS, cutoff=0.0)
    more = ", ..." if len(names) > len(close) else ""
    return f"datasets in the file: {', '.join(close)}{more}"


def _check_parameter_given(name, source, *, little_h, scale_factor, label):
    """Refuse a non-zero h or a power when that parameter is unknown."""
    for power, value, parameter in ((source.h_power, little_h, "little_h"),
                                    (source.a_power, scale_factor, "scale_factor")):
        if power and value is None:
            kind = "h_power" if parameter == "little_h" else "a_power"
            raise SnapshotError(f"{label}: field '{name}' has {kind} = {power:g} but {parameter} is unknown; "
                                f"give {parameter} or {parameter}_attribute")


def _iter_arrays(snapshot, names):
    """Yield dicts of checked float64 arrays, in internal units, for the fields ``names``."""
    label = os.fspath(snapshot.path)
    try:
        with h5py.File(snapshot.path, "r") as handle:
            datasets = {}
            for name in names:
                source = snapshot.fields[name]
                if source.dataset is None:
                    continue
                dataset = handle.get(source.dataset)
                if not isinstance(dataset, h5py.Dataset) or dataset.shape[:1] != (snapshot.n_particles,):
                    raise SnapshotError(f"{label}:{source.dataset}: the file changed since it was opened "
                                        f"(expected a dataset of {snapshot.n_particles} rows)")
                datasets[name] = dataset
            for start in range(0, snapshot.n_particles, snapshot.chunk_particles):
                stop = min(start + snapshot.chunk_particles, snapshot.n_particles)
                yield {name: _read_field(snapshot, name, datasets.get(name), start, stop, label=label)
                       for name in names}
    except OSError as err:
        raise SnapshotError(f"{label}: cannot be read: {err}") from err


def _read_field(snapshot, name, dataset, start, stop, *, label):
    """Return rows start:stop of one field as a checked float64 array in internal units."""
    source = snapshot.fields[name]
    if dataset is None:
        return np.full(stop - start, source.value * snapshot.conversion_factors[name])
    values = _read_rows(snapshot, name, dataset, start, stop)
    bad = find_bad_values(values, name)
    if bad is not None:
        n_bad, first, problem = bad
        row = start + first // (values.size // values.shape[0])
        n_bad += _count_bad_after(snapshot, name, dataset, stop, problem)
        count = "1 value is" if n_bad == 1 else f"{n_bad} values are"
        raise SnapshotError(f"{label}:{source.dataset}: {count} {problem} (first at row {row})")
    return values


def _read_rows(snapshot, name, dataset, start, stop):
    """Return rows start:stop of a dataset as float64 in internal units (overflow gives inf)."""
    values = np.ascontiguousarray(dataset[start:stop], dtype=np.float64)
    factor = snapshot.conversion_factors[name]
    if factor != 1.0:
        with np.errstate(over="ignore"):
            values *= factor
    return values


def _count_bad_after(snapshot, name, dataset, start, problem):
    """Return how many values from row ``start`` on show ``problem``, reading chunk by chunk."""
    n_bad = 0
    for begin in range(start, snapshot.n_particles, snapshot.chunk_particles):
        stop = min(begin + snapshot.chunk_particles, snapshot.n_particles)
        n_bad += count_values_with(_read_rows(snapshot, name, dataset, begin, stop), problem)
    return n_bad


def _describe_group(group, depth, lines, *, seen):
    """Append the listing of ``group``'s attributes and members to ``lines``; ``seen`` maps ids to paths."""
    indent = "  " * depth
    _describe_attributes(group, indent, lines)
    for name in group:
        link = group.get(name, getlink=True)
        if isinstance(link, h5py.SoftLink):
            lines.append(f"{indent}{name} -> {link.path}  (soft link)")
            continue
        if isinstance(link, h5py.ExternalLink):
            lines.append(f"{indent}{name} -> {link.filename}:{link.path}  (external link)")
            continue
        item = group[name]
        if item.id in seen:
            lines.append(f"{indent}{name}  (same object as {seen[item.id]}, listed above)")
            continue
        seen[item.id] = f"{group.name.rstrip('/')}/{name}"
        if isinstance(item, h5py.Dataset):
            lines.append(f"{indent}{name}  shape {item.shape}  {item.dtype}")
            _describe_attributes(item, indent + "  ", lines)
        elif isinstance(item, h5py.Group):
            lines.append(f"{indent}{name}/")
            _describe_group(item, depth + 1, lines, seen=seen)
        else:
            lines.append(f"{indent}{name}  (named datatype {item.dtype})")


def _describe_attributes(item, indent, lines):
    """Append one ``@name = value`` line per attribute of ``item``."""
    for name in item.attrs:
        lines.append(f"{indent}@{name} = {_format_attribute(item.attrs[name])}")


def _format_attribute(value):
    """Return a short one-line text for an attribute value."""
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="replace")
    if isinstance(value, np.ndarray) and value.ndim > 0:
        text = np.array2string(value, threshold=6, edgeitems=3, separator=", ", max_line_width=10_000)
        text = " ".join(text.split())
        if value.size > 6:
            text += f"  (shape {value.shape})"
    else:
        text = repr(value.item() if isinstance(value, np.generic) else value)
    return text if len(text) <= 80 else text[:77] + "..."
