"""Configuration: the TOML file, validated at load (pydantic); kinetics files."""

from .kinetics_file import load_kinetics, write_kinetics
from .load import DEFAULT_CONFIG, ENV_VAR, config_from_dict, load_config
from .plant import RecipeConfig, SafetyConfig, UnitConfig
from .tables import (
    Config,
    EstimatorConfig,
    EventsColumns,
    GoldenConfig,
    HistorianConfig,
    PollConfig,
    SamplesColumns,
    SiteConfig,
    StoreConfig,
    WritebackConfig,
)
from .urls import expand_env

__all__ = [
    "DEFAULT_CONFIG",
    "ENV_VAR",
    "Config",
    "EstimatorConfig",
    "EventsColumns",
    "GoldenConfig",
    "HistorianConfig",
    "PollConfig",
    "RecipeConfig",
    "SafetyConfig",
    "SamplesColumns",
    "SiteConfig",
    "StoreConfig",
    "UnitConfig",
    "WritebackConfig",
    "config_from_dict",
    "expand_env",
    "load_config",
    "load_kinetics",
    "write_kinetics",
]
