"""What a fit noticed, as typed values: warnings and the parameters it held fixed.

Code decides on ``kind`` (and on `FixedParameter.source`), never on the wording of
a message; the message is for people, ``data`` holds the facts behind it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum


class WarningKind(StrEnum):
    """What the joint fit noticed (stable names: they reach JSON)."""

    SERIES_LEFT_OUT = "series_left_out"  # no temperature samples or no usable assays
    TRACE_HELD = "trace_held"  # assays past the last temperature sample
    ONE_SERIES = "one_series"  # no per-batch activity with a single series
    UNIDENTIFIABLE = "unidentifiable"  # a parameter the data cannot pin; held fixed
    OUTLIER_LEFT_OUT = "outlier_left_out"  # an assay far from the model; refitted without
    ACTIVITY_SD_AT_FLOOR = "activity_sd_at_floor"  # no batch-to-batch spread detectable


@dataclass(frozen=True)
class FitWarning:
    """One thing a fit (or a fit job) noticed: ``kind``, a message and its facts.

    ``kind`` is a `WarningKind` for the joint fit; the fit job adds kinds of its own
    (``monitor.fitting``), which is why the field is a plain string enum value.
    """

    kind: str
    message: str
    data: dict = field(default_factory=dict, compare=False, hash=False)

    def as_dict(self) -> dict:
        """The JSON form: ``{kind, message, data}``."""
        return {"kind": str(self.kind), "message": self.message, "data": dict(self.data)}


class FixedSource(StrEnum):
    """Where the value of a parameter the fit could not identify came from."""

    PRIOR = "prior"  # a value given to the fit as prior knowledge (the current kinetics)
    PLACEHOLDER = "placeholder"  # no prior: a stand-in so the other parameters can be fitted


@dataclass(frozen=True)
class FixedParameter:
    """A parameter the data could not identify, and what the fit held it at.

    ``value`` is what the refit used; with ``source`` `FixedSource.PLACEHOLDER` it was
    never estimated (Ea = 0, order 1, the start of theta_r) and must not be reported
    as a result. ``standard_error`` is what the free fit would have reported for it
    (``inf``: unbounded), in the parameter's own unit.
    """

    name: str  # "ea_j_per_mol" | "order" | "theta_r"
    value: float
    source: FixedSource
    standard_error: float
    reason: str = "unidentifiable"

    def as_dict(self) -> dict:
        return {
            "value": self.value,
            "source": str(self.source),
            "reason": self.reason,
            "standard_error_if_fitted": (
                self.standard_error if math.isfinite(self.standard_error) else None
            ),
        }


def of_kind(warnings, kind: str) -> list[FitWarning]:
    """The warnings of one kind, in order."""
    return [w for w in warnings if w.kind == kind]


__all__ = ["FitWarning", "FixedParameter", "FixedSource", "WarningKind", "of_kind"]
