"""Golden profiles (versioned per recipe) and per-batch figures in the store.

A profile is saved whole (its plain-data record as JSON in ``doc``) with the
columns people and scripts query beside it; saving never replaces a version, it
adds the next one. Figures are one row per batch, replaced when recomputed (new
kinetics, or a new ``FIGURES_METHOD``).
"""

from __future__ import annotations

import json

from sqlalchemy import delete, func, insert, select
from sqlalchemy.engine import Engine
from sqlalchemy.exc import SQLAlchemyError

from ..batch.figures import BatchFigures
from ..batch.golden_profile import GoldenProfile
from ..errors import StoreError
from .tables import batch_figures, golden_profiles


def _dumps(doc) -> str:
    return json.dumps(doc, separators=(",", ":"), allow_nan=False)


def save_golden_profile(engine: Engine, profile: GoldenProfile) -> int:
    """Store ``profile`` as the recipe's next version; returns the version number."""
    try:
        with engine.begin() as conn:
            last = conn.execute(
                select(func.max(golden_profiles.c.version)).where(
                    golden_profiles.c.recipe == profile.recipe
                )
            ).scalar()
            version = (last or 0) + 1
            doc = profile.to_dict()
            doc["version"] = version
            conn.execute(
                insert(golden_profiles).values(
                    recipe=profile.recipe,
                    version=version,
                    created_at_s=profile.created_at_s,
                    kinetics_version=profile.kinetics_version,
                    batches=_dumps(list(profile.batches)),
                    settings=_dumps(profile.settings),
                    calibration=_dumps(profile.calibration),
                    doc=_dumps(doc),
                )
            )
    except SQLAlchemyError as exc:
        raise StoreError(
            f"store: saving the golden profile of {profile.recipe} failed: {exc}"
        ) from None
    return version


def golden_versions(engine: Engine) -> dict[str, int]:
    """The latest version of each recipe's profile (a cheap query for every cycle)."""
    with engine.connect() as conn:
        rows = conn.execute(
            select(golden_profiles.c.recipe, func.max(golden_profiles.c.version)).group_by(
                golden_profiles.c.recipe
            )
        )
        return {r[0]: int(r[1]) for r in rows}


def golden_profile(engine: Engine, recipe: str, version: int | None = None) -> GoldenProfile | None:
    """A recipe's profile (the latest unless ``version``), or None."""
    q = select(golden_profiles.c.doc).where(golden_profiles.c.recipe == recipe)
    if version is not None:
        q = q.where(golden_profiles.c.version == version)
    with engine.connect() as conn:
        row = conn.execute(q.order_by(golden_profiles.c.version.desc()).limit(1)).first()
    return None if row is None else GoldenProfile.from_dict(json.loads(row[0]))


def save_figures(engine: Engine, figures: list[BatchFigures], now_s: float) -> None:
    """Store (or replace) each batch's figures."""
    if not figures:
        return
    rows = [
        {
            "batch": f.batch,
            "recipe": f.recipe,
            "method": f.method,
            "kinetics_version": f.kinetics_version,
            "computed_at_s": now_s,
            "start_s": f.start_s,
            "end_s": f.end_s,
            "activity": f.activity,
            "activity_sd": f.activity_sd,
            "time_to_target_s": f.time_to_target_s,
            "final_conversion": f.final_conversion,
            "doc": _dumps(f.to_dict()),
        }
        for f in figures
    ]
    try:
        with engine.begin() as conn:
            conn.execute(
                delete(batch_figures).where(batch_figures.c.batch.in_([r["batch"] for r in rows]))
            )
            conn.execute(insert(batch_figures), rows)
    except SQLAlchemyError as exc:
        raise StoreError(f"store: saving batch figures failed: {exc}") from None


def load_figures(
    engine: Engine,
    *,
    recipe: str | None = None,
    batches: list[str] | None = None,
    kinetics_version: str | None = None,
    method: int | None = None,
) -> dict[str, BatchFigures]:
    """Stored figures by batch, optionally of one recipe, of some batches, made with
    given kinetics or by a given method."""
    q = select(batch_figures.c.doc)
    if recipe is not None:
        q = q.where(batch_figures.c.recipe == recipe)
    if batches is not None:
        q = q.where(batch_figures.c.batch.in_(list(batches)))
    if kinetics_version is not None:
        q = q.where(batch_figures.c.kinetics_version == kinetics_version)
    if method is not None:
        q = q.where(batch_figures.c.method == method)
    with engine.connect() as conn:
        figs = [BatchFigures.from_dict(json.loads(r[0])) for r in conn.execute(q)]
    return {f.batch: f for f in figs}
