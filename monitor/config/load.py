"""Loading a configuration: the TOML file read, validated by the model, one line per problem.

Every problem raises `ConfigError` (exit code 2) naming the file, the key and
what was expected. Relative paths resolve against the config file's folder;
``${VAR}`` in URLs is expanded from the environment.
"""

from __future__ import annotations

import os
from pathlib import Path

from pydantic import ValidationError

from ..errors import ConfigError
from .reading import raise_first_problem, read_toml
from .tables import Config

ENV_VAR = "CONVMON_CONFIG"
DEFAULT_CONFIG = "convmon.toml"


def load_config(path: str | os.PathLike | None = None) -> Config:
    """Load and validate a configuration file.

    ``path`` defaults to ``$CONVMON_CONFIG``, else ``./convmon.toml``.
    """
    p = Path(path or os.environ.get(ENV_VAR) or DEFAULT_CONFIG)
    _, data = read_toml(
        p, ConfigError, "configuration file", f" (give --config PATH or set ${ENV_VAR})"
    )
    return config_from_dict(data, p.resolve())


def config_from_dict(data: dict, path: Path | None = None) -> Config:
    """Validate an already parsed configuration (``path`` is used in messages and for paths)."""
    base = path.parent if path else Path.cwd()
    try:
        return Config.model_validate(
            data, by_alias=True, by_name=False, context={"base_dir": base, "path": path}
        )
    except ValidationError as exc:
        raise_first_problem(exc, Config, ConfigError, path)
