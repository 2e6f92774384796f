"""Alert rules: pure functions from an estimate (and the time) to conditions.

A rule says whether its condition holds now, how severe it is and, in plain
words, what was seen. `alert_changes` turns conditions into the alert
lifecycle: raise a condition that holds and has no open alert; clear an open
alert whose condition no longer holds. The service stores the changes in the
cycle's transaction; nothing here knows a database or a clock.

Rules on the estimate: ``model_contradicted``, ``assay_mismatch``,
``target_unreachable``, ``stale_data``. Rules against the recipe's golden
profile (`monitor.batch.golden_profile`), judged over the batch's past in data
time with persistence and hysteresis (`monitor.batch.episodes`,
`monitor.batch.golden_signals`), so a monitor started mid-batch raises on its
first cycle what has held long enough, and the same data give the same alerts:

- ``behind_profile``: conversion below the golden limit at that time since start,
  or the lag ``t(X) - t_golden(X)`` (time to reach the batch's conversion, against
  the median good batch) beyond its limit;
- ``late_finish``: the end predicted from each moment (median activity, plan
  ahead) later than the limit on good batches' time to target;
- ``temperature_off_profile``: the measured temperature outside the golden band's
  limits, or outside the recipe's own limits;
- ``low_activity``: the activity, assay after assay, below the limit on good
  batches' activity (``mean + z sd < limit``).

Conversion and end time are compared once assays inform the activity (before,
they are the kinetics' guess, not the batch's).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ..timefmt import duration
from ..units import from_kelvin
from .episodes import Scan, scan
from .findings import Kind, Severity, of_kind
from .golden_profile import GoldenProfile, RuleLevel, on_grid
from .golden_signals import (
    BatchPast,
    activity_signal,
    behind_signal,
    finish_signal,
    temperature_signal,
)
from .paths import ActivityPoint

_SYMBOL = {"degC": "°C", "degF": "°F", "K": "K"}
GOLDEN_KINDS = ("behind_profile", "late_finish", "temperature_off_profile", "low_activity")


@dataclass(frozen=True)
class Condition:
    """The state of one alert kind for one batch at one data time."""

    kind: str
    severity: Severity
    active: bool
    message: str
    data: dict = field(default_factory=dict, compare=False, hash=False)


def model_contradicted(est) -> Condition:
    """Every assay of the batch contradicts the model: its numbers must not be trusted."""
    found = of_kind(est.findings, Kind.MODEL_CONTRADICTED)
    return Condition(
        "model_contradicted",
        Severity.CRITICAL,
        est.model_contradicted,
        found[0].message if found else "",
        found[0].data if found else {},
    )


def assay_disagrees(est) -> Condition:
    """An assay the model contradicts beyond the mismatch limit (left out of the estimate)."""
    found = of_kind(est.findings, Kind.ASSAY_MISMATCH)
    return Condition(
        "assay_mismatch",
        Severity.WARNING,
        bool(found),
        "; ".join(f.message for f in found),
        {"assays": [f.data for f in found]},
    )


def target_unreachable(est) -> Condition:
    """No predicted end time: the note says why (equilibrium, co-reactant, plan too cold)."""
    return Condition(
        "target_unreachable", Severity.WARNING, est.predicted_end_s is None, est.forecast_note
    )


def no_fresh_data(est, *, running: bool, now_s: float, stale_after_s: float) -> Condition:
    """A running batch whose newest temperature sample is older than ``stale_after_s``."""
    age = now_s - est.at_s
    return Condition(
        "stale_data",
        Severity.WARNING,
        running and age > stale_after_s,
        f"no new temperature sample for {duration(age)}",
        {"age_s": age},
    )


@dataclass(frozen=True)
class GoldenInput:
    """What the golden rules need for one batch: its past, the recipe's profile, the
    kinds with an open alert (hysteresis across evaluations) and the unit's
    temperature unit for messages."""

    past: BatchPast
    profile: GoldenProfile
    open_kinds: frozenset = frozenset()
    temperature_unit: str = "degC"


def evaluate(
    est, *, running: bool, now_s: float, stale_after_s: float, golden: GoldenInput | None = None
) -> list[Condition]:
    """Every rule's condition for one estimate (the golden rules when a profile is given)."""
    out = [
        model_contradicted(est),
        assay_disagrees(est),
        target_unreachable(est),
        no_fresh_data(est, running=running, now_s=now_s, stale_after_s=stale_after_s),
    ]
    if golden is not None:
        out += golden_conditions(
            golden.past,
            golden.profile,
            golden.open_kinds,
            unit=golden.temperature_unit,
            p50_end_s=est.predicted_end_s,
        )
    return out


def alert_changes(
    batch: str, conditions: list[Condition], open_alerts: Mapping[str, int | None], at_s: float
) -> list[dict]:
    """Raise and clear operations for one batch.

    ``open_alerts`` maps each kind with an open (or acknowledged) alert to its id
    (None while the raise is not yet committed). Raises carry the data time
    ``at_s``; a clear needs a committed id.
    """
    out = []
    for c in conditions:
        if c.active and c.kind not in open_alerts:
            out.append(
                {
                    "op": "raise",
                    "batch": batch,
                    "kind": c.kind,
                    "severity": str(c.severity),
                    "state": "open",
                    "raised_at_s": at_s,
                    "message": c.message,
                }
            )
        elif not c.active and open_alerts.get(c.kind) is not None:
            out.append({"op": "clear", "id": open_alerts[c.kind], "cleared_at_s": at_s})
    return out


# ---------------------------------------------------------------- golden profile rules
def _episodes(t, up, down, level: RuleLevel) -> Scan:
    return scan(t, up, down, level.persistence, level.clear_persistence)


def _temp(T_K: float, unit: str) -> str:
    return f"{from_kelvin(T_K, unit):.1f} {_SYMBOL.get(unit, unit)}"


def _temp_range(lo_k: float, hi_k: float, unit: str) -> str:
    return f"{from_kelvin(lo_k, unit):.1f}–{_temp(hi_k, unit)}"


def _informed(past: BatchPast, profile: GoldenProfile) -> bool:
    """Conversion and predicted end are compared with good batches only once assays
    inform the activity: before, they are the kinetics' guess, not the batch's."""
    return past.n_assays_used >= int(profile.settings.get("min_assays", 1))


def behind_profile(past: BatchPast, profile: GoldenProfile, was_open: bool) -> Condition:
    level = profile.rules["behind_profile"]
    t_rel = past.t_rel_s
    up, down, lag, lag_lim, x_lim = behind_signal(
        profile.behind, level.hysteresis, t_rel, past.conversion
    )
    if not _informed(past, profile):
        up = np.zeros_like(up)
    s = _episodes(past.t_s, up, down, level)
    b = profile.behind
    x, tr = float(past.conversion[-1]), float(t_rel[-1])
    lo, hi = (float(on_grid(a, b.step_s, [tr])[0]) for a in (b.x_band_lo, b.x_band_hi))
    lag_now = float(lag[-1])
    lag_txt = "too early to compare times"
    if np.isfinite(lag_now):
        lag_txt = (
            f"{duration(abs(lag_now))} {'behind' if lag_now > 0 else 'ahead of'} the median "
            f"good batch (limit {duration(float(lag_lim[-1]))})"
        )
    msg = f"X {x:.2f} at {duration(tr)}; good batches {lo:.2f}–{hi:.2f} there; {lag_txt}"
    if s.since_s is not None:
        msg += f"; behind since {duration(s.since_s - past.start_s)}"
    data = {
        "conversion": x,
        "t_rel_s": tr,
        "band": [lo, hi],
        "x_limit": float(x_lim[-1]),
        "lag_s": lag_now if np.isfinite(lag_now) else None,
        "lag_limit_s": float(lag_lim[-1]),
        "since_s": s.since_s,
    }
    return Condition("behind_profile", Severity.WARNING, s.active(was_open), msg, data)


def late_finish(
    past: BatchPast, profile: GoldenProfile, was_open: bool, p50_end_s: float | None = None
) -> Condition:
    level = profile.rules["late_finish"]
    if past.end_s is not None:
        t, ends = past.t_s, past.end_s
    else:  # a law without the closed form: only the current forecast
        t = past.t_s[-1:]
        ends = np.array([np.inf if p50_end_s is None else p50_end_s])
    up, down, d = finish_signal(profile.finish, level.hysteresis, ends, past.start_s)
    if not _informed(past, profile):
        up = np.zeros_like(up)
    s = _episodes(t, up, down, level)
    f = profile.finish
    shown = p50_end_s - past.start_s if p50_end_s is not None else float(d[-1])
    end_txt = (
        f"P50 end {duration(shown)} after start"
        if np.isfinite(shown)
        else "target not reached within the forecast horizon"
    )
    msg = (
        f"{end_txt}, seen at {duration(float(t[-1] - past.start_s))}; good batches reached "
        f"target in {duration(f.median_s)}, up to {duration(f.band_hi_s)} (late after "
        f"{duration(f.limit_s)})"
    )
    data = {"predicted_duration_s": shown if np.isfinite(shown) else None, "limit_s": f.limit_s}
    return Condition("late_finish", Severity.WARNING, s.active(was_open), msg, data)


def temperature_off_profile(
    past: BatchPast, profile: GoldenProfile, was_open: bool, unit: str = "degC"
) -> Condition:
    level = profile.rules["temperature_off_profile"]
    ok = np.isfinite(past.temperature_k)
    t, T, t_rel = past.t_s[ok], past.temperature_k[ok], past.t_rel_s[ok]
    if len(t) == 0:
        return Condition("temperature_off_profile", Severity.WARNING, was_open, "", {})
    up, down, lo, hi = temperature_signal(profile.temperature, level.hysteresis, t_rel, T)
    s = _episodes(t, up, down, level)
    tl = profile.temperature
    tr = float(t_rel[-1])
    blo, bhi = (float(on_grid(a, tl.step_s, [tr])[0]) for a in (tl.band_lo, tl.band_hi))
    msg = (
        f"temperature {_temp(T[-1], unit)} at {duration(tr)}; good batches "
        f"{_temp_range(blo, bhi, unit)} there (limits {_temp_range(lo[-1], hi[-1], unit)})"
    )
    if s.since_s is not None:
        msg += f"; off since {duration(s.since_s - past.start_s)}"
    data = {"temperature_k": float(T[-1]), "limits_k": [float(lo[-1]), float(hi[-1])]}
    return Condition("temperature_off_profile", Severity.WARNING, s.active(was_open), msg, data)


def low_activity(past: BatchPast, profile: GoldenProfile, was_open: bool) -> Condition:
    level = profile.rules["low_activity"]
    pts: tuple[ActivityPoint, ...] = past.activity
    if not pts:
        return Condition("low_activity", Severity.WARNING, was_open, "", {})
    t = np.array([p.t_s for p in pts])
    mean = np.array([p.mean for p in pts])
    sd = np.array([p.sd for p in pts])
    up, down = activity_signal(profile.activity, level.hysteresis, mean, sd)
    s = _episodes(t, up, down, level)
    a = profile.activity
    msg = (
        f"activity {mean[-1]:.2f} ± {sd[-1]:.2f} from {len(pts)} assay(s) up to "
        f"{duration(t[-1] - past.start_s)}; good batches {a.band_lo:.2f} and up (median "
        f"{a.median:.2f}; low below {a.limit:.2f})"
    )
    data = {"activity": float(mean[-1]), "activity_sd": float(sd[-1]), "limit": a.limit}
    return Condition("low_activity", Severity.WARNING, s.active(was_open), msg, data)


def golden_conditions(
    past: BatchPast,
    profile: GoldenProfile,
    open_kinds=frozenset(),
    *,
    unit: str = "degC",
    p50_end_s: float | None = None,
) -> list[Condition]:
    """Every golden rule's condition for one batch (``open_kinds``: kinds with an open
    alert for it, for the hysteresis across evaluations)."""
    return [
        behind_profile(past, profile, "behind_profile" in open_kinds),
        late_finish(past, profile, "late_finish" in open_kinds, p50_end_s),
        temperature_off_profile(past, profile, "temperature_off_profile" in open_kinds, unit),
        low_activity(past, profile, "low_activity" in open_kinds),
    ]
