"""Findings: what the estimator noticed about a batch, as typed values.

A finding has a ``kind`` (a fixed vocabulary below), a ``severity``, a message
for people and the facts behind it in ``data``. Code decides on ``kind``, never
on the wording of a message.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import StrEnum


class Kind(StrEnum):
    """What was found (stable names: they reach JSON and the store)."""

    MODEL_CONTRADICTED = "model_contradicted"
    ASSAY_MISMATCH = "assay_mismatch"
    NO_ASSAYS = "no_assays"
    TEMPERATURE_STALE = "temperature_stale"
    TEMPERATURE_GAP = "temperature_gap"
    NO_CHARGE = "no_charge"
    EXCLUDED_SAMPLES = "excluded_samples"


class Severity(StrEnum):
    INFO = "info"
    WARNING = "warning"
    CRITICAL = "critical"


@dataclass(frozen=True)
class Finding:
    """One thing noticed: ``kind``, ``severity``, a message and its facts."""

    kind: Kind
    severity: Severity
    message: str
    data: dict = field(default_factory=dict, compare=False, hash=False)


def of_kind(findings, kind: Kind) -> list[Finding]:
    """The findings of one kind, in order."""
    return [f for f in findings if f.kind == kind]
