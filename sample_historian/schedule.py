"""Who charges what when: the batch schedule, true kinetics per batch, assays and end rule.

Batches are simulated in start order across all units, so the planted drift
counts the drifting recipe's batches as the plant ran them. Times are float
seconds since the history start.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np

from . import scenario as sc
from .truth import BatchKinetics, LagTrace, integrate_batch, plan_switches


class ScenarioError(RuntimeError):
    """The invented scenario broke one of its own rules (a bug in the generator)."""


@dataclass
class Assay:
    sample_s: float  # lab sample time (whole minutes) [s]
    arrival_s: float  # when the result reaches the historian [s]
    value: float  # reported value in assay units (NaN when the sample was spoilt)
    quality: int
    true_x: float  # true conversion at the sample time [-]
    true_c_a: float  # true concentration of A at the sample time [mol/L]
    note: str = ""  # "outlier" | "spoilt" | ""


@dataclass
class Batch:
    batch_id: str
    unit: sc.Unit
    recipe: sc.Recipe
    start_s: float
    end_s: float | None  # None: still running at the export end
    c_a0: float  # [mol/L], as charged and as recorded on the charge tag
    activity: float  # the true activity factor alpha [-] (includes the drift)
    drift_factor: float  # the drift part of alpha [-] (1 before the onset)
    kinetics: BatchKinetics
    time_to_target_s: float | None
    trigger_arrival_s: float | None  # arrival of the assay the operators acted on
    charge_arrival_s: float
    temperature_at_start_k: float
    assays: list[Assay] = field(default_factory=list)


@dataclass
class _UnitState:
    unit: sc.Unit
    trace: LagTrace
    free_from_s: float
    final_start_s: float | None
    done: bool = False
    candidate: tuple[float, bool] | None = None


@dataclass
class Schedule:
    batches: list[Batch]
    traces: dict[str, LagTrace]  # unit name -> contents temperature over the whole history
    drift_onset_s: float


def _uniform(rng: np.random.Generator, bounds) -> float:
    return float(rng.uniform(bounds[0], bounds[1]))


class _Planner:
    def __init__(self, rng: np.random.Generator, t0: datetime, export_end_s: float):
        self.rng = rng
        self.t0 = t0
        self.export_end_s = export_end_s
        self.zone = ZoneInfo(sc.SITE_TIMEZONE)

    def next_charge(self, earliest_s: float) -> float:
        """The first charge time at or after ``earliest_s`` that the shift pattern allows."""
        local = (self.t0 + timedelta(seconds=earliest_s)).astimezone(self.zone)
        day = local.replace(hour=0, minute=0, second=0, microsecond=0, tzinfo=None)
        for _ in range(60):
            lo = datetime.combine(day.date(), datetime.min.time(), self.zone)
            opens = lo + timedelta(hours=sc.CHARGE_WINDOW_LOCAL_H[0])
            closes = lo + timedelta(hours=sc.CHARGE_WINDOW_LOCAL_H[1])
            skip = self.rng.random() < sc.SKIP_DAY_PROBABILITY
            delay = self.rng.uniform(0.0, sc.CHARGE_DELAY_MAX_S)
            if day.weekday() in sc.CHARGE_DAYS and not skip:
                cand = max((opens - self.t0).total_seconds(), earliest_s) + delay
                if cand <= (closes - self.t0).total_seconds():
                    return float(round(cand))
            day += timedelta(days=1)
        raise ScenarioError("no charge window found within 60 days")

    def assays(self, recipe: sc.Recipe, c_a0: float, kin: BatchKinetics, start_s: float):
        """Lab samples until the operators see a passing result; returns (assays, trigger)."""
        rng = self.rng
        t = start_s + 60.0 * round(_uniform(rng, sc.FIRST_ASSAY_MIN))
        samples = []
        while t < start_s + sc.SIM_HORIZON_S:
            samples.append(t)
            t += 60.0 * round(_uniform(rng, sc.ASSAY_INTERVAL_MIN))
        s = np.asarray(samples)
        arrival = s + 60.0 * rng.uniform(*sc.ASSAY_DELAY_MIN, size=len(s))
        arrival = np.round(arrival)
        x = kin.x_at(s)
        c_a = c_a0 * (1.0 - x)
        noise = rng.normal(0.0, recipe.assay_sd, size=len(s))
        if recipe.assay_kind == "concentration":
            value = np.round(np.clip(c_a + noise, 0.0, None), recipe.assay_decimals)
            lab_x = 1.0 - value / c_a0  # the operators use the recorded charge
        else:
            value = np.round(np.clip(x + noise, 0.0, 1.0), recipe.assay_decimals)
            lab_x = value.copy()
        passing = np.flatnonzero(lab_x >= recipe.target_conversion - 1e-12)
        trigger = float(arrival[passing].min()) if len(passing) else None
        keep = s < trigger if trigger is not None else np.ones(len(s), bool)
        out = [
            Assay(
                float(s[i]),
                float(arrival[i]),
                float(value[i]),
                sc.OPC_GOOD,
                float(x[i]),
                float(c_a[i]),
            )
            for i in np.flatnonzero(keep)
        ]
        return out, trigger


def plan_schedule(rng: np.random.Generator, t0: datetime, days: float) -> Schedule:
    """Run the invented plant from ``t0`` for ``days`` and return its batches and traces."""
    export_end_s = days * 86400.0 + sc.EXPORT_END_OFFSET_S
    history_s = export_end_s
    drift_onset_s = export_end_s - min(sc.DRIFT_SPAN_DAYS * 86400.0, 0.4 * history_s)
    planner = _Planner(rng, t0, export_end_s)
    states = []
    for u in sc.UNITS:
        amb = u.ambient_degc + sc.ZERO_CELSIUS_K
        final = None
        if u.running_at_end:
            final = float(round(export_end_s - 3600.0 * _uniform(rng, sc.FINAL_START_BEFORE_END_H)))
        states.append(
            _UnitState(
                u,
                LagTrace.starting(0.0, amb, amb, 0.0, u.idle_tau_s),
                free_from_s=_uniform(rng, (0.0, 3 * 3600.0)),
                final_start_s=final,
            )
        )
    batches: list[Batch] = []
    drift_count = 0
    while True:
        for st in states:
            if st.candidate is None and not st.done:
                st.candidate = _propose(planner, st, export_end_s)
        live = [st for st in states if not st.done]
        if not live:
            break
        st = min(live, key=lambda s: (s.candidate[0], s.unit.name))
        start_s, final = st.candidate
        st.candidate = None
        recipe = sc.RECIPES[st.unit.recipe_at(start_s / history_s)]
        drift = 1.0
        if recipe.name == sc.DRIFT_RECIPE and start_s >= drift_onset_s:
            drift_count += 1
            drift = sc.DRIFT_FACTOR_PER_BATCH**drift_count
        batch = _run_batch(planner, st, recipe, start_s, drift, f"{len(batches) + 1:04d}")
        if final:
            if batch.end_s is not None and batch.end_s <= export_end_s:
                raise ScenarioError(f"{batch.batch_id} was meant to run at the export end")
            batch.end_s = None  # what the operators will do after the export is not history
            batch.trigger_arrival_s = None
            st.done = True
        elif batch.end_s > export_end_s:
            raise ScenarioError(f"{batch.batch_id} ends after the export end")
        batches.append(batch)
    _plant_lab_faults(batches, history_s)
    return Schedule(batches, {st.unit.name: st.trace for st in states}, drift_onset_s)


def _plant_lab_faults(batches: list[Batch], history_s: float) -> None:
    """One gross lab error and one spoilt sample, each in a complete batch.

    Both hit early samples (the 3rd and the 2nd), far from the target, so they
    never change when the operators discharged; that is checked, not assumed.
    """

    def pick(kind: str, fraction: float, index: int) -> Batch | None:
        found = [
            b
            for b in batches
            if b.end_s is not None and b.recipe.assay_kind == kind and len(b.assays) > index
        ]
        return min(found, key=lambda b: abs(b.start_s - fraction * history_s), default=None)

    b = pick("concentration", 0.45, 2)
    if b is not None:  # reads as less converted: A far too high
        a = b.assays[2]
        wrong = a.true_c_a + sc.OUTLIER_SIGMA * b.recipe.assay_sd
        a.value, a.note = round(wrong, b.recipe.assay_decimals), "outlier"
        _check_not_trigger(b, a)
    b = pick("conversion", 0.6, 1)
    if b is not None:  # the sample was spoilt: a row with no value and bad quality
        a = b.assays[1]
        a.value, a.quality, a.note = math.nan, sc.OPC_BAD, "spoilt"
        _check_not_trigger(b, a)


def _check_not_trigger(b: Batch, a: Assay) -> None:
    if a.arrival_s == b.trigger_arrival_s:
        raise ScenarioError(f"a planted lab fault in {b.batch_id} would move its end")


def _propose(planner: _Planner, st: _UnitState, export_end_s: float):
    t = planner.next_charge(st.free_from_s)
    max_turn = sc.TURNAROUND_S[1]
    if st.final_start_s is not None:
        if t + sc.MAX_BATCH_S + max_turn > st.final_start_s:
            if st.final_start_s < st.free_from_s:
                raise ScenarioError(f"{st.unit.name}: the final batch cannot start in time")
            return (st.final_start_s, True)
        return (t, False)
    if t + sc.MAX_BATCH_S > export_end_s:
        st.done = True
        return None
    return (t, False)


def _run_batch(
    planner: _Planner,
    st: _UnitState,
    recipe: sc.Recipe,
    start_s: float,
    drift: float,
    number: str,
) -> Batch:
    rng, u = planner.rng, st.unit
    rel = float(np.clip(rng.normal(0.0, recipe.c_a0_rel_sd), -sc.C_A0_REL_CLIP, sc.C_A0_REL_CLIP))
    c_a0 = round(recipe.c_a0_nominal * (1.0 + rel), 3)
    activity = float(math.exp(rng.normal(0.0, recipe.activity_sd))) * drift
    T_start = float(st.trace.at(start_s))
    switches = plan_switches(start_s, recipe.plan, u.lag_tau_s)
    trace = LagTrace.starting(start_s, T_start, *switches[0][1:])
    for sw in switches[1:]:
        trace.switch(*sw)
    horizon = start_s + sc.SIM_HORIZON_S
    kin = integrate_batch(recipe, c_a0, activity, trace, start_s, horizon)
    assays, trigger = planner.assays(recipe, c_a0, kin, start_s)
    if trigger is None:
        raise ScenarioError(f"batch {number} on {u.name} never showed a passing assay")
    end_s = float(round(trigger + 60.0 * _uniform(rng, sc.DISCHARGE_DELAY_MIN)))
    if end_s - start_s > sc.MAX_BATCH_S:
        raise ScenarioError(f"batch {number} on {u.name} took longer than MAX_BATCH_S")
    for sw in switches:
        if sw[0] < end_s:
            st.trace.switch(*sw)
    amb = u.ambient_degc + sc.ZERO_CELSIUS_K
    st.trace.switch(end_s, amb, 0.0, u.idle_tau_s)
    st.free_from_s = end_s + _uniform(rng, sc.TURNAROUND_S)
    charge_arrival = float(round(start_s + _uniform(rng, sc.CHARGE_ENTRY_DELAY_S)))
    return Batch(
        batch_id=f"{sc.BATCH_ID_PREFIX}{number}",
        unit=u,
        recipe=recipe,
        start_s=start_s,
        end_s=end_s,
        c_a0=c_a0,
        activity=activity,
        drift_factor=drift,
        kinetics=kin,
        time_to_target_s=kin.time_to(recipe.target_conversion),
        trigger_arrival_s=trigger,
        charge_arrival_s=charge_arrival,
        temperature_at_start_k=T_start,
        assays=assays,
    )
