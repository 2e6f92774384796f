"""Persistence and hysteresis of an alert condition, judged on the batch's data time.

A rule gives, at each point of a series (times in data time: a grid over the
batch's past, or its assay times), two conditions: *raise* (the limit is
crossed) and *clear* (the value is back inside the limit by the hysteresis
margin; never true where raise is). An episode starts where the raise
condition has held for at least ``min_duration_s`` and ``min_count``
consecutive points, and ends where the clear condition has held as long.
Between the two thresholds the state does not change, so a value hovering at
a limit raises once.

The scan is causal (the state at a point depends only on the points before
it) and a pure function of the series: a monitor that starts mid-batch, or
runs the same data twice, finds the same episodes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Persistence:
    """How long a condition must hold before it counts (``min_count`` points and
    ``min_duration_s`` of data time between the first and the last) [s]."""

    min_duration_s: float = 0.0
    min_count: int = 1

    def to_dict(self) -> dict:
        return {"min_duration_s": self.min_duration_s, "min_count": self.min_count}

    @classmethod
    def from_dict(cls, d: dict) -> Persistence:
        return cls(float(d["min_duration_s"]), int(d["min_count"]))


@dataclass(frozen=True)
class Scan:
    """The state along a series: ``on`` per point, and the episodes' times [s]."""

    t_s: np.ndarray
    on: np.ndarray
    raised_at_s: tuple
    cleared_at_s: tuple
    since_s: float | None  # start of the run that raised the episode still on at the end
    clear_held: bool  # the clear condition held long enough at the last point

    @property
    def on_at_end(self) -> bool:
        return bool(len(self.on) and self.on[-1])

    def active(self, was_open: bool) -> bool:
        """The alert's state now: an open alert stays open until the clear condition
        has held long enough at the last point, even if the scan no longer raises it
        (a new posterior can move the past; the hysteresis holds across evaluations)."""
        return self.on_at_end or (was_open and not self.clear_held)


def _run_start(cond: np.ndarray) -> np.ndarray:
    """Index of the first point of the run of True each point belongs to (-1 if False),
    along the last axis."""
    idx = np.arange(cond.shape[-1])
    before = np.concatenate([np.ones(cond.shape[:-1] + (1,), bool), ~cond[..., :-1]], axis=-1)
    first = np.maximum.accumulate(np.where(cond & before, idx, -1), axis=-1)
    return np.where(cond, first, -1)


def _held(t_s, cond, first, persistence: Persistence) -> np.ndarray:
    idx = np.arange(cond.shape[-1])
    safe = np.maximum(first, 0)
    count_ok = idx - safe + 1 >= persistence.min_count
    duration_ok = t_s - t_s[safe] >= persistence.min_duration_s - 1e-9
    return cond & count_ok & duration_ok


def held(t_s: np.ndarray, cond: np.ndarray, persistence: Persistence) -> np.ndarray:
    """Points where ``cond`` has held for the persistence, counting back from each
    (along the last axis; ``t_s`` is that axis's times)."""
    cond = np.asarray(cond, dtype=bool)
    return _held(np.asarray(t_s, float), cond, _run_start(cond), persistence)


class Runs:
    """The runs of a raise and a clear condition along a series, ready to be judged
    with any persistence (`states`); leading axes are independent series on the
    same times."""

    def __init__(self, t_s, raise_cond, clear_cond):
        self.t = np.asarray(t_s, dtype=float)
        self.up = np.asarray(raise_cond, dtype=bool)
        self.down = np.asarray(clear_cond, dtype=bool) & ~self.up
        self.first_up = _run_start(self.up)
        self.first_down = _run_start(self.down)

    def states(self, persistence: Persistence, clear_persistence: Persistence | None = None):
        """``(on, last_raise, clear_ok)`` at each point (see `scan`)."""
        raise_ok = _held(self.t, self.up, self.first_up, persistence)
        clear_ok = _held(self.t, self.down, self.first_down, clear_persistence or persistence)
        idx = np.arange(self.up.shape[-1])
        last_raise = np.maximum.accumulate(np.where(raise_ok, idx, -1), axis=-1)
        last_clear = np.maximum.accumulate(np.where(clear_ok, idx, -1), axis=-1)
        return last_raise > last_clear, last_raise, clear_ok


def scan(
    t_s,
    raise_cond,
    clear_cond,
    persistence: Persistence,
    clear_persistence: Persistence | None = None,
) -> Scan:
    """Episodes of a condition along a series (see the module docstring).

    Parameters
    ----------
    t_s : array_like
        Data times of the points, increasing [s].
    raise_cond, clear_cond : array_like of bool
        The limit is crossed / the value is back inside by the hysteresis margin.
    persistence, clear_persistence : Persistence
        How long each must hold (the clear one defaults to the raise one).

    Examples
    --------
    >>> t = [0, 60, 120, 180, 240, 300]
    >>> s = scan(t, [0, 1, 1, 1, 0, 0], [1, 0, 0, 0, 1, 1], Persistence(120.0), Persistence(60.0))
    >>> s.on.tolist(), s.raised_at_s, s.cleared_at_s
    ([False, False, False, True, True, False], (180.0,), (300.0,))
    """
    t = np.asarray(t_s, dtype=float)
    if len(t) == 0:
        return Scan(t, np.zeros(0, bool), (), (), None, False)
    runs = Runs(t, raise_cond, clear_cond)
    on, last_raise, clear_ok = runs.states(persistence, clear_persistence)
    prev = np.concatenate([[False], on[:-1]])
    raised = tuple(float(v) for v in t[on & ~prev])
    cleared = tuple(float(v) for v in t[~on & prev])
    since = None
    if on[-1]:
        since = float(t[runs.first_up[last_raise[-1]]])
    return Scan(t, on, raised, cleared, since, bool(clear_ok[-1]))
