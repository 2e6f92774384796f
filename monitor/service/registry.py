"""From configuration and historian data to batch states the estimator can use."""

from __future__ import annotations

from ..batch.kinetics import Kinetics
from ..batch.state import BatchState, RecipeModel
from ..config import Config, load_kinetics
from ..errors import ConfigError, DataQualityError
from ..historian.model import BatchData


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


def build_state(cfg: Config, data: BatchData, model: RecipeModel) -> BatchState:
    """A batch state from what the reader delivered (charge tag, else recipe default)."""
    b = data.batch
    c_a0, from_tag = data.charge, True
    if c_a0 is None or not c_a0 > 0:
        c_a0, from_tag = model.initial_concentration, False
    if c_a0 is None:
        raise DataQualityError(
            f"batch {b.batch}: no charge sample and no recipes.{b.recipe}.initial_concentration"
        )
    state = BatchState(
        b.batch,
        b.unit,
        model,
        b.start_s,
        float(c_a0),
        end_s=b.end_s,
        charge_from_tag=from_tag,
        max_gap_s=cfg.estimator.max_gap_s,
    )
    state.add_temperature(data.temperature.t_s, data.temperature.value)
    state.add_assays(data.assays.t_s, data.assays.value)
    return state
