"""A batch's past as series in data time: conversion, temperature, predicted end, activity.

These are what the hindsight figures, the golden profile and its alert rules
look at: the model's conversion along the measured trace with a given activity
posterior, the measured temperature averaged over short windows, the end time
predicted from each past moment, and the activity as each assay arrived.
Everything is a pure function of the batch state (no clock, no I/O).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from ..physics.arrhenius import arrhenius_factor
from ..physics.quadrature import segment_integrals
from ..physics.theta import plan_temperature
from .estimator import posterior_for
from .posterior import ActivityPosterior
from .settings import EstimatorSettings
from .state import BatchState

#: Posterior quantiles the conversion path averages over (stratified).
ACTIVITY_NODES = 16
PLAN_STEP_S = 60.0


def grid(start_s: float, until_s: float, step_s: float, *, include_end: bool = True):
    """Times from ``start_s`` every ``step_s`` up to ``until_s`` (and ``until_s`` itself) [s]."""
    t = start_s + np.arange(0.0, max(until_s - start_s, 0.0) + 1e-9, step_s)
    if include_end and (len(t) == 0 or until_s - t[-1] > 1e-6):
        t = np.append(t, until_s)
    return t


def activity_nodes(post: ActivityPosterior, n: int = ACTIVITY_NODES) -> np.ndarray:
    """Activities at ``n`` stratified quantiles of the posterior [-]."""
    return np.exp(post.sample((np.arange(n) + 0.5) / n))


def median_activity(post: ActivityPosterior) -> float:
    """The posterior median of the activity [-]."""
    return float(np.exp(post.sample(np.array([0.5]))[0]))


def conversion_path(state: BatchState, post: ActivityPosterior, t_s) -> tuple:
    """Posterior mean and sd of the model conversion at times ``t_s`` [-].

    The measured trace is used up to its last sample, the last temperature held after.
    """
    X = np.atleast_2d(state.conversion_at(np.asarray(t_s, float), activity_nodes(post)))
    return X.mean(axis=0), X.std(axis=0)


def temperature_path(state: BatchState, t_s, window_s: float) -> np.ndarray:
    """Mean measured temperature over ``[t - window_s, t]`` at each time [K].

    Time-weighted (trapezoid over the samples); NaN outside the measured trace.
    """
    tr = state.trace
    n = len(tr)
    t_s = np.asarray(t_s, dtype=float)
    if n < 2:
        return np.full(len(t_s), np.nan)
    ts, T = tr.t_s[:n], tr.T_K[:n]
    C = np.concatenate([[0.0], np.cumsum(0.5 * (T[1:] + T[:-1]) * np.diff(ts))])
    lo = np.maximum(t_s - window_s, ts[0])
    span = t_s - lo
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (np.interp(t_s, ts, C) - np.interp(lo, ts, C)) / span
    mean = np.where(span > 0, mean, np.interp(t_s, ts, T))
    return np.where((t_s >= ts[0]) & (t_s <= ts[-1] + 1e-6), mean, np.nan)


def end_path(state: BatchState, alpha: float, t_s, horizon_s: float) -> np.ndarray | None:
    """The time the target is reached, predicted from each past time ``t`` [s].

    Up to ``t`` the measured trace, after it the recipe's temperature plan (else the
    temperature at ``t`` held), with activity ``alpha``; ``inf`` when the target is
    not reached within ``horizon_s`` of the start. Where the target was already
    passed, the time it was passed. Separable laws only (None otherwise): for them
    this is the forecast's median when the activity is its only uncertainty.
    """
    kin = state.kinetics
    law = kin.law
    t_s = np.asarray(t_s, dtype=float)
    if not law.separable:
        return None
    target = state.recipe.target_conversion
    if target >= law.x_max:
        return np.full(len(t_s), np.inf)
    need = float(law.G(target)) / (alpha * state.rate_scale())  # Theta to the target [s]
    theta = state.theta_at(t_s)
    tr = state.trace
    n = len(tr)
    out = np.full(len(t_s), np.inf)
    done = theta >= need
    if np.any(done):
        out[done] = np.interp(need, tr.theta[:n], tr.t_s[:n])
    todo = ~done
    if not np.any(todo):
        return out
    remaining = need - theta[todo]
    plan = state.recipe.temperature_plan
    start = state.start_s
    if plan:
        rel, P = _plan_theta(tuple(map(tuple, plan)), kin.ea_j_per_mol, kin.t_ref_k, horizon_s)
        pg = start + rel
        goal = np.interp(t_s[todo], pg, P) + remaining
        out[todo] = np.where(goal <= P[-1], np.interp(goal, P, pg), np.inf)
    else:
        T_at = np.interp(t_s[todo], tr.t_s[:n], tr.T_K[:n])
        ends = t_s[todo] + remaining / arrhenius_factor(T_at, kin.ea_j_per_mol, kin.t_ref_k)
        out[todo] = np.where(ends <= start + horizon_s, ends, np.inf)
    return out


@lru_cache(maxsize=64)
def _plan_theta(plan: tuple, ea_j_per_mol: float, t_ref_k: float, horizon_s: float):
    """``Theta`` along a temperature plan from the start: (times since start, Theta) [s]."""
    rel = np.arange(0.0, horizon_s + PLAN_STEP_S, PLAN_STEP_S)
    a, _, _ = segment_integrals(rel, plan_temperature(plan, 0.0, rel), ea_j_per_mol, t_ref_k)
    return rel, np.concatenate([[0.0], np.cumsum(a)])


@dataclass(frozen=True)
class ActivityPoint:
    """The activity posterior with the assays sampled up to ``t_s`` [s]."""

    t_s: float
    mean: float
    sd: float
    n_used: int
    key: int = 0  # what the posterior was computed from (assays and the trace under them)


def activity_path(
    state: BatchState, at_s: float, settings: EstimatorSettings, known: tuple = ()
) -> tuple[ActivityPoint, ...]:
    """The activity after each assay sampled up to ``at_s``, in sample order.

    ``known`` is an earlier path of the same batch: its points are kept while the
    assays and the trace under them are unchanged (a poll rarely brings an assay).
    The last point's posterior is the estimate's, so its cache stays useful.
    """
    sel = state.assay_t_s <= at_s
    t, v = state.assay_t_s[sel], state.assay_value[sel]
    theta = state.theta_at(t)
    out: list[ActivityPoint] = []
    for j in range(len(t)):
        key = hash((t[: j + 1].tobytes(), v[: j + 1].tobytes(), theta[: j + 1].tobytes()))
        if j < len(known) and known[j].key == key and len(out) == j:
            out.append(known[j])
            continue
        post, _, _ = posterior_for(state, float(t[j]), settings)
        out.append(
            ActivityPoint(float(t[j]), post.alpha_mean, post.alpha_sd, int(post.used.sum()), key)
        )
    return tuple(out)
