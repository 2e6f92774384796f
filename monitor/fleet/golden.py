"""A recipe's golden profile: select good batches, build bands, calibrate limits.

Good batches are named, or chosen by criteria (`GoldenCriteria`): complete,
at target (model or last assay), time to target within a range, no open data
problems, optionally started inside a period. From their hindsight
trajectories (`monitor.fleet.history`) come the bands of conversion against
time since start and of time to reach X against X (conversion as the batch's
maturity, so batches of different pace line up without time warping), the
temperature band, and the distributions of activity and time to target. The
alert limits are calibrated leave-one-batch-out (`monitor.fleet.calibrate`) so
that at most ``target_rate`` of the golden batches would have raised an alert.
The result is a `GoldenProfile`, plain data the store keeps versioned.
"""

from __future__ import annotations

import logging
from dataclasses import asdict, dataclass, field

import numpy as np

from ..batch.episodes import Persistence
from ..batch.golden_profile import GoldenProfile
from ..batch.settings import EstimatorSettings
from ..errors import DataQualityError
from . import bands
from .calibrate import Calibration, persistence_minutes, replay_data
from .history import RecipeHistory

log = logging.getLogger(__name__)

#: Limits from tight to loose: the good batches' quantile p (0: the extreme good batch),
#: moved outward by a number of interquartile ranges (for normal data one IQR is 1.35 sd).
LADDER = (
    (0.10, 0.0),
    (0.05, 0.0),
    (0.025, 0.0),
    (0.0, 0.0),
    (0.0, 0.25),
    (0.0, 0.5),
    (0.0, 1.0),
    (0.0, 1.5),
    (0.0, 2.0),
    (0.0, 3.0),
    (0.0, 5.0),
)


def _default_persistence() -> dict:
    return {
        "behind_profile": persistence_minutes(10, 20, 30, 45, 60),
        "late_finish": persistence_minutes(10, 20, 30, 45, 60),
        "temperature_off_profile": persistence_minutes(6, 10, 20, 30),
        "low_activity": tuple(Persistence(0.0, n) for n in (1, 2, 3)),
    }


@dataclass(frozen=True)
class GoldenSettings:
    """How a profile is built and calibrated (units in the names; margins are the
    least distance of a limit from the good batches' median, common practice)."""

    target_rate: float = 0.05  # largest share of golden batches with any alert
    step_s: float = 120.0  # time grid of the bands and of the rules' evaluation
    display_p: float = 0.05  # the band shown to people: 5 % to 95 % of good batches
    x_min: float = 0.05  # lowest conversion level of the time-to-X band
    x_step: float = 0.01
    min_count: int = 3  # fewest good batches behind a band point
    min_batches: int = 5  # fewest golden batches for a profile
    min_assays: int = 1  # assays before conversion and end time are compared
    margin_x: float = 0.02
    margin_lag_s: float = 600.0
    margin_k: float = 1.0
    margin_finish_s: float = 600.0
    margin_activity: float = 0.02
    activity_z: float = 1.0
    recipe_limits_k: tuple | None = None  # the recipe's own temperature limits [K]
    hysteresis: dict = field(
        default_factory=lambda: {
            "behind_profile": 300.0,
            "late_finish": 600.0,
            "temperature_off_profile": 0.5,
            "low_activity": 0.02,
        }
    )
    persistence_options: dict = field(default_factory=_default_persistence)
    ladder: tuple = LADDER

    def to_dict(self) -> dict:
        d = asdict(self)
        d["persistence_options"] = {
            k: [p.to_dict() for p in v] for k, v in self.persistence_options.items()
        }
        d["ladder"] = [list(x) for x in self.ladder]
        return d


def settings_for(cfg, recipe: str) -> GoldenSettings:
    """The settings of a recipe's profile from the configuration (``[golden]``, and the
    recipe's own ``temperature_limits``)."""
    rc = cfg.recipe(recipe)
    return GoldenSettings(
        target_rate=cfg.golden.false_alarm_rate,
        min_batches=cfg.golden.min_batches,
        recipe_limits_k=tuple(rc.temperature_limits_k) if rc and rc.temperature_limits_k else None,
    )


@dataclass(frozen=True)
class GoldenCriteria:
    """Which completed batches count as good when none are named.

    ``time_to_target_range_s``: (low, high) [s]; None = median ± 5 scaled MADs of the
    candidates (a robust cut of the unusual ones). ``problems``: data-problem kinds
    that disqualify (`monitor.batch.figures.BatchFigures.problems`); a period, when
    given, holds batches started after ``started_after_s`` and ended before
    ``ended_before_s`` [s].
    """

    require_target: bool = True
    time_to_target_range_s: tuple | None = None
    problems: tuple = (
        "assay_mismatch",
        "model_contradicted",
        "temperature_gap",
        "no_charge",
        "no_assays",
        "events",
    )
    started_after_s: float | None = None
    ended_before_s: float | None = None


def select_golden(history: RecipeHistory, criteria: GoldenCriteria, named=None):
    """``(items, left_out)``: the golden batches and ``{batch: [reasons]}`` of the rest.

    Named batches are taken as they are (their data problems are noted, not held
    against them: the engineer chose them).
    """
    items = list(history.items)
    if named is not None:
        names = set(named)
        chosen = [it for it in items if it.batch.batch in names]
        notes = {
            it.batch.batch: sorted(it.hindsight.figures.problem_kinds())
            for it in chosen
            if it.hindsight.figures.problems
        }
        return chosen, {b: ["named; data problems: " + ", ".join(k)] for b, k in notes.items()}
    why: dict = {}
    ttt = np.array([_ttt(it) for it in items], float)
    rng = criteria.time_to_target_range_s
    if rng is None and np.isfinite(ttt).sum() >= 3:
        med = float(np.nanmedian(ttt))
        mad = 1.4826 * float(np.nanmedian(np.abs(ttt - med)))
        rng = (med - 5 * mad, med + 5 * mad)
    for it, t in zip(items, ttt, strict=True):
        f, b = it.hindsight.figures, it.batch
        reasons = []
        if criteria.started_after_s is not None and b.start_s < criteria.started_after_s:
            reasons.append("started before the period")
        if criteria.ended_before_s is not None and b.end_s > criteria.ended_before_s:
            reasons.append("ended after the period")
        best = max(f.final_conversion, f.last_assay_conversion or 0.0)
        if criteria.require_target and best < f.target_conversion:
            reasons.append(f"final conversion {best:.3f} below target {f.target_conversion:g}")
        if not np.isfinite(t):
            reasons.append("no time to target")
        elif rng is not None and not rng[0] <= t <= rng[1]:
            reasons.append(
                f"time to target {t / 3600:.2f} h outside {rng[0] / 3600:.2f}-{rng[1] / 3600:.2f} h"
            )
        bad = sorted(f.problem_kinds() & set(criteria.problems))
        if bad:
            reasons.append("data problems: " + ", ".join(bad))
        if reasons:
            why[b.batch] = reasons
    for name, reason in history.skipped:
        why[name] = [f"no hindsight: {reason}"]
    return [it for it in items if it.batch.batch not in why], why


def _reasons(left_out: dict, most: int = 3) -> str:
    """The commonest reasons batches were left out, counted ("12 x data problems: ...")."""
    counts: dict = {}
    for reasons in left_out.values():
        for r in reasons:
            key = r.split(" below target")[0].split(" outside ")[0]
            counts[key] = counts.get(key, 0) + 1
    top = sorted(counts.items(), key=lambda kv: -kv[1])[:most]
    return "; ".join(f"{n} x {r}" for r, n in top)


def _ttt(it) -> float:
    v = it.hindsight.figures.time_to_target_s
    return np.nan if v is None else float(v)


def build_profile(
    history: RecipeHistory,
    *,
    settings: GoldenSettings | None = None,
    criteria: GoldenCriteria | None = None,
    batches=None,
    estimator=None,
    created_at_s: float,
    replays: dict | None = None,
) -> GoldenProfile:
    """Select, build and calibrate a recipe's golden profile (see the module docstring).

    ``replays`` caches each batch's calibration replay by batch id (it depends only on
    the batch and the estimator settings): pass one dict to builds over subsets.
    """
    gs = settings or GoldenSettings()
    chosen, left_out = select_golden(history, criteria or GoldenCriteria(), batches)
    if len(chosen) < gs.min_batches:
        raise DataQualityError(
            f"recipe {history.recipe}: {len(chosen)} good batch(es) for a golden profile, "
            f"at least {gs.min_batches} needed"
            + (f"; left out: {_reasons(left_out)}" if left_out else "")
        )
    model = history.model
    step = chosen[0].hindsight.trajectory.step_s
    x_levels = np.arange(gs.x_min, model.target_conversion + 1e-9, gs.x_step)
    est = estimator or EstimatorSettings()
    cache = {} if replays is None else replays
    for it in chosen:
        if it.batch.batch not in cache:
            cache[it.batch.batch] = replay_data(it, est, step)
    cal = Calibration(chosen, [cache[it.batch.batch] for it in chosen], x_levels, step, gs)
    levels, figures = cal.choose()
    ttt = cal.ttt
    kw = {"display_p": gs.display_p}
    lv = levels
    profile = GoldenProfile(
        recipe=history.recipe,
        batches=tuple(it.batch.batch for it in chosen),
        kinetics_version=model.kinetics.version,
        created_at_s=float(created_at_s),
        settings=gs.to_dict(),
        behind=bands.behind_limits(
            cal.X,
            cal.t_to_x,
            x_levels,
            step,
            p=lv["behind_profile"].p,
            fence=lv["behind_profile"].fence,
            margin_x=gs.margin_x,
            margin_lag_s=gs.margin_lag_s,
            min_count=gs.min_count,
            **kw,
        ),  # fmt: skip
        temperature=bands.temperature_limits(
            cal.T,
            step,
            p=lv["temperature_off_profile"].p,
            fence=lv["temperature_off_profile"].fence,
            margin_k=gs.margin_k,
            min_count=gs.min_count,
            recipe_limits_k=gs.recipe_limits_k,
            **kw,
        ),  # fmt: skip
        finish=bands.finish_limits(
            ttt,
            p=lv["late_finish"].p,
            fence=lv["late_finish"].fence,
            margin_s=gs.margin_finish_s,
            **kw,
        ),
        activity=bands.activity_limits(
            cal.act,
            p=lv["low_activity"].p,
            fence=lv["low_activity"].fence,
            margin=gs.margin_activity,
            z=gs.activity_z,
            **kw,
        ),  # fmt: skip
        rules=levels,
        activities={it.batch.batch: float(a) for it, a in zip(chosen, cal.act, strict=True)},
        times_to_target_s={it.batch.batch: float(t) for it, t in zip(chosen, ttt, strict=True)},
        calibration=figures,
        trajectories={
            it.batch.batch: {
                "x": [round(float(v), 4) for v in it.hindsight.trajectory.conversion],
                "t_k": [
                    None if not np.isfinite(v) else round(float(v), 2)
                    for v in it.hindsight.trajectory.temperature_k
                ],
                "end_rel_s": it.hindsight.trajectory.end_rel_s,
            }
            for it in chosen
        },
        selection={"named": batches is not None, "left_out": left_out},
    )
    log.info(
        "golden profile %s: %d batches, calibrated per-batch alert share %.3f",
        history.recipe,
        len(chosen),
        figures["all"]["rate"],
    )
    return profile
