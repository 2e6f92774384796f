"""The library API the CLI calls: one function per job, no printing."""

from __future__ import annotations

from datetime import datetime

from .batch.estimator import Estimate, estimate
from .batch.state import BatchState, RecipeModel
from .config import Config
from .errors import ConfigError, DataQualityError, UsageError
from .historian.model import Batch, BatchData, to_epoch
from .kinetics import Kinetics, load_kinetics


def parse_time(text: str, zone: str) -> float:
    """An ISO-8601 time from the command line; without an offset it is in ``zone``."""
    from zoneinfo import ZoneInfo

    try:
        dt = datetime.fromisoformat(text)
    except ValueError:
        raise UsageError(
            f"--at: expected an ISO-8601 time such as 2026-10-05T14:30, got {text!r}"
        ) from None
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=ZoneInfo(zone))
    return to_epoch(dt)


def open_reader(cfg: Config):
    from .historian.reader import HistorianReader

    return HistorianReader(cfg)


def list_batches(cfg: Config, unit: str | None = None, recipe: str | None = None):
    """Batches in the export with their good-sample counts, and any event problems."""
    reader = open_reader(cfg)
    try:
        batches, problems = reader.batches(unit=unit, recipe=recipe)
        if not batches and unit is None and recipe is None and not problems:
            raise DataQualityError(
                f"the export has no batches: no {cfg.historian.start_event!r} events in table "
                f"{cfg.historian.events_table!r} (check historian.start_event and events_table)"
            )
        counts = reader.sample_counts(batches) if batches else {}
    finally:
        reader.close()
    return batches, counts, problems


def recipe_model(cfg: Config, recipe: str, kinetics: Kinetics | None = None) -> RecipeModel:
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


def estimate_batch(
    cfg: Config,
    batch_id: str,
    at_s: float | None = None,
    now_s: float | None = None,
    *,
    reader=None,
) -> tuple[Estimate, Batch]:
    """Estimate one batch straight from the historian.

    A running batch is estimated at ``at_s``, else at ``now_s`` (default: the
    last temperature sample); a completed batch at its end.
    """
    own = reader is None
    reader = reader or open_reader(cfg)
    try:
        b = reader.batch(batch_id)
        until = at_s if at_s is not None else b.end_s
        if at_s is not None and at_s < b.start_s:
            raise UsageError(f"--at is before batch {batch_id} started ({b.start.isoformat()})")
        if at_s is not None and b.end_s is not None:
            until = min(at_s, b.end_s)
        data = reader.read_batch(b, until_s=until)
    finally:
        if own:
            reader.close()
    if len(data.temperature) == 0:
        raise DataQualityError(
            f"batch {batch_id}: no good temperature samples "
            f"({_unit_tag(cfg, b.unit)}) in its window"
        )
    model = recipe_model(cfg, b.recipe)
    state = build_state(cfg, data, model)
    at = until if until is not None else (now_s or float(data.temperature.t_s[-1]))
    rc = cfg.recipe(b.recipe)
    est = estimate(state, at, cfg.estimator, safety=rc.safety)
    summary = data.quality.as_rows()
    if summary:
        est.warnings.append(
            "excluded samples: "
            + ", ".join(f"{r['tag']} {r['reason']} ×{r['count']}" for r in summary)
        )
    return est, b


def _unit_tag(cfg: Config, unit: str) -> str:
    u = cfg.unit(unit)
    return u.temperature_tag if u else f"unit {unit} (not configured)"
