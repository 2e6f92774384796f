"""The batch layer's models built from configuration (kinetics loaded from their files)."""

from __future__ import annotations

from ..batch.kinetics import Kinetics
from ..batch.state import RecipeModel
from ..errors import ConfigError
from .kinetics_file import load_kinetics
from .tables import Config


def recipe_model(cfg: Config, recipe: str, kinetics: Kinetics | None = None) -> RecipeModel:
    """The recipe's model with its kinetics (loaded from its file unless given)."""
    rc = cfg.recipe(recipe)
    if rc is None:
        raise ConfigError(
            f"recipe {recipe!r} has no [recipes.{recipe}] table (kinetics, target)",
            path=cfg.path,
            key=f"recipes.{recipe}",
        )
    return RecipeModel.from_config(rc, kinetics or load_kinetics(rc.kinetics))
