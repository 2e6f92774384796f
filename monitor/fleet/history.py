"""Hindsight of a recipe's completed batches, read from the historian.

`recipe_history` reads each completed batch of a recipe (or the ones named)
and returns its hindsight (`monitor.batch.figures`): the figures shared by the
golden profile, the drift review and the backtest, and the trajectory the
golden profile is built from. Batches the monitor never saw are fine: all comes
from the historian.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable
from dataclasses import dataclass

from ..batch.figures import Hindsight, excluded_by_reason, hindsight
from ..batch.state import BatchState, RecipeModel, state_from_data
from ..config import Config
from ..config.models import recipe_model
from ..errors import DataQualityError, UsageError
from ..historian.model import Batch
from ..historian.reader import HistorianReader

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class HistoryItem:
    """One completed batch: its state (for rules that look at its past) and hindsight."""

    batch: Batch
    state: BatchState
    hindsight: Hindsight


@dataclass(frozen=True)
class RecipeHistory:
    recipe: str
    model: RecipeModel
    items: tuple[HistoryItem, ...]
    skipped: tuple[tuple[str, str], ...]  # (batch, why) for batches with no hindsight


def select_batches(
    batches: Iterable[Batch], recipe: str, names: Iterable[str] | None = None
) -> list[Batch]:
    """The recipe's completed batches, or the ones named (each must exist and be complete),
    in start order."""
    mine = [b for b in batches if b.recipe == recipe]
    if names is None:
        return [b for b in mine if b.end_s is not None]
    by_id = {b.batch: b for b in mine}
    out = []
    for name in names:
        b = by_id.get(name)
        if b is None:
            raise UsageError(f"batch {name!r} is not a batch of recipe {recipe!r} in the export")
        if b.end_s is None:
            raise UsageError(f"batch {name!r} is still running: hindsight needs a complete batch")
        out.append(b)
    return sorted(out, key=lambda b: (b.start_s, b.batch))


def batch_hindsight(
    cfg: Config, reader: HistorianReader, b: Batch, model: RecipeModel, problems=()
) -> HistoryItem:
    """Read one completed batch and compute its hindsight."""
    data = reader.read_batch(b)
    if len(data.temperature) == 0:
        raise DataQualityError(f"batch {b.batch}: no good temperature samples in its window")
    state = state_from_data(data, model, cfg.estimator.max_gap_s)
    h = hindsight(
        state,
        cfg.estimator,
        excluded=excluded_by_reason(data.quality.as_rows()),
        event_problems=tuple(problems),
    )
    return HistoryItem(b, state, h)


def recipe_history(
    cfg: Config,
    recipe: str,
    *,
    batches: Iterable[str] | None = None,
    reader: HistorianReader | None = None,
    model: RecipeModel | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> RecipeHistory:
    """Hindsight of the recipe's completed batches (or of ``batches``), in start order.

    A batch whose data cannot give a hindsight (no good temperature, no charge and
    no recipe default) is skipped with the reason. ``progress(i, n, batch)`` is
    called before each batch.
    """
    model = model or recipe_model(cfg, recipe)
    own = reader is None
    reader = reader or HistorianReader(cfg)
    try:
        found, problems = reader.batches(recipe=recipe)
        chosen = select_batches(found, recipe, batches)
        by_batch: dict = {}
        for p in problems:
            if p.batch:
                by_batch.setdefault(p.batch, []).append(p.message)
        items, skipped = [], []
        for i, b in enumerate(chosen):
            if progress:
                progress(i, len(chosen), b.batch)
            try:
                items.append(batch_hindsight(cfg, reader, b, model, by_batch.get(b.batch, ())))
            except (DataQualityError, ValueError) as exc:
                log.warning("batch %s: no hindsight: %s", b.batch, exc)
                skipped.append((b.batch, str(exc)))
    finally:
        if own:
            reader.close()
    return RecipeHistory(recipe, model, tuple(items), tuple(skipped))
