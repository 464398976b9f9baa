"""Wording helpers of config errors (pipeline/config/_messages.py)."""

import astropy.units as u
import numpy as np
import pytest

from pipeline.config._messages import show, suggest, unit_type_name


@pytest.mark.parametrize("value, expected", [
    (True, "true"),
    (np.bool_(False), "false"),
    ("3 kpc", "'3 kpc'"),
    (12, "12"),
    (1.5, "1.5"),
    (["1 kpc", 2, False], "['1 kpc', 2, false]"),
    ({"value": 64, "unit": "kpc"}, "a table {value = 64, unit = 'kpc'}"),
    (3 * u.kpc, "'3.0 kpc'"),
    (u.km / u.s, "'km / s'"),
])
def test_show_spells_values_as_toml_would(value, expected):
    assert show(value) == expected


def test_suggest_finds_near_names_and_nothing_for_far_ones():
    assert suggest("pixle_scale", ["n_x", "pixel_scale", "projection"]) == "pixel_scale"
    assert suggest("zzz", ["n_x", "pixel_scale"]) is None


@pytest.mark.parametrize("unit, expected", [
    (u.kpc, "length"), (u.km / u.s, "velocity"), (u.Msun, "mass"), (u.K, "temperature"),
    (u.dimensionless_unscaled, "dimensionless"), (u.Msun / u.kpc**3, "mass density"),
])
def test_unit_type_name_is_plain_words(unit, expected):
    assert unit_type_name(unit) == expected
