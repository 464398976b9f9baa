"""Quantity parsing, physical-type checks and display units (pipeline/config/_quantity.py)."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from pipeline.config._messages import Problem
from pipeline.config._quantity import (QUANTITY_KINDS, display_unit, format_quantity, parse_quantity,
                                       parse_vector, to_display)


@pytest.mark.parametrize("kind, text, expected", [
    ("angle", "12 arcsec", 12 * u.arcsec),
    ("angle", "0.5 deg", 0.5 * u.deg),
    ("length", "8.5 Mpc", 8.5 * u.Mpc),
    ("length", "15 m", 15 * u.m),
    ("velocity", "4km/s", 4 * u.km / u.s),
    ("frequency", "1.42 GHz", 1.42 * u.GHz),
    ("spectral", "4 km/s", 4 * u.km / u.s),
    ("spectral", "20 kHz", 20 * u.kHz),
    ("time", "4 h", 4 * u.h),
    ("time", "3600 s", 3600 * u.s),
    ("temperature", "25 K", 25 * u.K),
    ("flux_density", "0.4 mJy/beam", 0.4 * u.mJy / u.beam),
    ("flux_density", "2 mJy", 2 * u.mJy),
    ("memory", "4 GiB", 4 * u.GiB),
    ("memory", "512 MB", 512 * u.MB),
])
def test_parse_quantity_keeps_the_unit_the_user_gave(kind, text, expected):
    parsed = parse_quantity(text, kind)
    assert parsed.unit == expected.unit
    assert_quantity_allclose(parsed, expected, rtol=0)


def test_parse_quantity_accepts_a_quantity_object_and_copies_it():
    given = 3 * u.kpc
    parsed = parse_quantity(given, "length")
    parsed += 1 * u.kpc
    assert_quantity_allclose(given, 3 * u.kpc, rtol=0)


@pytest.mark.parametrize("kind, raw, message", [
    ("spectral", "3 kpc", r"^expected a velocity or frequency, e\.g\. '4 km/s' or '20 kHz'; got '3 kpc'$"),
    ("angle", "12", r"^expected an angle, .*; got '12' \(no unit\)$"),
    ("angle", 12, r"^expected an angle, .*; got 12, a bare number \(units are never assumed\)$"),
    ("angle", 12.5, r"got 12\.5, a bare number"),
    ("length", True, r"^expected a length, .*; got true$"),
    ("length", ["1 kpc"], r"^expected a length, .*; got \['1 kpc'\]$"),
    ("length", "5 furlongz", r"got '5 furlongz', which astropy cannot read as a number followed by a unit"),
    ("length", u.Quantity([1, 2], u.kpc), r"which is not a single value"),
    ("velocity", "nan km/s", r"got 'nan km/s', which is not finite"),
    ("time", "4 K", r"^expected a time, e\.g\. '4 h' or '3600 s'; got '4 K'$"),
    ("temperature", "25 deg_C", r"^expected a temperature"),
    ("flux_density", "1 K", r"^expected a flux density"),
    ("memory", "4 s", r"^expected an amount of memory, e\.g\. '4 GiB' or '512 MB'; got '4 s'$"),
    ("frequency", "4 km/s", r"^expected a frequency"),
])
def test_parse_quantity_refuses(kind, raw, message):
    with pytest.raises(Problem, match=message):
        parse_quantity(raw, kind)


def test_parse_vector_converts_to_the_first_unit():
    vector = parse_vector(["1 kpc", "500 pc", "-2 kpc"], "length3")
    assert vector.shape == (3,)
    assert vector.unit == u.kpc
    assert_quantity_allclose(vector, [1.0, 0.5, -2.0] * u.kpc, rtol=1e-15)  # 1 kpc = 1000 pc by definition


def test_parse_vector_accepts_a_quantity_of_shape_3():
    vector = parse_vector([10, 0, -5] * u.km / u.s, "velocity3")
    assert_quantity_allclose(vector, [10, 0, -5] * u.km / u.s, rtol=0)


@pytest.mark.parametrize("kind, raw, message", [
    ("length3", ["1 kpc", "0 kpc"], r"^expected a list of three lengths, .*; got \['1 kpc', '0 kpc'\]$"),
    ("length3", "1 kpc", r"^expected a list of three lengths"),
    ("length3", [1, 0, 0] * u.kpc * np.ones((2, 1)), r"^expected a list of three lengths"),
    ("length3", ["1 kpc", "3 K", "0 kpc"], r"got \['1 kpc', '3 K', '0 kpc'\]: expected a length, .*; got '3 K'$"),
    ("velocity3", ["1 km/s", "0 km/s", 0], r"got 0, a bare number"),
])
def test_parse_vector_refuses(kind, raw, message):
    with pytest.raises(Problem, match=message):
        parse_vector(raw, kind)


@pytest.mark.parametrize("kind, unit, expected", [
    ("angle", u.deg, "arcsec"),
    ("length", u.pc, "kpc"),
    ("spectral", u.m / u.s, "km/s"),
    ("spectral", u.MHz, "kHz"),
    ("flux_density", u.mJy / u.beam, "Jy/beam"),
    ("flux_density", u.mJy, "Jy"),
    ("memory", u.MB, "GiB"),
    ("length3", u.pc, "kpc"),
    ("velocity3", u.m / u.s, "km/s"),
])
def test_display_unit_follows_the_family_of_the_value(kind, unit, expected):
    assert display_unit(kind, unit) == expected


def test_display_unit_override_wins():
    assert display_unit("length", u.kpc, override="Mpc") == "Mpc"


def test_every_display_unit_parses_and_has_its_kind():
    for kind, families in QUANTITY_KINDS.items():
        for family in families:
            assert parse_quantity(f"1 {family}", kind).unit == u.Unit(family)


@pytest.mark.parametrize("text, kind, expected_value, expected_unit", [
    ("512 MB", "memory", 512e6 / 2**30, "GiB"),  # IEC 80000-13: 1 GiB = 2**30 byte; SI: 1 MB = 1e6 byte
    ("8192 MiB", "memory", 8.0, "GiB"),  # IEC 80000-13: 1 GiB = 1024 MiB
    ("4 h", "time", 14400.0, "s"),  # 1 h = 3600 s (SI brochure, table 8)
    ("0.5 deg", "angle", 1800.0, "arcsec"),  # 1 deg = 3600 arcsec (SI brochure, table 8)
    ("0.02 MHz", "spectral", 20.0, "kHz"),  # SI prefixes
    ("4000 m/s", "spectral", 4.0, "km/s"),  # SI prefixes
])
def test_to_display_converts_by_the_unit_definitions(text, kind, expected_value, expected_unit):
    converted, unit_string = to_display(u.Quantity(text), kind)
    assert unit_string == expected_unit
    assert converted.unit == u.Unit(expected_unit)
    assert converted.value == pytest.approx(expected_value, rel=1e-14)


def test_format_quantity_writes_text_that_parses_back_to_the_same_value():
    text = format_quantity(u.Quantity("0.1 arcmin"), "angle")
    assert text.endswith(" arcsec")
    again = format_quantity(parse_quantity(text, "angle"), "angle")
    assert again == text


def test_format_quantity_writes_one_string_per_vector_element():
    assert format_quantity(u.Quantity([1, 500, 0], u.pc), "length3") == ["0.001 kpc", "0.5 kpc", "0.0 kpc"]
