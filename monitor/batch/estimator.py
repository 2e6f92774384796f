"""Estimate for one batch: conversion now, activity, and the predicted end time.

The activity posterior comes from the assays (`monitor.batch.posterior`); the
forecast of the end time from `monitor.batch.forecast`. Findings (an assay that
disagrees, a stale or gappy trace, no charge sample) travel with the estimate as
typed values (`monitor.batch.findings`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..timefmt import duration, iso
from .findings import Finding, Kind, Severity
from .forecast import forecast_reversible, forecast_separable
from .posterior import activity_posterior
from .safety_overlay import safety_overlay
from .settings import EstimatorSettings
from .state import BatchState, prior_sd


@dataclass
class Estimate:
    """The estimator's answer at one moment (times in epoch seconds, UTC)."""

    batch: str
    unit: str
    recipe: str
    at_s: float
    start_s: float
    conversion: float
    conversion_sd: float
    activity: float
    activity_sd: float
    target_conversion: float
    predicted_end_s: float | None
    predicted_end_p10_s: float | None
    predicted_end_p90_s: float | None
    forecast_note: str
    n_assays_used: int
    findings: list = field(default_factory=list)
    temperature_k: float | None = None
    mismatched_assays: list = field(default_factory=list)
    kinetics_version: str = ""
    config_version: str = ""  # of the configuration around the kinetics (set by the caller)
    safety: dict = field(default_factory=dict)
    model_contradicted: bool = False

    @property
    def warnings(self) -> list[str]:
        """The findings' messages, for people and for the JSON document."""
        return [f.message for f in self.findings]


def posterior_for(state: BatchState, at_s: float, settings: EstimatorSettings):
    """Activity posterior from the assays sampled at or before ``at_s``."""
    sel = state.assay_t_s <= at_s
    t, y = state.assay_t_s[sel], state.assay_value[sel]
    # the posterior depends only on the assays and on the trace up to them: reuse it
    # while neither changed (most polls bring temperatures, not assays)
    key = (
        t.tobytes(),
        y.tobytes(),
        state.theta_at(t).tobytes(),
        state.c_a0,
        settings.mismatch_sigma,
    )
    if state.posterior_cache is not None and state.posterior_cache[0] == key:
        return state.posterior_cache[1], t, y
    post = activity_posterior(
        lambda phi: state.predict_assays(phi, t),
        y,
        state.recipe.assay_sd,
        prior_sd(state.kinetics),
        mismatch_sigma=settings.mismatch_sigma,
    )
    state.posterior_cache = (key, post)
    return post, t, y


def estimate(
    state: BatchState, at_s: float, settings: EstimatorSettings | None = None, *, safety=None
) -> Estimate:
    """Conversion at ``at_s`` with its uncertainty, and the predicted end time."""
    settings = settings or EstimatorSettings()
    if len(state.trace) == 0 or state.trace.t_s[0] > at_s:
        raise ValueError(f"batch {state.batch}: no temperature samples before the estimate time")
    findings: list[Finding] = []
    post, t_a, y_a = posterior_for(state, at_s, settings)
    for i in np.flatnonzero(~post.used):
        findings.append(
            Finding(
                Kind.ASSAY_MISMATCH,
                Severity.WARNING,
                f"assay sampled at {iso(t_a[i])} ({y_a[i]:.4g}) is "
                f"{abs(post.z_loo[i]):.1f} sd from the model; not used",
                {"sample_s": float(t_a[i]), "value": float(y_a[i]), "z": float(post.z_loo[i])},
            )
        )
    contradicted = len(t_a) > 0 and not post.used.any()
    if contradicted:
        findings.insert(
            0,
            Finding(
                Kind.MODEL_CONTRADICTED,
                Severity.CRITICAL,
                f"model contradicted: all {len(t_a)} assay(s) are more than "
                f"{settings.mismatch_sigma:g} sd from the model, so conversion and end time "
                "come from the kinetics alone and must not be trusted; check the kinetics "
                "file, the recipe and the assays",
                {"n_assays": len(t_a), "max_abs_z": float(np.max(np.abs(post.z_loo)))},
            ),
        )
    if not len(t_a):
        findings.append(
            Finding(
                Kind.NO_ASSAYS,
                Severity.INFO,
                "no assays yet: conversion from the kinetics alone (prior activity)",
            )
        )
    tr = state.trace
    last = float(tr.t_s[int(np.searchsorted(tr.t_s[: len(tr)], at_s, side="right")) - 1])
    if at_s - last > settings.max_gap_s:
        findings.append(
            Finding(
                Kind.TEMPERATURE_STALE,
                Severity.WARNING,
                f"temperature stale: last sample {duration(at_s - last)} before "
                "the estimate time; last value held",
                {"last_sample_s": last},
            )
        )
    gaps = [g for g in tr.gaps if g.end_s <= at_s]
    if gaps:
        longest = max(g.end_s - g.start_s for g in gaps)
        findings.append(
            Finding(
                Kind.TEMPERATURE_GAP,
                Severity.INFO,
                f"temperature gap: {len(gaps)} gap(s) longer than "
                f"{settings.max_gap_s:.0f} s bridged by interpolation (longest "
                f"{duration(longest)}); uncertainty widened",
                {"gaps": len(gaps), "longest_s": longest},
            )
        )
    if not state.charge_from_tag:
        findings.append(
            Finding(
                Kind.NO_CHARGE,
                Severity.INFO,
                f"no charge sample: recipe initial concentration {state.c_a0:g} mol/L used",
                {"c_a0_mol_per_l": state.c_a0},
            )
        )
    if state.kinetics.law.separable:
        out = forecast_separable(state, at_s, post, settings)
    else:
        out = forecast_reversible(state, at_s, post, settings)
    X_draws, t_end, note = out
    n_used = int(post.used.sum())
    target = state.recipe.target_conversion
    q = _quantiles(t_end)
    if note == "" and any(v is None for v in q):
        note = (
            f"the upper band is beyond the {settings.horizon_h:g} h forecast horizon"
            if q[1] is not None
            else f"target X = {target:g} not reached within {settings.horizon_h:g} h under "
            "the temperature plan"
        )
    T_now = float(np.interp(at_s, tr.t_s[: len(tr)], tr.T_K[: len(tr)]))
    est = Estimate(
        batch=state.batch,
        unit=state.unit,
        recipe=state.recipe.name,
        at_s=float(at_s),
        start_s=state.start_s,
        conversion=float(np.mean(X_draws)),
        conversion_sd=float(np.std(X_draws)),
        activity=post.alpha_mean,
        activity_sd=post.alpha_sd,
        target_conversion=target,
        predicted_end_s=q[1],
        predicted_end_p10_s=q[0],
        predicted_end_p90_s=q[2],
        forecast_note=note,
        n_assays_used=n_used,
        findings=findings,
        temperature_k=T_now,
        mismatched_assays=[float(t_a[i]) for i in np.flatnonzero(~post.used)],
        kinetics_version=state.kinetics.version,
        model_contradicted=contradicted,
    )
    if safety is not None:
        est.safety = safety_overlay(state, est, safety)
    return est


def _quantiles(t_end):
    t_end = np.asarray(t_end, dtype=float)
    if not np.isfinite(t_end).any():
        return [None, None, None]
    with np.errstate(invalid="ignore"):  # inf - inf inside the unreached tail
        q = np.percentile(t_end, [10, 50, 90], method="linear")
    return [float(v) if np.isfinite(v) else None for v in q]
