"""Tests of FieldSource, the field table and the unit factors."""

import astropy.units as u
import numpy as np
import pytest
from astropy.cosmology import units as cu

from pipeline.config._schema import REQUIRED, SNAPSHOT_FIELDS
from pipeline.errors import SnapshotError
from pipeline.particles import FieldSource
from pipeline.particles._fields import (FIELD_KINDS, REQUIRED_FIELDS, conversion_factor, count_values_with,
                                       find_bad_values)


def test_field_table_matches_the_config_schema():
    assert list(FIELD_KINDS) == list(SNAPSHOT_FIELDS)
    assert REQUIRED_FIELDS == REQUIRED
    for name, (default_unit, may_be_constant) in SNAPSHOT_FIELDS.items():
        assert FIELD_KINDS[name].may_be_constant is may_be_constant, name
        # The schema's default unit is the internal one, so the default conversion is exact.
        assert u.Unit(default_unit).to(FIELD_KINDS[name].unit) == 1.0, name


def test_field_source_parses_a_unit_string_and_stores_floats():
    source = FieldSource(dataset="gas/mass", unit="1e10 Msun", h_power=-1)
    assert source.unit == u.Unit("1e10 Msun")
    assert isinstance(source.h_power, float)
    assert FieldSource(value=np.float32(0.5), unit="").value == 0.5


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"unit": u.K}, "exactly one of 'dataset' and 'value'; got neither"),
    ({"dataset": "gas/temperature", "value": 1e4, "unit": u.K}, "got both"),
    ({"dataset": "/", "unit": u.K}, "'dataset' must be an HDF5 path"),
    ({"dataset": 3, "unit": u.K}, "'dataset' must be an HDF5 path"),
    ({"dataset": "gas/mass", "unit": "not a unit"}, "'unit' must be an astropy unit"),
    ({"dataset": "gas/mass", "unit": u.Msun, "h_power": float("nan")}, "'h_power' must be a finite number"),
    ({"dataset": "gas/mass", "unit": u.Msun, "a_power": "1"}, "'a_power' must be a finite number"),
    ({"value": True, "unit": ""}, "'value' must be a finite number"),
    ({"value": float("inf"), "unit": ""}, "'value' must be a finite number"),
])
def test_field_source_refuses_bad_arguments(kwargs, message):
    with pytest.raises(ValueError, match=message):
        FieldSource(**kwargs)


def test_conversion_factor_matches_astropy_little_h_equivalency():
    # Reference: astropy.cosmology.units.with_H0 (H0 = 100 h km/s/Mpc) on units with littleh.
    little_h = 0.6774
    equivalency = cu.with_H0(100 * little_h * u.km / u.s / u.Mpc)
    density = FieldSource(dataset="d", unit=u.Unit("1e10 Msun / kpc3"), h_power=2.0)
    expected = (1e10 * u.Msun / cu.littleh / (u.kpc / cu.littleh) ** 3).to(u.Msun / u.kpc**3, equivalency)
    factor = conversion_factor("density", density, little_h=little_h, scale_factor=None, label="f")
    assert factor == pytest.approx(expected.value, rel=1e-12)


def test_conversion_factor_converts_units_as_astropy_does():
    # Reference: astropy unit conversion.
    source = FieldSource(dataset="v", unit=u.cm / u.s)
    assert conversion_factor("velocity", source, little_h=None, scale_factor=None, label="f") == \
        pytest.approx((1 * u.cm / u.s).to_value(u.km / u.s), rel=1e-14)
    percent = FieldSource(dataset="x", unit=u.percent)
    assert conversion_factor("neutral_fraction", percent, little_h=None, scale_factor=None, label="f") == 0.01


@pytest.mark.parametrize(("name", "unit", "message"), [
    ("mass", u.kpc, r"f: unit 'kpc' of field 'mass' is a length; expected a mass unit such as 'solMass'"),
    ("velocity", u.km, r"is a length; expected a speed/velocity unit such as 'km / s'"),
    ("density", u.Msun, r"is a mass; expected a mass density unit"),
    ("neutral_fraction", u.kpc, r"is a length; expected a dimensionless unit such as '' or 'percent'"),
    ("metallicity", u.Msun, r"expected a dimensionless unit"),
    ("position", u.dimensionless_unscaled, r"of field 'position' is dimensionless; expected a length unit"),
    ("temperature", u.deg_C, r"is a temperature but not a multiple of 'K' \(offset scales"),
])
def test_conversion_factor_refuses_a_unit_of_the_wrong_type(name, unit, message):
    with pytest.raises(SnapshotError, match=message):
        conversion_factor(name, FieldSource(dataset="x", unit=unit), little_h=0.7, scale_factor=1.0, label="f")


@pytest.mark.parametrize(("name", "values", "expected"), [
    ("position", np.array([[0.0, 1.0, np.nan], [np.inf, 0.0, 0.0]]), (2, 2, "NaN or infinite")),
    ("position", np.array([[-5.0, 0.0, 3.0]]), None),
    ("mass", np.array([1.0, 0.0, -2.0]), (2, 1, "zero or negative")),
    ("neutral_fraction", np.array([0.0, 1.0, 1.5, -0.1]), (2, 2, "outside [0, 1]")),
    ("neutral_fraction", np.array([0.0, 1.0]), None),
    ("metallicity", np.array([0.0, 2.0, -0.01]), (1, 2, "negative")),
])
def test_find_bad_values_counts_and_locates_the_first(name, values, expected):
    assert find_bad_values(values, name) == expected


def test_count_values_with_counts_one_problem_only():
    values = np.array([np.nan, 0.0, -1.0, 2.0, 0.5])
    assert count_values_with(values, "NaN or infinite") == 1
    assert count_values_with(values, "zero or negative") == 2
    assert count_values_with(values, "outside [0, 1]") == 2
    assert count_values_with(values, "negative") == 1
