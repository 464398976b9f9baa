"""The parameter table itself (pipeline/config/_schema.py): invariants the loader relies on."""

import re

import astropy.units as u
import pytest

from pipeline.config import PARAMS, PARAMS_BY_KEY, REQUIRED, SNAPSHOT_FIELDS, config_from_dict
from pipeline.config._messages import EXPECTED
from pipeline.config._quantity import QUANTITY_KINDS, VECTOR_KINDS, parse_quantity

KINDS = set(QUANTITY_KINDS) | set(VECTOR_KINDS) | {"matrix3", "unit", "int", "float", "bool", "str", "path"}


def test_keys_are_unique_lower_snake_case_paths():
    assert len(PARAMS_BY_KEY) == len(PARAMS)
    for param in PARAMS:
        assert re.fullmatch(r"[a-z][a-z0-9_]*(\.[a-z][a-z0-9_]*)+", param.key), param.key


@pytest.mark.parametrize("param", PARAMS, ids=lambda param: param.key)
def test_each_param_has_a_known_kind_a_doc_and_consistent_metadata(param):
    assert param.kind in KINDS
    assert param.doc
    if param.kind != "unit":
        assert param.kind in EXPECTED or param.kind in QUANTITY_KINDS
    if param.choices:
        assert param.kind == "str" and param.default in param.choices
    if param.display_unit is not None:
        # The display unit must belong to the kind, or to_toml would write a value its own loader refuses.
        parse_quantity(f"1 {param.display_unit}", param.kind)
    if param.kind == "unit":
        u.Unit(param.default)  # the default unit also fixes the physical type a user's unit must have


def test_every_default_validates():
    # A minimal config leaves every other key at its default; building it validates each one.
    config = config_from_dict({"snapshot": {"path": "/s.h5"}, "observer": {"distance": "10 Mpc"}})
    for param in PARAMS:
        assert config.is_set(param.key) is (param.key in ("snapshot.path", "observer.distance"))


def test_required_fields_always_have_a_source_by_default():
    # TOML has no null, so a user cannot unset a default: a required field whose dataset default is
    # set (or which has a default constant) can never end up without a source.  The loader relies on this.
    for name in REQUIRED:
        base = f"snapshot.fields.{name}"
        dataset, value = PARAMS_BY_KEY[f"{base}.dataset"].default, None
        if f"{base}.value" in PARAMS_BY_KEY:
            value = PARAMS_BY_KEY[f"{base}.value"].default
        assert (dataset is None) != (value is None), name


def test_every_snapshot_field_has_dataset_unit_and_both_powers():
    for name, (_, may_be_constant) in SNAPSHOT_FIELDS.items():
        base = f"snapshot.fields.{name}"
        for leaf in ("dataset", "unit", "h_power", "a_power"):
            assert f"{base}.{leaf}" in PARAMS_BY_KEY
        assert (f"{base}.value" in PARAMS_BY_KEY) is may_be_constant
