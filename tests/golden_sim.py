"""Test helpers for the golden rules: replay a batch as the live monitor saw it, and
plant faults in copies of sample-plant batches (invented data, tests only).

`live_alerts` feeds a batch to a fresh state cycle by cycle (temperatures up to
the cycle time, assays when their results *arrived*, from the generator's truth
file) and applies the golden rules exactly as the service does, keeping the
alert lifecycle (open kinds carry the hysteresis across cycles).

Faults scale the true conversion through the true kinetics of the truth file
(the generator's, not the monitor's): a slow batch of activity factor ``f`` has
``G(X') = f G(X)``; a temperature excursion changes the trace and, through the
true activation energy, the true conversion. The lab noise of each assay
(reported minus true) is kept.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from monitor.batch.alert_rules import golden_conditions
from monitor.batch.estimator import posterior_for
from monitor.batch.golden_signals import batch_past
from monitor.batch.kinetics import Kinetics
from monitor.batch.paths import activity_path
from monitor.batch.state import BatchState
from monitor.physics.quadrature import reference_time
from monitor.timefmt import from_iso

GOLDEN_KINDS = ("behind_profile", "late_finish", "temperature_off_profile", "low_activity")


@dataclass
class Planted:
    """A batch to replay: its trace [s], [K] and assays (sample time, value, arrival)."""

    batch: str
    start_s: float
    end_s: float
    c_a0: float
    trace_t: np.ndarray
    trace_T: np.ndarray
    assay_t: np.ndarray
    assay_v: np.ndarray
    assay_arrival: np.ndarray
    note: str = ""
    fault_start_s: float | None = None


@dataclass
class LiveResult:
    first_raise: dict = field(default_factory=dict)  # kind -> data time [s]
    # the first cycle whose arrived assays put the activity below the golden limit
    # (mean + z sd): the earliest the lab data could tell a slow batch [s]
    assays_tell_s: float | None = None
    raises: list = field(default_factory=list)  # (kind, data time, message)
    clears: list = field(default_factory=list)


def planted_from(item, truth_batch: dict) -> Planted:
    """A history item (`monitor.fleet.history.HistoryItem`) with its truth-file arrivals."""
    st = item.state
    n = len(st.trace)
    rows = [a for a in truth_batch["assays"] if a["quality"] == 0 and a["value"] is not None]
    t = np.array([from_iso(a["ts"]) for a in rows])
    return Planted(
        st.batch,
        st.start_s,
        float(st.end_s),
        st.c_a0,
        st.trace.t_s[:n].copy(),
        st.trace.T_K[:n].copy(),
        t,
        np.array([a["value"] for a in rows], float),
        np.array([from_iso(a["arrival"]) for a in rows]),
    )


def _true_law(recipe_truth: dict):
    kin = Kinetics(
        recipe_truth["rate_law"],
        recipe_truth["k_ref"],
        recipe_truth["t_ref_k"],
        recipe_truth["ea_j_per_mol"],
        order=recipe_truth.get("order", 1.0),
        theta_b=recipe_truth.get("theta_b"),
        b=recipe_truth.get("b", 1.0),
    )
    return kin.law


def _reassay(p: Planted, truth_batch: dict, recipe_truth: dict, new_x) -> np.ndarray:
    """Reported values for new true conversions, keeping each assay's lab noise."""
    rows = [a for a in truth_batch["assays"] if a["quality"] == 0 and a["value"] is not None]
    x = np.array([a["true_conversion"] for a in rows])
    x_new = new_x(x)
    if recipe_truth["assay_kind"] == "conversion":
        noise = p.assay_v - x
        return np.round(np.clip(x_new + noise, 0.0, 1.0), 3)
    c_true = np.array([a["true_concentration"] for a in rows])
    noise = p.assay_v - c_true
    c0 = c_true / np.maximum(1.0 - x, 1e-12)
    return np.round(np.clip(c0 * (1.0 - x_new) + noise, 0.0, None), 3)


def slowed(p: Planted, truth_batch: dict, recipe_truth: dict, factor: float) -> Planted:
    """The batch as it would have run with its activity times ``factor``."""
    law = _true_law(recipe_truth)
    v = _reassay(p, truth_batch, recipe_truth, lambda x: law.G_inv(factor * law.G(x)))
    return Planted(**{**p.__dict__, "assay_v": v, "note": f"activity x{factor:g}"})


def excursion(
    p: Planted, truth_batch: dict, recipe_truth: dict, at_rel_s: float, length_s: float, dT_K: float
) -> Planted:
    """The batch with its temperature moved by ``dT_K`` for ``length_s`` from ``at_rel_s``
    after the start (a cooling or heating upset); the true conversion follows."""
    t, T = p.trace_t, p.trace_T.copy()
    inside = (t >= p.start_s + at_rel_s) & (t < p.start_s + at_rel_s + length_s)
    T[inside] += dT_K
    ea, t_ref = recipe_truth["ea_j_per_mol"], recipe_truth["t_ref_k"]
    th_old = reference_time(t, p.trace_T, ea, t_ref)
    th_new = reference_time(t, T, ea, t_ref)
    law = _true_law(recipe_truth)

    def new_x(x):
        ratio = np.interp(p.assay_t, t, th_new) / np.maximum(np.interp(p.assay_t, t, th_old), 1e-9)
        return law.G_inv(law.G(x) * ratio)

    v = _reassay(p, truth_batch, recipe_truth, new_x)
    return Planted(
        **{
            **p.__dict__,
            "trace_T": T,
            "assay_v": v,
            "note": f"{dT_K:+g} K for {length_s / 60:g} min",
            "fault_start_s": p.start_s + at_rel_s,
        }
    )


def live_alerts(
    p: Planted,
    model,
    profile,
    settings,
    *,
    every_s: float = 600.0,
    first_s: float | None = None,
    until_s: float | None = None,
    unit: str = "degC",
) -> LiveResult:
    """Replay ``p`` cycle by cycle (every ``every_s`` of plant time) through the golden
    rules as the service applies them; the first cycle is at ``first_s``."""
    st = BatchState(p.batch, "", model, p.start_s, p.c_a0, max_gap_s=settings.max_gap_s)
    out = LiveResult()
    open_kinds: set = set()
    known: tuple = ()
    n_t = n_a = 0
    order = np.argsort(p.assay_arrival)
    now = p.start_s + every_s if first_s is None else first_s
    stop = p.end_s if until_s is None else until_s
    step = float(profile.settings.get("step_s", 120.0))
    while now <= stop + 1e-6:
        k = int(np.searchsorted(p.trace_t, now, side="right"))
        if k > n_t:
            st.add_temperature(p.trace_t[n_t:k], p.trace_T[n_t:k])
            n_t = k
        arrived = order[p.assay_arrival[order] <= now]
        if len(arrived) > n_a:
            new = arrived[n_a:]
            st.add_assays(p.assay_t[new], p.assay_v[new])
            n_a = len(arrived)
        if n_t:
            at = float(min(st.trace.last_t_s, now))
            post, _, _ = posterior_for(st, at, settings)
            a = profile.activity
            if out.assays_tell_s is None and post.alpha_mean + a.z * post.alpha_sd < a.limit:
                out.assays_tell_s = at
            known = activity_path(st, at, settings, known)
            past = batch_past(st, post, at, step, known, settings.horizon_h * 3600.0)
            for c in golden_conditions(past, profile, open_kinds, unit=unit):
                if c.active and c.kind not in open_kinds:
                    open_kinds.add(c.kind)
                    out.raises.append((c.kind, at, c.message))
                    out.first_raise.setdefault(c.kind, at)
                elif not c.active and c.kind in open_kinds:
                    open_kinds.discard(c.kind)
                    out.clears.append((c.kind, at))
        now += every_s
    return out
