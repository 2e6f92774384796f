"""Hindsight of a completed batch: its trajectory and its per-batch figures.

With every assay and the whole temperature trace, the activity posterior is as
good as it will get; from it come the batch's conversion trajectory X(t) on a
regular grid of time since start, its temperature trajectory, and the figures
that describe the batch in one line (`BatchFigures`): activity, time to target,
final conversion, mean hold temperature, the assays' fit to the model and the
data-quality counts. The golden profile, the drift review and the backtest all
read these, so they are one documented record (``FIGURES_METHOD`` says which
computation made it).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import asdict, dataclass, field

import numpy as np

from .estimator import posterior_for
from .paths import grid, temperature_path
from .settings import EstimatorSettings
from .state import BatchState

#: Bumped whenever a figure's definition changes, so stored figures can be recomputed.
FIGURES_METHOD = 1


@dataclass(frozen=True)
class BatchFigures:
    """One completed batch in figures (times epoch s UTC, durations s, temperatures K).

    - ``activity``, ``activity_sd``: posterior mean and sd of the activity factor
      from all assays [-].
    - ``time_to_target_s`` (``_sd_s``): time from the start at which the model
      conversion reaches the recipe's target, posterior mean (sd); beyond the end it
      is extrapolated with the last temperature held; None if not reached within
      the extension.
    - ``final_conversion`` (``_sd``): model conversion at the end [-];
      ``last_assay_conversion``: the last assay as a conversion (a concentration
      assay through the batch's charge) and ``last_assay_s`` its sample time.
    - ``mean_hold_temperature_k``: time-weighted mean measured temperature over the
      recipe plan's holds (flat stretches, and after its last point); without a plan,
      over the second half of the batch.
    - ``assay_rmse``: root-mean-square residual of the assays used against the
      posterior mean model, in assay units; ``n_assays``, ``n_assays_used``.
    - ``excluded``: samples left out by the reader, per reason; ``n_gaps`` and
      ``longest_gap_s``: temperature gaps longer than the allowed gap.
    - ``problems``: data problems that keep a batch out of a golden profile,
      ``[{kind, message}]`` (kinds: assay_mismatch, model_contradicted,
      temperature_gap, no_charge, no_assays, events).
    """

    batch: str
    unit: str
    recipe: str
    start_s: float
    end_s: float
    kinetics_version: str
    target_conversion: float
    activity: float
    activity_sd: float
    time_to_target_s: float | None
    time_to_target_sd_s: float | None
    final_conversion: float
    final_conversion_sd: float
    last_assay_conversion: float | None
    last_assay_s: float | None
    mean_hold_temperature_k: float | None
    assay_kind: str
    assay_rmse: float | None
    n_assays: int
    n_assays_used: int
    excluded: dict = field(default_factory=dict)
    n_gaps: int = 0
    longest_gap_s: float = 0.0
    problems: tuple = ()
    method: int = FIGURES_METHOD

    @property
    def duration_s(self) -> float:
        return self.end_s - self.start_s

    def problem_kinds(self) -> set[str]:
        return {p["kind"] for p in self.problems}

    def to_dict(self) -> dict:
        d = asdict(self)
        d["problems"] = [dict(p) for p in self.problems]
        return d

    @classmethod
    def from_dict(cls, d: dict) -> BatchFigures:
        d = dict(d)
        d["problems"] = tuple(dict(p) for p in d.get("problems", ()))
        return cls(**d)


@dataclass(frozen=True)
class Trajectory:
    """A batch on a regular grid of time since start ``t_rel_s`` [s].

    ``conversion`` (posterior mean, [-]) and ``conversion_sd`` run to
    ``t_rel_s[-1]``: past the end (``end_rel_s``) they are extrapolated with the last
    temperature held. ``temperature_k`` is measured (mean over each grid step), NaN
    past the end.
    """

    batch: str
    step_s: float
    end_rel_s: float
    t_rel_s: np.ndarray
    conversion: np.ndarray
    conversion_sd: np.ndarray
    temperature_k: np.ndarray

    def time_to(self, x_levels) -> np.ndarray:
        """Time since start at which the conversion first reaches each level (NaN if
        never within the trajectory) [s]."""
        X = np.maximum.accumulate(self.conversion)  # monotone for the inversion
        x = np.asarray(x_levels, dtype=float)
        out = np.interp(x, X, self.t_rel_s)
        # on a flat stretch interp returns its end; the first time is its start
        first = np.searchsorted(X, x, side="left")
        exact = (first < len(X)) & (X[np.minimum(first, len(X) - 1)] == x)
        out = np.where(exact, self.t_rel_s[np.minimum(first, len(X) - 1)], out)
        return np.where(x <= X[-1], out, np.nan)


@dataclass(frozen=True)
class Hindsight:
    figures: BatchFigures
    trajectory: Trajectory


def hindsight(
    state: BatchState,
    settings: EstimatorSettings,
    *,
    step_s: float = 120.0,
    extend_s: float = 7200.0,
    excluded: dict | None = None,
    event_problems: tuple = (),
) -> Hindsight:
    """The hindsight of a completed batch from all its data (see the module docstring).

    ``excluded`` counts the samples the reader left out, per reason;
    ``event_problems`` are the events table's messages about this batch.
    """
    if state.end_s is None:
        raise ValueError(f"batch {state.batch}: hindsight needs a completed batch")
    if len(state.trace) == 0:
        raise ValueError(f"batch {state.batch}: no temperature samples")
    start, end = state.start_s, float(state.end_s)
    post, t_a, y_a = posterior_for(state, end, settings)
    w, alphas = post.weights, np.exp(post.phi)
    t = grid(start, end + extend_s, step_s, include_end=False)
    X_all = np.atleast_2d(state.conversion_at(t, alphas))
    X = w @ X_all
    X_sd = np.sqrt(np.maximum(w @ (X_all - X) ** 2, 0.0))
    T = temperature_path(state, t, step_s)
    T[t > end + 1e-6] = np.nan
    X_end = np.atleast_2d(state.conversion_at(np.array([end]), alphas))[:, 0]
    x_end = float(w @ X_end)
    target = state.recipe.target_conversion
    ttt, ttt_sd = _time_to_target(t - start, X_all, w, target)
    used = post.used
    rmse = None
    if used.any():
        pred = w @ state.predict_assays(post.phi, t_a[used])
        rmse = float(np.sqrt(np.mean((y_a[used] - pred) ** 2)))
    last_x = last_t = None
    if len(t_a):
        last_t, y = float(t_a[-1]), float(y_a[-1])
        last_x = y if state.recipe.assay_kind == "conversion" else 1.0 - y / state.c_a0
    gaps = [g for g in state.trace.gaps if g.end_s <= end]
    figures = BatchFigures(
        batch=state.batch,
        unit=state.unit,
        recipe=state.recipe.name,
        start_s=start,
        end_s=end,
        kinetics_version=state.kinetics.version,
        target_conversion=target,
        activity=post.alpha_mean,
        activity_sd=post.alpha_sd,
        time_to_target_s=ttt,
        time_to_target_sd_s=ttt_sd,
        final_conversion=x_end,
        final_conversion_sd=float(np.sqrt(max(w @ (X_end - x_end) ** 2, 0.0))),
        last_assay_conversion=last_x,
        last_assay_s=last_t,
        mean_hold_temperature_k=mean_hold_temperature(state),
        assay_kind=state.recipe.assay_kind,
        assay_rmse=rmse,
        n_assays=len(t_a),
        n_assays_used=int(used.sum()),
        excluded=dict(excluded or {}),
        n_gaps=len(gaps),
        longest_gap_s=max((g.end_s - g.start_s for g in gaps), default=0.0),
        problems=_problems(state, post, t_a, gaps, event_problems),
    )
    traj = Trajectory(state.batch, step_s, end - start, t - start, X, X_sd, T)
    return Hindsight(figures, traj)


def _time_to_target(t_rel, X_all, w, target):
    """Posterior mean and sd of the first time each activity node reaches the target."""
    reached = X_all >= target
    hit = reached.any(axis=1)
    if w[hit].sum() < 0.5:  # most of the posterior never gets there: no figure
        return None, None
    i = np.argmax(reached, axis=1)
    j = np.maximum(i - 1, 0)
    rows = np.arange(len(X_all))
    x0, x1 = X_all[rows, j], X_all[rows, i]
    frac = np.where(x1 > x0, (target - x0) / np.where(x1 > x0, x1 - x0, 1.0), 0.0)
    times = t_rel[j] + np.clip(frac, 0.0, 1.0) * (t_rel[i] - t_rel[j])
    wh = w[hit] / w[hit].sum()
    mean = float(wh @ times[hit])
    return mean, float(np.sqrt(max(wh @ (times[hit] - mean) ** 2, 0.0)))


def hold_windows(plan, start_s: float, end_s: float) -> list[tuple[float, float]]:
    """The plan's holds inside a batch: flat stretches and after its last point [s]."""
    out = []
    pts = list(plan)
    for (t0, T0), (t1, T1) in zip(pts, pts[1:], strict=False):
        if T0 == T1 and t1 > t0:
            out.append((start_s + t0, start_s + t1))
    if pts:
        out.append((start_s + pts[-1][0], end_s))
    return [(max(a, start_s), min(b, end_s)) for a, b in out if min(b, end_s) > max(a, start_s)]


def mean_hold_temperature(state: BatchState) -> float | None:
    """Time-weighted mean measured temperature over the plan's holds [K] (see
    `BatchFigures`)."""
    end = float(state.end_s if state.end_s is not None else state.trace.last_t_s)
    windows = hold_windows(state.recipe.temperature_plan, state.start_s, end)
    if not windows:
        windows = [((state.start_s + end) / 2.0, end)]
    tr = state.trace
    n = len(tr)
    if n < 2:
        return None
    ts, T = tr.t_s[:n], tr.T_K[:n]
    C = np.concatenate([[0.0], np.cumsum(0.5 * (T[1:] + T[:-1]) * np.diff(ts))])
    total = span = 0.0
    for a, b in windows:
        a, b = max(a, ts[0]), min(b, ts[-1])
        if b > a:
            total += float(np.interp(b, ts, C) - np.interp(a, ts, C))
            span += b - a
    return total / span if span > 0 else None


def excluded_by_reason(rows) -> dict:
    """Exclusion counts per reason from the reader's ``[{tag, reason, count}]`` rows."""
    c: Counter = Counter()
    for r in rows:
        c[r["reason"]] += int(r["count"])
    return dict(sorted(c.items()))


def _problems(state, post, t_a, gaps, event_problems) -> tuple:
    out = []
    bad = np.flatnonzero(~post.used)
    if len(t_a) and not post.used.any():
        out.append({"kind": "model_contradicted", "message": "every assay contradicts the model"})
    elif len(bad):
        out.append(
            {
                "kind": "assay_mismatch",
                "message": f"{len(bad)} assay(s) beyond the mismatch limit, not used",
            }
        )
    if not len(t_a):
        out.append({"kind": "no_assays", "message": "no assays"})
    if gaps:
        out.append(
            {"kind": "temperature_gap", "message": f"{len(gaps)} temperature gap(s) bridged"}
        )
    if not state.charge_from_tag:
        out.append({"kind": "no_charge", "message": "no charge sample: recipe value used"})
    for m in event_problems:
        out.append({"kind": "events", "message": str(m)})
    return tuple(out)
