"""Build, store and show a recipe's golden profile (the jobs behind ``convmon golden``).

The trajectories come from the historian every time (hindsight of each
completed batch, `monitor.fleet.history`), so a fresh store works; the
per-batch figures computed on the way are kept in the store for the drift
review and the backtest.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable

from ..batch.golden_profile import GoldenProfile
from ..config import Config
from ..config.models import recipe_model
from ..store import Store
from .golden import GoldenCriteria, GoldenSettings, build_profile, settings_for
from .history import recipe_history


def build_golden(
    cfg: Config,
    recipe: str,
    store: Store,
    *,
    now_s: float,
    batches: list[str] | None = None,
    settings: GoldenSettings | None = None,
    criteria: GoldenCriteria | None = None,
    save: bool = True,
    progress: Callable[[int, int, str], None] | None = None,
    model=None,
) -> GoldenProfile:
    """Build the recipe's profile from history; with ``save``, store it as a new version.

    Named ``batches`` are read alone; otherwise every completed batch of the recipe is
    read and the criteria choose. Every batch's figures are stored either way.
    """
    model = model or recipe_model(cfg, recipe)
    history = recipe_history(cfg, recipe, batches=batches, model=model, progress=progress)
    store.save_figures([it.hindsight.figures for it in history.items], now_s=now_s)
    profile = build_profile(
        history,
        settings=settings or settings_for(cfg, recipe),
        criteria=criteria,
        batches=batches,
        estimator=cfg.estimator,
        created_at_s=now_s,
    )
    if not save:
        return profile
    version = store.save_golden_profile(profile)
    return dataclasses.replace(profile, version=version)


def show_golden(
    cfg: Config, recipe: str, store: Store, *, now_s: float, progress=None, model=None
) -> tuple[GoldenProfile, bool]:
    """``(profile, stored)``: the latest stored profile, else one built now and not stored."""
    profile = store.golden_profile(recipe)
    if profile is not None:
        return profile, True
    profile = build_golden(
        cfg, recipe, store, now_s=now_s, save=False, progress=progress, model=model
    )
    return profile, False
