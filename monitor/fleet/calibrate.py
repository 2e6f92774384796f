"""Leave-one-batch-out calibration of the golden alert limits.

Each golden batch is replayed as the live monitor would have judged it: with
the activity posterior of the assays sampled so far (one posterior per assay),
the rules evaluated over its past, each against a profile built without it.
For every rule the calibration walks a ladder of limits from tight to loose
(band quantile ``p``, then the extreme good batch moved outward by ``fence``
interquartile ranges) and, for each, persistence options from short to long, and keeps the
first setting whose flagged batches, together with those of the rules already
chosen, stay within the allowed share (``target_rate`` of the golden batches, rounded down). Rules
are chosen in priority order: behind profile, low activity, late finish,
temperature off profile.

Simplification, stated: the replay applies an assay from its *sample* time
(the live monitor sees it when the lab result arrives, 20-60 min later), so the
replayed posterior changes slightly earlier than it did live.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import binomtest

from ..batch.episodes import Persistence, Runs
from ..batch.estimator import posterior_for
from ..batch.golden_profile import RuleLevel
from ..batch.golden_signals import (
    activity_signal,
    behind_signal,
    finish_signal,
    temperature_signal,
)
from ..batch.paths import conversion_path, end_path, grid, median_activity
from ..batch.settings import EstimatorSettings
from . import bands

PRIORITY = ("behind_profile", "low_activity", "late_finish", "temperature_off_profile")


@dataclass(frozen=True)
class ReplayData:
    """One golden batch as the live rules would have seen it, posterior by posterior.

    Rows of ``X`` and ``end_s`` are the posteriors with 0, 1, 2, ... assays; row k is
    what the monitor showed while ``visible[k]`` (from the k-th assay's sample time
    to the next). ``T`` is the measured temperature on the same grid ``t_s``.
    """

    batch: str
    start_s: float
    t_s: np.ndarray
    X: np.ndarray
    end_s: np.ndarray | None
    visible: np.ndarray
    T: np.ndarray
    act_t: np.ndarray
    act_mean: np.ndarray
    act_sd: np.ndarray

    @property
    def t_rel_s(self) -> np.ndarray:
        return self.t_s - self.start_s


def replay_data(item, settings: EstimatorSettings, step_s: float) -> ReplayData:
    """The replay of one history item (`monitor.fleet.history.HistoryItem`)."""
    state, traj = item.state, item.hindsight.trajectory
    start, end = state.start_s, float(state.end_s)
    t = grid(start, end, step_s, include_end=False)
    assay_t = np.unique(state.assay_t_s[state.assay_t_s <= end])
    bounds = np.concatenate([[start - 1.0], assay_t])
    rows_x, rows_end, act = [], [], []
    horizon = settings.horizon_h * 3600.0
    for k, at in enumerate(bounds):
        post, _, _ = posterior_for(state, float(at), settings)
        rows_x.append(conversion_path(state, post, t)[0])
        rows_end.append(end_path(state, median_activity(post), t, horizon))
        if k:
            act.append((float(at), post.alpha_mean, post.alpha_sd))
    edges = np.concatenate([[start], assay_t, [end + 1.0]])
    visible = (t[None, :] >= edges[:-1, None]) & (t[None, :] < edges[1:, None])
    ends = None if rows_end[0] is None else np.array(rows_end)
    a = np.array(act).reshape(-1, 3)
    return ReplayData(
        item.batch.batch,
        start,
        t,
        np.array(rows_x),
        ends,
        visible,
        traj.temperature_k[: len(t)],
        a[:, 0],
        a[:, 1],
        a[:, 2],
    )


def binomial_figures(flagged: set, n: int) -> dict:
    """Share of batches flagged with its 95 % Clopper-Pearson interval (scipy)."""
    k = len(flagged)
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact") if n else None
    return {
        "n": n,
        "n_flagged": k,
        "rate": k / n if n else None,
        "ci": [float(ci.low), float(ci.high)] if ci else None,
        "flagged": sorted(flagged),
    }


class Calibration:
    """The leave-one-batch-out replay of a golden set against candidate limits."""

    def __init__(self, items, replays, x_levels, step_s: float, gs):
        self.items, self.replays, self.gs = items, replays, gs
        self.x_levels, self.step_s = x_levels, step_s
        trajs = [it.hindsight.trajectory for it in items]
        self.n_grid = max(len(tr.t_rel_s) for tr in trajs)
        self.X = bands.stack(trajs, self.n_grid, "conversion")
        self.T = bands.stack(trajs, self.n_grid, "temperature_k")
        self.t_to_x = bands.times_to(trajs, x_levels)
        self.act = np.array([it.hindsight.figures.activity for it in items])
        self.ttt = np.array([it.hindsight.figures.time_to_target_s for it in items], float)

    def _others(self, i: int):
        return np.arange(len(self.items)) != i

    def signals(self, rule: str, p: float, fence: float, hysteresis: float) -> list:
        """Per golden batch, ``(batch, Runs, visible)`` of ``rule`` judged against the
        limits ``(p, fence)`` built without that batch."""
        gs = self.gs
        out = []
        for i, r in enumerate(self.replays):
            o = self._others(i)
            if rule == "behind_profile":
                lim = bands.behind_limits(
                    self.X[o], self.t_to_x[o], self.x_levels, self.step_s, p=p, fence=fence,
                    display_p=gs.display_p, margin_x=gs.margin_x, margin_lag_s=gs.margin_lag_s,
                    min_count=gs.min_count,
                )  # fmt: skip
                up, down = behind_signal(lim, hysteresis, r.t_rel_s[None, :], r.X)[:2]
                t, vis = r.t_s, r.visible.copy()
                vis[: gs.min_assays] = False
            elif rule == "late_finish":
                if r.end_s is None:
                    continue
                lim = bands.finish_limits(
                    self.ttt[o],
                    p=p,
                    fence=fence,
                    display_p=gs.display_p,
                    margin_s=gs.margin_finish_s,
                )
                up, down, _ = finish_signal(lim, hysteresis, r.end_s, r.start_s)
                t, vis = r.t_s, r.visible.copy()
                vis[: gs.min_assays] = False
            elif rule == "temperature_off_profile":
                lim = bands.temperature_limits(
                    self.T[o], self.step_s, p=p, fence=fence, display_p=gs.display_p,
                    margin_k=gs.margin_k, min_count=gs.min_count,
                    recipe_limits_k=gs.recipe_limits_k,
                )  # fmt: skip
                ok = np.isfinite(r.T)
                up, down = temperature_signal(lim, hysteresis, r.t_rel_s[ok], r.T[ok])[:2]
                t, vis = r.t_s[ok], np.ones(ok.sum(), bool)
            else:
                if not len(r.act_t):
                    continue
                lim = bands.activity_limits(
                    self.act[o], p=p, fence=fence, display_p=gs.display_p,
                    margin=gs.margin_activity, z=gs.activity_z,
                )  # fmt: skip
                up, down = activity_signal(lim, hysteresis, r.act_mean, r.act_sd)
                t, vis = r.act_t, np.ones(len(r.act_t), bool)
            out.append((r.batch, Runs(t, up, down), vis))
        return out

    @staticmethod
    def flagged(signals: list, persistence: Persistence) -> set:
        """The batches whose replay would have raised the alert at least once."""
        return {b for b, runs, vis in signals if np.any(runs.states(persistence)[0] & vis)}

    def choose(self) -> tuple[dict, dict]:
        """The rule levels and the calibration figures (see the module docstring)."""
        gs = self.gs
        n = len(self.items)
        allowed = int(np.floor(gs.target_rate * n + 1e-9))
        union: set = set()
        levels, figures = {}, {}
        for rule in PRIORITY:
            options = gs.persistence_options[rule]
            h = gs.hysteresis[rule]
            chosen = None
            curve = []
            for p, fence in gs.ladder:
                sig = self.signals(rule, p, fence, h)
                counts = []
                for per in options:
                    f = self.flagged(sig, per)
                    counts.append(len(f))
                    if len(union | f) <= allowed:
                        chosen = (p, fence, per, f)
                        break
                curve.append([p, fence, counts])
                if chosen:
                    break
            feasible = chosen is not None
            if not feasible:  # even the loosest limit flags too many: keep the loosest
                p, fence = gs.ladder[-1]
                chosen = (p, fence, options[-1], f)
            p, fence, per, f = chosen
            union |= f
            levels[rule] = RuleLevel(p, fence, per, per, h)
            figures[rule] = {
                **binomial_figures(f, n),
                "feasible": feasible,
                "p": p,
                "fence": fence,
                "persistence": per.to_dict(),
                "ladder": curve,
            }
        figures["all"] = {**binomial_figures(union, n), "allowed": allowed}
        figures["target_rate"] = gs.target_rate
        figures["method"] = "leave-one-batch-out replay, assays applied at sample time"
        return levels, figures


def persistence_minutes(*minutes: float) -> tuple[Persistence, ...]:
    return tuple(Persistence(60.0 * m) for m in minutes)
