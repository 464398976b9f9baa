"""Tests of opening, checking and reading HDF5 snapshots."""

import pickle
import tracemalloc

import astropy.units as u
import h5py
import numpy as np
import pytest
from astropy.cosmology import Planck18
from astropy.cosmology import units as cu

import pipeline.particles._hdf5 as hdf5_module
from pipeline.errors import SnapshotError
from pipeline.particles import FieldSource, ParticleChunk, describe_hdf5, iter_positions, open_snapshot

DATASETS = ("position", "velocity", "mass", "smoothing_length", "temperature", "neutral_fraction")


def layout_fields(**changes):
    """Field map of the conftest layout; keyword arguments replace (or, with None, drop) entries."""
    fields = {
        "position": FieldSource(dataset="gas/position", unit=u.kpc),
        "velocity": FieldSource(dataset="gas/velocity", unit=u.km / u.s),
        "mass": FieldSource(dataset="gas/mass", unit=u.Msun),
        "smoothing_length": FieldSource(dataset="gas/smoothing_length", unit=u.kpc),
        "temperature": FieldSource(dataset="gas/temperature", unit=u.K),
        "neutral_fraction": FieldSource(dataset="gas/neutral_fraction", unit=u.dimensionless_unscaled),
        "hydrogen_fraction": FieldSource(value=0.76, unit=u.dimensionless_unscaled),
    }
    fields.update(changes)
    return {name: source for name, source in fields.items() if source is not None}


def read_all(path):
    """Read every dataset of group gas directly with h5py (the reference for chunked reads)."""
    with h5py.File(path, "r") as handle:
        return {name: handle["gas"][name][...] for name in handle["gas"]}


# --- reading -----------------------------------------------------------------------------------

@pytest.mark.parametrize("chunk_particles", [1, 7, 100])
def test_chunked_reading_equals_a_whole_read(make_snapshot, chunk_particles):
    path = make_snapshot(100, temperature=np.linspace(100.0, 1e4, 100))
    snapshot = open_snapshot(path, fields=layout_fields(), chunk_particles=chunk_particles)
    chunks = list(snapshot.iter_chunks())
    assert len(chunks) == -(-100 // chunk_particles)
    joined = ParticleChunk.concatenate(chunks)
    stored = read_all(path)
    np.testing.assert_array_equal(joined.position_kpc, stored["position"])
    np.testing.assert_array_equal(joined.velocity_kms, stored["velocity"])
    np.testing.assert_array_equal(joined.mass_msun, stored["mass"])
    np.testing.assert_array_equal(joined.h_kpc, stored["smoothing_length"])
    np.testing.assert_array_equal(joined.temperature_k, stored["temperature"])
    np.testing.assert_array_equal(joined.neutral_fraction, stored["neutral_fraction"])
    np.testing.assert_array_equal(joined.hydrogen_fraction, np.full(100, 0.76))
    assert joined.molecular_fraction is None and joined.metallicity is None and joined.density_msun_kpc3 is None


def test_no_chunk_exceeds_chunk_particles(make_snapshot):
    path = make_snapshot(1050)
    sizes = [chunk.n_particles for chunk in open_snapshot(path, fields=layout_fields(),
                                                          chunk_particles=100).iter_chunks()]
    assert max(sizes) == 100
    assert sum(sizes) == 1050
    assert all(arrays[0].shape[0] <= 100 for arrays in
               iter_positions(open_snapshot(path, fields=layout_fields(), chunk_particles=100)))


def test_peak_memory_follows_the_chunk_not_the_file(make_snapshot):
    n_particles = 40_000
    path = make_snapshot(n_particles)
    snapshot = open_snapshot(path, fields=layout_fields(), chunk_particles=500)
    whole_bytes = n_particles * 12 * 8  # 12 float64 numbers per particle once read
    tracemalloc.start()
    try:
        total_mass = sum(chunk.mass_msun.sum() for chunk in snapshot.iter_chunks())
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert total_mass == pytest.approx(n_particles * 1e5, rel=1e-12)
    # Bound chosen here (common practice, no source): well under a tenth of a whole read.
    assert peak < whole_bytes / 10


def test_dtypes_are_converted_to_float64(make_snapshot, rng):
    path = make_snapshot(50, mass=np.full(50, 3, dtype=np.int32),
                         position=rng.normal(size=(50, 3)).astype(np.float32))
    chunk = next(open_snapshot(path, fields=layout_fields()).iter_chunks())
    assert chunk.mass_msun.dtype == np.float64 and chunk.position_kpc.dtype == np.float64
    assert chunk.position_kpc.flags.c_contiguous
    np.testing.assert_array_equal(chunk.mass_msun, 3.0)


def test_gadget_like_units_and_factors_match_astropy(make_snapshot, rng):
    n_particles = 64
    little_h, redshift = 0.6766, 1.5
    scale_factor = float(Planck18.scale_factor(redshift))
    stored = {
        "position": rng.uniform(0.0, 2.5e4, (n_particles, 3)),
        "velocity": rng.normal(0.0, 80.0, (n_particles, 3)),
        "mass": rng.uniform(1e-5, 3e-5, n_particles),
        "smoothing_length": rng.uniform(0.1, 2.0, n_particles),
        "density": rng.uniform(1e-3, 1.0, n_particles),
    }
    path = make_snapshot(n_particles, **stored)
    with h5py.File(path, "a") as handle:
        header = handle.create_group("Header")
        header.attrs["HubbleParam"] = little_h
        header.attrs["Time"] = scale_factor
    fields = layout_fields(
        position=FieldSource(dataset="gas/position", unit=u.kpc, h_power=-1, a_power=1),
        velocity=FieldSource(dataset="gas/velocity", unit=u.km / u.s, a_power=0.5),
        mass=FieldSource(dataset="gas/mass", unit=u.Unit("1e10 Msun"), h_power=-1),
        smoothing_length=FieldSource(dataset="gas/smoothing_length", unit=u.kpc, h_power=-1, a_power=1),
        density=FieldSource(dataset="gas/density", unit=u.Unit("1e10 Msun / kpc3"), h_power=2, a_power=-3),
    )
    snapshot = open_snapshot(path, fields=fields, little_h_attribute="Header/HubbleParam",
                             scale_factor_attribute="Header/Time")
    assert snapshot.little_h == little_h and snapshot.scale_factor == scale_factor
    chunk = ParticleChunk.concatenate(snapshot.iter_chunks())

    # Reference: astropy.cosmology.units.with_H0 for the littleh factors, and the ratio of
    # proper to comoving kpc per arcmin (astropy Planck18) for the comoving-to-proper factor a.
    with_h = cu.with_H0(100 * little_h * u.km / u.s / u.Mpc)
    proper_per_comoving = (Planck18.kpc_proper_per_arcmin(redshift)
                           / Planck18.kpc_comoving_per_arcmin(redshift)).decompose().value
    position = (stored["position"] * u.kpc / cu.littleh).to(u.kpc, with_h) * proper_per_comoving
    h = (stored["smoothing_length"] * u.kpc / cu.littleh).to(u.kpc, with_h) * proper_per_comoving
    mass = (stored["mass"] * 1e10 * u.Msun / cu.littleh).to(u.Msun, with_h)
    density = (stored["density"] * 1e10 * u.Msun / cu.littleh / (u.kpc / cu.littleh) ** 3).to(
        u.Msun / u.kpc**3, with_h) / proper_per_comoving**3
    # Gadget-2 user guide (Springel 2005), from memory: peculiar velocity = sqrt(a) x stored value.
    velocity = stored["velocity"] * np.sqrt(scale_factor) * u.km / u.s
    assert u.allclose(chunk.position_kpc * u.kpc, position, rtol=1e-12)
    assert u.allclose(chunk.h_kpc * u.kpc, h, rtol=1e-12)
    assert u.allclose(chunk.mass_msun * u.Msun, mass, rtol=1e-12)
    assert u.allclose(chunk.density_msun_kpc3 * u.Msun / u.kpc**3, density, rtol=1e-12)
    assert u.allclose(chunk.velocity_kms * u.km / u.s, velocity, rtol=1e-12)


def test_units_are_converted_as_astropy_converts_them(make_snapshot):
    path = make_snapshot(20)
    stored = read_all(path)
    fields = layout_fields(
        position=FieldSource(dataset="gas/position", unit=u.pc),
        velocity=FieldSource(dataset="gas/velocity", unit=u.cm / u.s),
        mass=FieldSource(dataset="gas/mass", unit=u.kg),
        neutral_fraction=FieldSource(dataset="gas/neutral_fraction", unit=u.percent),
    )
    chunk = next(open_snapshot(path, fields=fields).iter_chunks())
    # Reference: astropy unit conversion.
    assert u.allclose(chunk.position_kpc * u.kpc, stored["position"] * u.pc, rtol=1e-14)
    assert u.allclose(chunk.velocity_kms * u.km / u.s, stored["velocity"] * u.cm / u.s, rtol=1e-14)
    assert u.allclose(chunk.mass_msun * u.Msun, stored["mass"] * u.kg, rtol=1e-14)
    assert u.allclose(chunk.neutral_fraction, (stored["neutral_fraction"] * u.percent).to(u.one), rtol=1e-14)


def test_attributes_are_read_at_the_root_and_in_groups(make_snapshot):
    path = make_snapshot(10)
    with h5py.File(path, "a") as handle:
        handle.create_group("Header").attrs["Redshift_a"] = np.array([0.25])
    snapshot = open_snapshot(path, fields=layout_fields(), little_h_attribute="little_h",
                             scale_factor_attribute="/Header/Redshift_a")
    assert snapshot.little_h == 0.7
    assert snapshot.scale_factor == 0.25
    assert snapshot.n_particles == 10
    assert snapshot.path == path


def test_little_h_and_scale_factor_given_directly(make_snapshot):
    snapshot = open_snapshot(make_snapshot(10), fields=layout_fields(), little_h=0.68, scale_factor=1)
    assert snapshot.little_h == 0.68 and snapshot.scale_factor == 1.0
    assert open_snapshot(make_snapshot(10, name="b.h5"), fields=layout_fields()).little_h is None


def test_constant_fields_are_broadcast(make_snapshot):
    path = make_snapshot(30, temperature=None)
    fields = layout_fields(temperature=FieldSource(value=1.2e4, unit=u.K),
                           metallicity=FieldSource(value=2.0, unit=u.percent),
                           molecular_fraction=FieldSource(value=0.0, unit=u.one))
    chunks = list(open_snapshot(path, fields=fields, chunk_particles=8).iter_chunks())
    assert [chunk.n_particles for chunk in chunks] == [8, 8, 8, 6]
    joined = ParticleChunk.concatenate(chunks)
    np.testing.assert_array_equal(joined.temperature_k, np.full(30, 1.2e4))
    np.testing.assert_allclose(joined.metallicity, np.full(30, 0.02), rtol=1e-15)
    np.testing.assert_array_equal(joined.molecular_fraction, np.zeros(30))


def test_iter_positions_reads_position_mass_and_optionally_velocity(make_snapshot):
    path = make_snapshot(25, mass=np.linspace(1.0, 2.0, 25))
    fields = layout_fields(mass=FieldSource(dataset="gas/mass", unit=u.Unit("1e3 Msun")))
    snapshot = open_snapshot(path, fields=fields, chunk_particles=10)
    stored = read_all(path)
    without = list(iter_positions(snapshot))
    assert [len(item) for item in without] == [3, 3, 3]
    assert all(velocity is None for _, _, velocity in without)
    np.testing.assert_array_equal(np.concatenate([p for p, _, _ in without]), stored["position"])
    np.testing.assert_allclose(np.concatenate([m for _, m, _ in without]), stored["mass"] * 1e3, rtol=1e-15)
    with_velocity = list(iter_positions(snapshot, with_velocity=True))
    np.testing.assert_array_equal(np.concatenate([v for _, _, v in with_velocity]), stored["velocity"])


def test_snapshot_survives_pickling(make_snapshot):
    snapshot = open_snapshot(make_snapshot(12), fields=layout_fields(), chunk_particles=5)
    copy = pickle.loads(pickle.dumps(snapshot))
    original = ParticleChunk.concatenate(snapshot.iter_chunks())
    restored = ParticleChunk.concatenate(copy.iter_chunks())
    np.testing.assert_array_equal(original.position_kpc, restored.position_kpc)
    assert copy.conversion_factors == snapshot.conversion_factors


def test_file_is_closed_between_iterations(make_snapshot):
    path = make_snapshot(20)
    snapshot = open_snapshot(path, fields=layout_fields(), chunk_particles=5)
    chunks = snapshot.iter_chunks()
    next(chunks)
    chunks.close()
    # Opening for writing fails while another handle holds the file (HDF5 file locking).
    with h5py.File(path, "a") as handle:
        handle.attrs["touched"] = 1


# --- refusals at open --------------------------------------------------------------------------

def test_missing_file_is_refused(tmp_path):
    with pytest.raises(SnapshotError, match=r"nothere\.h5: file not found"):
        open_snapshot(tmp_path / "nothere.h5", fields=layout_fields())


def test_directory_is_refused(tmp_path):
    with pytest.raises(SnapshotError, match=r": cannot be read: Is a directory"):
        open_snapshot(tmp_path, fields=layout_fields())


def test_text_file_is_refused(tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("not a snapshot\n")
    with pytest.raises(SnapshotError, match=r"notes\.h5: not an HDF5 file"):
        open_snapshot(path, fields=layout_fields())


def test_h5py_open_failure_is_wrapped(make_snapshot, monkeypatch):
    path = make_snapshot(10)

    def refuse(*args, **kwargs):
        raise OSError("unable to lock file")

    monkeypatch.setattr(hdf5_module.h5py, "File", refuse)
    with pytest.raises(SnapshotError, match=r"snapshot\.h5: cannot be read: unable to lock file") as info:
        open_snapshot(path, fields=layout_fields())
    assert isinstance(info.value.__cause__, OSError)
    with pytest.raises(SnapshotError, match=r"snapshot\.h5: cannot be read: unable to lock file"):
        describe_hdf5(path)


def test_missing_dataset_lists_nearby_names(make_snapshot):
    path = make_snapshot(10)
    fields = layout_fields(mass=FieldSource(dataset="gas/masses", unit=u.Msun))
    with pytest.raises(SnapshotError, match=r"snapshot\.h5:gas/masses: dataset not found; "
                                            r"datasets in the file: gas/mass, .*\.\.\.$"):
        open_snapshot(path, fields=fields)


def test_group_given_as_dataset_is_refused(make_snapshot):
    fields = layout_fields(mass=FieldSource(dataset="gas", unit=u.Msun))
    with pytest.raises(SnapshotError, match=r":gas: is a group, not a dataset; datasets in the file"):
        open_snapshot(make_snapshot(10), fields=fields)


def test_missing_dataset_in_a_file_without_datasets(tmp_path):
    path = tmp_path / "empty.h5"
    h5py.File(path, "w").close()
    with pytest.raises(SnapshotError, match=r"gas/position: dataset not found; the file holds no datasets"):
        open_snapshot(path, fields=layout_fields())


@pytest.mark.parametrize(("dataset", "values", "message"), [
    ("position", np.zeros(10), r"gas/position: expected shape \(n, 3\) for the position, got \(10,\)"),
    ("velocity", np.zeros((10, 2)), r"gas/velocity: expected shape \(n, 3\) for the velocity, got \(10, 2\)"),
    ("mass", np.ones((10, 3)), r"gas/mass: expected shape \(n,\) for the mass, got \(10, 3\)"),
    ("temperature", np.ones((10, 1)), r"gas/temperature: expected shape \(n,\)"),
])
def test_wrong_shape_is_refused(make_snapshot, dataset, values, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10, **{dataset: values}), fields=layout_fields())


@pytest.mark.parametrize(("dataset", "values", "message"), [
    ("mass", np.ones(999), r"gas/mass: expected 1000 values \(as gas/position\), got 999"),
    ("velocity", np.zeros((1001, 3)), r"gas/velocity: expected 1000 rows \(as gas/position\), got 1001"),
])
def test_length_mismatch_is_refused(make_snapshot, dataset, values, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(1000, **{dataset: values}), fields=layout_fields())


def test_empty_snapshot_is_refused(make_snapshot):
    with pytest.raises(SnapshotError, match=r"gas/position: holds no particles"):
        open_snapshot(make_snapshot(0), fields=layout_fields())


def test_non_numeric_dataset_is_refused(make_snapshot):
    path = make_snapshot(4, temperature=np.array([b"warm", b"cold", b"warm", b"hot"]))
    with pytest.raises(SnapshotError, match=r"gas/temperature: expected numbers .* got dtype \|S4"):
        open_snapshot(path, fields=layout_fields())


@pytest.mark.parametrize(("field", "source", "message"), [
    ("mass", FieldSource(dataset="gas/mass", unit=u.s), r"snapshot\.h5:gas/mass: unit 's' of field 'mass' is a time"),
    ("temperature", FieldSource(value=100.0, unit=u.kpc),
     r"snapshot\.h5:temperature value: unit 'kpc' of field 'temperature' is a length; expected a temperature"),
])
def test_unit_of_the_wrong_type_is_refused(make_snapshot, field, source, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10), fields=layout_fields(**{field: source}))


@pytest.mark.parametrize(("field", "source", "message"), [
    ("temperature", FieldSource(value=0.0, unit=u.K), r"the constant temperature \(0 K\) is zero or negative"),
    ("neutral_fraction", FieldSource(value=1.5, unit=u.one), r"the constant neutral_fraction \(1\.5\) is outside"),
    ("metallicity", FieldSource(value=-0.01, unit=u.one), r"the constant metallicity \(-0\.01\) is negative"),
])
def test_constant_breaking_its_rule_is_refused(make_snapshot, field, source, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10), fields=layout_fields(**{field: source}))


@pytest.mark.parametrize(("fields", "message"), [
    (layout_fields(colour=FieldSource(value=1.0, unit=u.one)), r"unknown field 'colour'; known fields: position"),
    (layout_fields(hydrogen_fraction=None, velocity=None),
     r"required field\(s\) velocity, hydrogen_fraction missing from the field map"),
    (layout_fields(mass=FieldSource(value=1e5, unit=u.Msun)),
     r"field 'mass' must come from a dataset; only temperature, neutral_fraction, .* may be constants"),
    (layout_fields(mass="gas/mass"), r"field 'mass' must be given as a FieldSource; got 'gas/mass'"),
    ([("mass", "gas/mass")], r"fields must be a dict of field name to FieldSource"),
])
def test_bad_field_map_is_refused(make_snapshot, fields, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10), fields=fields)


@pytest.mark.parametrize("chunk_particles", [0, -5, 2.5, True, "100"])
def test_bad_chunk_size_is_refused(make_snapshot, chunk_particles):
    with pytest.raises(SnapshotError, match=r"chunk_particles must be a whole number of at least 1"):
        open_snapshot(make_snapshot(10), fields=layout_fields(), chunk_particles=chunk_particles)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"little_h": 0.0}, r"little_h must be a positive finite number; got 0\.0"),
    ({"little_h": -0.7}, r"little_h must be a positive finite number; got -0\.7"),
    ({"little_h": float("nan")}, r"little_h must be a positive finite number; got nan"),
    ({"little_h": "0.7"}, r"little_h must be a positive finite number; got '0\.7'"),
    ({"scale_factor": -1.0}, r"scale_factor must be a positive finite number"),
    ({"scale_factor": 0}, r"scale_factor must be a positive finite number; got 0"),
    ({"little_h": 0.7, "little_h_attribute": "little_h"}, r"give little_h or little_h_attribute, not both"),
])
def test_bad_little_h_or_scale_factor_is_refused(make_snapshot, kwargs, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10), fields=layout_fields(), **kwargs)


@pytest.mark.parametrize(("value", "message"), [
    (0.0, r"little_h \(attribute 'Header/h'\) must be a positive finite number; got 0\.0"),
    (-0.7, r"little_h \(attribute 'Header/h'\) must be a positive finite number; got -0\.7"),
    (np.array([0.7, 0.7]), r"attribute 'Header/h' for little_h must hold a single number; got \[0\.7, 0\.7\]"),
    ("0.7", r"attribute 'Header/h' for little_h must hold a single number; got '0\.7'"),
])
def test_bad_attribute_value_is_refused(make_snapshot, value, message):
    path = make_snapshot(10)
    with h5py.File(path, "a") as handle:
        handle.create_group("Header").attrs["h"] = value
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(path, fields=layout_fields(), little_h_attribute="Header/h")


@pytest.mark.parametrize(("attribute", "message"), [
    ("HubbleParam", r"attribute 'HubbleParam' for little_h not found; attributes of '/': little_h, scale_factor"),
    ("gas/HubbleParam", r"attribute 'gas/HubbleParam' for little_h not found; attributes of '/gas': none"),
    ("Header/HubbleParam", r"attribute 'Header/HubbleParam' for little_h not found: "
                           r"the file has no group or dataset 'Header'"),
    ("/", r"little_h_attribute must be 'group/attribute' or 'attribute'; got '/'"),
])
def test_missing_attribute_is_refused(make_snapshot, attribute, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10), fields=layout_fields(), little_h_attribute=attribute)


@pytest.mark.parametrize(("source", "message"), [
    (FieldSource(dataset="gas/mass", unit=u.Msun, h_power=-1),
     r"field 'mass' has h_power = -1 but little_h is unknown; give little_h or little_h_attribute"),
    (FieldSource(dataset="gas/mass", unit=u.Msun, a_power=0.5),
     r"field 'mass' has a_power = 0\.5 but scale_factor is unknown; give scale_factor or scale_factor_attribute"),
])
def test_power_without_its_parameter_is_refused(make_snapshot, source, message):
    with pytest.raises(SnapshotError, match=message):
        open_snapshot(make_snapshot(10), fields=layout_fields(mass=source))


# --- refusals while reading --------------------------------------------------------------------

def with_bad(n_particles, rows, value, *, shape=None):
    """Return an array of ones with ``value`` at ``rows``."""
    values = np.ones(shape or n_particles)
    values[rows] = value
    return values


@pytest.mark.parametrize(("dataset", "values", "message"), [
    ("temperature", with_bad(40, [17, 20, 33], np.nan), r"3 values are NaN or infinite \(first at row 17\)"),
    ("position", with_bad(40, (23, 2), np.inf, shape=(40, 3)), r"1 value is NaN or infinite \(first at row 23\)"),
    ("velocity", with_bad(40, (slice(30, 32), 0), -np.inf, shape=(40, 3)),
     r"2 values are NaN or infinite \(first at row 30\)"),
    # Impossible magnitudes that overflowed the geometry passes (1e300 kpc, 1e300 km/s): refused at read.
    ("position", with_bad(40, (11, 0), 1e300, shape=(40, 3)),
     r"1 value is farther than 1e\+08 kpc from the origin in one coordinate \(larger than the observable "
     r"universe\) \(first at row 11\)"),
    ("velocity", with_bad(40, (14, 2), -1e300, shape=(40, 3)),
     r"1 value is at or above the speed of light \(299792\.458 km/s\) in one component \(first at row 14\)"),
    ("velocity", with_bad(40, (3, 1), 299792.458, shape=(40, 3)),
     r"1 value is at or above the speed of light \(299792\.458 km/s\) in one component \(first at row 3\)"),
    ("mass", with_bad(40, [9], 0.0), r"1 value is zero or negative \(first at row 9\)"),
    ("mass", with_bad(40, [2, 30, 39], 0.0), r"3 values are zero or negative \(first at row 2\)"),
    ("mass", with_bad(40, [12, 13], -1e5), r"2 values are zero or negative \(first at row 12\)"),
    ("smoothing_length", with_bad(40, [0], 0.0), r"1 value is zero or negative \(first at row 0\)"),
    ("smoothing_length", with_bad(40, [39], -0.3), r"1 value is zero or negative \(first at row 39\)"),
    ("temperature", with_bad(40, [5], 0.0), r"1 value is zero or negative \(first at row 5\)"),
    ("neutral_fraction", with_bad(40, [8, 9], 1.01), r"2 values are outside \[0, 1\] \(first at row 8\)"),
    ("neutral_fraction", with_bad(40, [36], -0.2), r"1 value is outside \[0, 1\] \(first at row 36\)"),
])
def test_bad_values_are_refused_with_the_file_row(make_snapshot, dataset, values, message):
    snapshot = open_snapshot(make_snapshot(40, **{dataset: values}), fields=layout_fields(), chunk_particles=7)
    with pytest.raises(SnapshotError, match=rf"snapshot\.h5:gas/{dataset}: {message}$"):
        list(snapshot.iter_chunks())


@pytest.mark.parametrize(("field", "rows", "value", "message"), [
    ("metallicity", [3], -0.01, r"gas/metallicity: 1 value is negative \(first at row 3\)"),
    ("density", [4], 0.0, r"gas/density: 1 value is zero or negative \(first at row 4\)"),
    ("molecular_fraction", [2], 2.0, r"gas/molecular_fraction: 1 value is outside \[0, 1\] \(first at row 2\)"),
])
def test_bad_optional_values_are_refused(make_snapshot, field, rows, value, message):
    path = make_snapshot(10, **{field: with_bad(10, rows, value)})
    unit = u.Msun / u.kpc**3 if field == "density" else u.one
    fields = layout_fields(**{field: FieldSource(dataset=f"gas/{field}", unit=unit)})
    snapshot = open_snapshot(path, fields=fields)
    with pytest.raises(SnapshotError, match=message):
        list(snapshot.iter_chunks())


def test_bad_mass_is_refused_by_iter_positions(make_snapshot):
    snapshot = open_snapshot(make_snapshot(10, mass=with_bad(10, [6], -1.0)), fields=layout_fields())
    with pytest.raises(SnapshotError, match=r"gas/mass: 1 value is zero or negative \(first at row 6\)"):
        list(iter_positions(snapshot))


def test_overflow_after_conversion_is_refused(make_snapshot):
    path = make_snapshot(10, mass=np.full(10, 1e300))
    fields = layout_fields(mass=FieldSource(dataset="gas/mass", unit=u.Unit("1e10 Msun")))
    snapshot = open_snapshot(path, fields=fields)
    with pytest.raises(SnapshotError, match=r"gas/mass: 10 values are NaN or infinite \(first at row 0\)"):
        list(snapshot.iter_chunks())


def test_file_changed_after_open_is_refused(make_snapshot):
    path = make_snapshot(10)
    snapshot = open_snapshot(path, fields=layout_fields())
    make_snapshot(9)
    with pytest.raises(SnapshotError, match=r"gas/position: the file changed since it was opened "
                                            r"\(expected a dataset of 10 rows\)"):
        list(snapshot.iter_chunks())


def test_file_replaced_after_open_is_refused(make_snapshot):
    path = make_snapshot(10)
    snapshot = open_snapshot(path, fields=layout_fields())
    path.write_text("gone\n")
    with pytest.raises(SnapshotError, match=r"snapshot\.h5: cannot be read: ") as info:
        list(snapshot.iter_chunks())
    assert isinstance(info.value.__cause__, OSError)


# --- describe_hdf5 -----------------------------------------------------------------------------

def test_describe_hdf5_lists_groups_datasets_and_attributes(make_snapshot, tmp_path):
    path = make_snapshot(100)
    with h5py.File(path, "a") as handle:
        handle["gas/mass"].attrs["unit"] = "Msun"
        handle["gas"].attrs["table"] = np.arange(50.0)
        handle["gas/weight"] = handle["gas/mass"]
        handle["shortcut"] = h5py.SoftLink("/gas/position")
        handle["elsewhere"] = h5py.ExternalLink("other.h5", "/data")
    text = describe_hdf5(path)
    lines = text.splitlines()
    assert lines[0] == str(path)
    assert "  @little_h = 0.7" in lines
    assert "  @scale_factor = 1.0" in lines
    assert "  gas/" in lines
    assert "    @table = [ 0., 1., 2., ..., 47., 48., 49.]  (shape (50,))" in lines
    for name in DATASETS:
        shape = "(100, 3)" if name in ("position", "velocity") else "(100,)"
        assert f"    {name}  shape {shape}  float64" in lines
    assert "      @unit = 'Msun'" in lines
    assert "    weight  (same object as /gas/mass, listed above)" in lines
    assert "  shortcut -> /gas/position  (soft link)" in lines
    assert "  elsewhere -> other.h5:/data  (external link)" in lines
    assert lines.index("  gas/") < lines.index("    mass  shape (100,)  float64")


def test_describe_hdf5_shortens_long_attributes_and_shows_named_types(tmp_path):
    path = tmp_path / "odd.h5"
    with h5py.File(path, "w") as handle:
        handle.attrs["note"] = "x" * 200
        handle.attrs["flag"] = np.bytes_(b"yes")
        handle["kind"] = np.dtype("int16")
    lines = describe_hdf5(path).splitlines()
    assert f"  @note = '{'x' * 76}..." in lines
    assert "  @flag = 'yes'" in lines
    assert "  kind  (named datatype int16)" in lines


def test_describe_hdf5_refuses_a_text_file(tmp_path):
    path = tmp_path / "readme.txt"
    path.write_text("hello\n")
    with pytest.raises(SnapshotError, match=r"readme\.txt: not an HDF5 file"):
        describe_hdf5(path)
