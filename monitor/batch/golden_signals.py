"""What the golden alert rules look at: a batch's past, and each rule's signal.

`batch_past` gathers a batch's series in data time (conversion with the current
activity posterior, temperature, the end predicted from each moment, the
activity assay after assay). Each ``*_signal`` turns a series and the rule's
limits into the raise and clear conditions that `monitor.batch.episodes` judges
with persistence and hysteresis. The rules themselves (conditions and messages)
are in `monitor.batch.alert_rules`; the calibration of the limits
(`monitor.fleet.calibrate`) calls the same signals on many series at once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .golden_profile import (
    ActivityLimits,
    BehindLimits,
    FinishLimits,
    TemperatureLimits,
    on_grid,
)
from .paths import (
    conversion_path,
    end_path,
    grid,
    median_activity,
    temperature_path,
)
from .posterior import ActivityPosterior
from .state import BatchState


@dataclass(frozen=True)
class BatchPast:
    """A batch's past as the golden rules see it (data times [s], SI)."""

    start_s: float
    t_s: np.ndarray
    conversion: np.ndarray
    temperature_k: np.ndarray
    end_s: np.ndarray | None  # predicted end from each time (None: law not separable)
    activity: tuple  # ActivityPoint per assay
    n_assays_used: int = 0  # by the current posterior

    @property
    def t_rel_s(self) -> np.ndarray:
        return self.t_s - self.start_s


def batch_past(
    state: BatchState,
    post: ActivityPosterior,
    at_s: float,
    step_s: float,
    activity: tuple = (),
    horizon_s: float = 72 * 3600.0,
) -> BatchPast:
    """The series the rules need, on a grid every ``step_s`` from the start to ``at_s``."""
    t = grid(state.start_s, at_s, step_s)
    X, _ = conversion_path(state, post, t)
    T = temperature_path(state, t, step_s)
    end = end_path(state, median_activity(post), t, horizon_s)
    return BatchPast(state.start_s, t, X, T, end, tuple(activity), int(post.used.sum()))


# ---------------------------------------------------------------- signals (arrays)
# Each takes the rule's limits and hysteresis and returns (raise, clear, ...) along a
# series; a leading axis of independent series broadcasts (the calibration uses it).
def behind_signal(b: BehindLimits, hysteresis_s: float, t_rel_s, conversion):
    """``(raise, clear, lag_s, lag_limit_s, x_limit)`` along a conversion series."""
    x = np.asarray(conversion, dtype=float)
    x_limit = on_grid(b.x_limit, b.step_s, t_rel_s)
    lag = np.asarray(t_rel_s) - b.t_median_at(x)
    lag_limit = b.lag_limit_at(x)
    with np.errstate(invalid="ignore"):
        up = (lag > lag_limit) | (x < x_limit)
        down = ~(lag > lag_limit - hysteresis_s) & (x >= x_limit)
    return up, down, lag, lag_limit, x_limit


def finish_signal(f: FinishLimits, hysteresis_s: float, end_s, start_s):
    """``(raise, clear, predicted duration)`` along a predicted-end series."""
    d = np.asarray(end_s, dtype=float) - start_s
    return d > f.limit_s, d < f.limit_s - hysteresis_s, d


def temperature_signal(tl: TemperatureLimits, hysteresis_k: float, t_rel_s, T_K):
    """``(raise, clear, lo, hi)`` along a temperature series (NaN: no judgement)."""
    lo = on_grid(tl.limit_lo, tl.step_s, t_rel_s)
    hi = on_grid(tl.limit_hi, tl.step_s, t_rel_s)
    if tl.recipe_limits_k:
        lo = np.maximum(lo, tl.recipe_limits_k[0])
        hi = np.minimum(hi, tl.recipe_limits_k[1])
    temp = np.asarray(T_K, dtype=float)
    with np.errstate(invalid="ignore"):
        up = (temp < lo) | (temp > hi)
        down = (temp >= lo + hysteresis_k) & (temp <= hi - hysteresis_k)
    return up, down, lo, hi


def activity_signal(a: ActivityLimits, hysteresis: float, mean, sd):
    """``(raise, clear)`` along the activity after each assay."""
    mean, sd = np.asarray(mean, dtype=float), np.asarray(sd, dtype=float)
    return mean + a.z * sd < a.limit, mean > a.limit + hysteresis
