"""What the historian reader hands to the layers above: UTC epoch seconds, SI values.

Times are float seconds since 1970-01-01T00:00:00Z (UTC); temperatures are in
kelvin; assays are in the recipe's assay units (mol/L of A, or conversion [-]);
charges are mol/L.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np

from ..timefmt import to_datetime


@dataclass(frozen=True)
class Batch:
    """One batch as the events table shows it."""

    batch: str
    unit: str
    recipe: str
    start_s: float
    end_s: float | None = None

    @property
    def state(self) -> str:
        return "running" if self.end_s is None else "complete"

    @property
    def start(self) -> datetime:
        return to_datetime(self.start_s)

    @property
    def end(self) -> datetime | None:
        return None if self.end_s is None else to_datetime(self.end_s)


@dataclass(frozen=True)
class BatchProblem:
    """An inconsistency in the events table (reported, never a crash)."""

    message: str
    batch: str | None = None
    unit: str | None = None


@dataclass
class TagSamples:
    """Good samples of one tag, sorted by time, de-duplicated on time."""

    tag: str
    t_s: np.ndarray
    value: np.ndarray

    def __len__(self) -> int:
        return len(self.t_s)

    @classmethod
    def empty(cls, tag: str) -> TagSamples:
        return cls(tag, np.empty(0), np.empty(0))

    def window(self, start_s: float | None = None, end_s: float | None = None) -> TagSamples:
        lo = 0 if start_s is None else int(np.searchsorted(self.t_s, start_s, side="left"))
        hi = len(self.t_s) if end_s is None else int(np.searchsorted(self.t_s, end_s, "right"))
        return TagSamples(self.tag, self.t_s[lo:hi], self.value[lo:hi])


@dataclass
class QualitySummary:
    """Counts of samples left out, per tag and reason (what the user sees)."""

    excluded: Counter = field(default_factory=Counter)  # (tag, reason) -> count

    def add(self, tag: str, reason: str, n: int = 1) -> None:
        if n:
            self.excluded[(tag, reason)] += n

    def merge(self, other: QualitySummary) -> None:
        self.excluded.update(other.excluded)

    def as_rows(self) -> list[dict]:
        return [{"tag": t, "reason": r, "count": n} for (t, r), n in sorted(self.excluded.items())]


@dataclass
class BatchData:
    """Everything the estimator needs of one batch, up to some time."""

    batch: Batch
    temperature: TagSamples  # [K]
    assays: TagSamples  # sample time [s], value in assay units
    charge: float | None = None  # initial concentration of A [mol/L] from the charge tag
    quality: QualitySummary = field(default_factory=QualitySummary)


@dataclass
class PollResult:
    """New samples since a watermark, and the watermark to commit with the results."""

    samples: dict[str, TagSamples]
    watermark: dict
    quality: QualitySummary = field(default_factory=QualitySummary)
    rows_read: int = 0
