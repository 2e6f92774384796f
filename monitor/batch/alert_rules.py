"""Alert rules: pure functions from an estimate (and the time) to conditions.

A rule says whether its condition holds now, how severe it is and, in plain
words, what was seen. `alert_changes` turns conditions into the alert
lifecycle: raise a condition that holds and has no open alert; clear an open
alert whose condition no longer holds. The service stores the changes in the
cycle's transaction; nothing here knows a database or a clock.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

from ..timefmt import duration
from .findings import Kind, Severity, of_kind


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


def evaluate(est, *, running: bool, now_s: float, stale_after_s: float) -> list[Condition]:
    """Every rule's condition for one estimate."""
    return [
        model_contradicted(est),
        assay_disagrees(est),
        target_unreachable(est),
        no_fresh_data(est, running=running, now_s=now_s, stale_after_s=stale_after_s),
    ]


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
