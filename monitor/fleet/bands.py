"""Bands and alert limits from good batches' trajectories and figures (pure numpy).

A band is a pair of quantiles of the good batches at each point of a grid
(``numpy.quantile``'s default, linear interpolation between order statistics:
Hyndman & Fan, "Sample quantiles in statistical packages", Am. Stat. 50 (1996)
361-365, definition 7). An alert limit is the good batches' quantile ``p`` on
its side (``p = 0``: the extreme good batch), moved outward by ``fence``
interquartile ranges. The interquartile range is the spread an outlier among the
good batches does not inflate (the scale of Tukey's fences: J. W. Tukey,
Exploratory Data Analysis, 1977, ch. 2; from memory); starting from the
extreme keeps a minority of good batches (another unit's slower heat-up) inside.
A limit is never closer to the median than ``margin`` (sensor noise and rounding
would otherwise make a tight band cry wolf).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..batch.figures import Trajectory
from ..batch.golden_profile import (
    ActivityLimits,
    BehindLimits,
    FinishLimits,
    TemperatureLimits,
)


def quantiles(values: np.ndarray, qs: Sequence[float], min_count: int) -> np.ndarray:
    """Quantiles over the first axis, ignoring NaN; NaN where fewer than ``min_count``
    values (shape ``(len(qs),) + values.shape[1:]``).

    The linear method (``numpy.quantile``'s default), vectorised over columns with
    different numbers of values (``numpy.nanquantile`` loops over them in Python).
    """
    v = np.sort(np.asarray(values, dtype=float), axis=0)  # NaN sort last
    n = np.isfinite(v).sum(axis=0)
    out = np.full((len(qs),) + v.shape[1:], np.nan)
    ok = n >= max(min_count, 1)
    if not np.any(ok):
        return out
    cols = v[:, ok]
    m = n[ok] - 1
    for j, q in enumerate(qs):
        h = m * float(q)
        lo = np.floor(h).astype(int)
        hi = np.minimum(lo + 1, m)
        a = np.take_along_axis(cols, lo[None, :], axis=0)[0]
        b = np.take_along_axis(cols, hi[None, :], axis=0)[0]
        out[j, ok] = a + (h - lo) * (b - a)
    return out


def limit(median, q, q1, q3, fence: float, margin: float, side: str):
    """The alert limit on ``side`` ("low" or "high"): the quantile ``q`` moved outward by
    ``fence`` interquartile ranges (``q3 - q1``); at least ``margin`` from the median."""
    iqr = q3 - q1
    if side == "low":
        return np.minimum(q - fence * iqr, median - margin)
    return np.maximum(q + fence * iqr, median + margin)


def stack(trajectories: Sequence[Trajectory], n_points: int, field: str) -> np.ndarray:
    """One row per batch of ``field`` on the common grid (NaN where a batch has none)."""
    out = np.full((len(trajectories), n_points), np.nan)
    for i, tr in enumerate(trajectories):
        v = getattr(tr, field)[:n_points]
        out[i, : len(v)] = v
    return out


def times_to(trajectories: Sequence[Trajectory], x_levels) -> np.ndarray:
    """Time since start at which each batch reached each conversion level [s]."""
    return np.array([tr.time_to(x_levels) for tr in trajectories]).reshape(
        len(trajectories), len(x_levels)
    )


def behind_limits(
    X: np.ndarray,
    t_to_x: np.ndarray,
    x_levels: np.ndarray,
    step_s: float,
    *,
    p: float,
    fence: float,
    display_p: float,
    margin_x: float,
    margin_lag_s: float,
    min_count: int,
) -> BehindLimits:
    """Conversion band against time since start and time-to-X band against X."""
    med, lo, hi, q, q1, q3 = quantiles(X, [0.5, display_p, 1 - display_p, p, 0.25, 0.75], min_count)
    t_med, t_hi, t_q, t1, t3 = quantiles(t_to_x, [0.5, 1 - display_p, 1 - p, 0.25, 0.75], min_count)
    x_limit = limit(med, q, q1, q3, fence, margin_x, "low")
    lag = limit(t_med, t_q, t1, t3, fence, margin_lag_s, "high") - t_med
    keep = np.isfinite(t_med)
    return BehindLimits(
        step_s=step_s,
        x_median=med,
        x_band_lo=lo,
        x_band_hi=hi,
        x_limit=x_limit,
        x_levels=np.asarray(x_levels, dtype=float)[keep],
        t_median=t_med[keep],
        t_band_hi=t_hi[keep],
        lag_limit_s=lag[keep],
    )


def temperature_limits(
    T: np.ndarray,
    step_s: float,
    *,
    p: float,
    fence: float,
    display_p: float,
    margin_k: float,
    min_count: int,
    recipe_limits_k: tuple | None = None,
) -> TemperatureLimits:
    """The measured temperature band against time since start; held after the last
    point with enough batches (the plan holds its last temperature)."""
    med, lo, hi, qlo, qhi, q1, q3 = quantiles(
        T, [0.5, display_p, 1 - display_p, p, 1 - p, 0.25, 0.75], min_count
    )
    out = [
        med,
        lo,
        hi,
        limit(med, qlo, q1, q3, fence, margin_k, "low"),
        limit(med, qhi, q1, q3, fence, margin_k, "high"),
    ]
    ok = np.flatnonzero(np.isfinite(med))
    if len(ok):
        last = ok[-1]
        for a in out:
            a[last + 1 :] = a[last]
    return TemperatureLimits(step_s, *out, recipe_limits_k=recipe_limits_k)


def finish_limits(times_s, *, p: float, fence: float, display_p: float, margin_s: float):
    """Limit on the time to target [s] (later is late)."""
    med, hi, q, q1, q3 = np.quantile(
        np.asarray(times_s, float), [0.5, 1 - display_p, 1 - p, 0.25, 0.75]
    )
    return FinishLimits(
        float(med), float(hi), float(limit(med, q, q1, q3, fence, margin_s, "high"))
    )


def activity_limits(
    activities, *, p: float, fence: float, display_p: float, margin: float, z: float
) -> ActivityLimits:
    """Limit on the activity (lower is low)."""
    med, lo, q, q1, q3 = np.quantile(np.asarray(activities, float), [0.5, display_p, p, 0.25, 0.75])
    return ActivityLimits(
        float(med), float(lo), float(limit(med, q, q1, q3, fence, margin, "low")), z
    )
