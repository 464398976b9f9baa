"""Run configuration: the parameter table, TOML loading, overrides and validation.

A run is described by one TOML file.  :func:`load_config` reads it, applies
``--set`` overrides, checks every key against the parameter table
(:data:`PARAMS`) and returns a frozen :class:`RunConfig`.
"""

from ._load import RunConfig, config_from_dict, describe_config, load_config, read_toml_file
from ._schema import PARAMS, PARAMS_BY_KEY, REQUIRED, SNAPSHOT_FIELDS, Param

__all__ = ["load_config", "config_from_dict", "read_toml_file", "RunConfig", "describe_config",
           "PARAMS", "PARAMS_BY_KEY", "Param", "SNAPSHOT_FIELDS", "REQUIRED"]
