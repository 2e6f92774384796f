"""The batch layer's models built from configuration (kinetics loaded from their files)."""

from __future__ import annotations

from ..batch.kinetics import Kinetics
from ..batch.state import RecipeModel
from ..errors import ConfigError
from .kinetics_file import load_kinetics
from .plant import RecipeConfig
from .tables import Config


def require_recipe(cfg: Config, recipe: str) -> RecipeConfig:
    """The recipe's ``[recipes.NAME]`` table; a recipe not configured is a `ConfigError`
    that lists those that are."""
    rc = cfg.recipe(recipe)
    if rc is None:
        have = ", ".join(repr(r) for r in cfg.recipes) or "none"
        raise ConfigError(
            f"recipe {recipe!r} is not configured (no [recipes.{recipe}] table with its "
            f"kinetics and target); configured: {have}",
            path=cfg.path,
            key=f"recipes.{recipe}",
        )
    return rc


def recipe_model(cfg: Config, recipe: str, kinetics: Kinetics | None = None) -> RecipeModel:
    """The recipe's model with its kinetics (loaded from its file unless given)."""
    rc = require_recipe(cfg, recipe)
    return RecipeModel.from_config(rc, kinetics or load_kinetics(rc.kinetics))
