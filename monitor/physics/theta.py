"""The running reference-equivalent time of a growing temperature trace.

`ThetaTrace` keeps ``Theta``, ``S1`` and ``S2`` (see `monitor.physics.quadrature`)
at every sample, updated in O(new samples) as samples arrive; gaps longer than
the allowed one are bridged and widen the uncertainty. `plan_temperature`
evaluates a recipe's temperature plan.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .arrhenius import R_J_PER_MOL_K
from .quadrature import GL_PAIRS, MAX_EXPONENT_STEP, segment_integrals

_FEW = 32  # appends up to this many samples take the scalar path


@dataclass
class Gap:
    """An interval between samples longer than the allowed gap, bridged linearly."""

    start_s: float
    end_s: float
    theta_s: float  # reference-equivalent seconds credited across the gap [s]
    T_mean_k: float


@dataclass
class ThetaTrace:
    """Running ``Theta``, ``S1``, ``S2`` over a growing temperature trace: O(new samples).

    Samples older than the last one force a recomputation from the first
    affected sample (a late row); equal times keep the first value.
    """

    ea_j_per_mol: float
    t_ref_k: float
    max_gap_s: float = 300.0
    gap_temperature_sd_k: float = 2.0
    t_s: np.ndarray = field(default_factory=lambda: np.empty(0))
    T_K: np.ndarray = field(default_factory=lambda: np.empty(0))
    theta: np.ndarray = field(default_factory=lambda: np.empty(0))
    s1: np.ndarray = field(default_factory=lambda: np.empty(0))
    s2: np.ndarray = field(default_factory=lambda: np.empty(0))
    gaps: list = field(default_factory=list)
    _n: int = 0

    def __len__(self) -> int:
        return self._n

    def _grow(self, need: int) -> None:
        cap = len(self.t_s)
        if need <= cap:
            return
        new = max(need, 2 * cap, 256)
        for name in ("t_s", "T_K", "theta", "s1", "s2"):
            old = getattr(self, name)
            arr = np.empty(new)
            arr[: self._n] = old[: self._n]
            setattr(self, name, arr)

    def extend(self, t_new, T_new) -> int:
        """Add samples (times [s], temperatures [K]); any order, duplicates ignored.

        Returns the index of the last sample whose integrals did not change.
        """
        t_new = np.asarray(t_new, dtype=float)
        T_new = np.asarray(T_new, dtype=float)
        n = self._n
        if not len(t_new):
            return max(n - 1, 0)
        if n and len(t_new) <= _FEW and self._append_few(t_new.tolist(), T_new.tolist()):
            return n - 1
        if n and t_new.min() <= self.t_s[n - 1] or np.any(np.diff(t_new) <= 0):
            return self._merge(t_new, T_new)
        self._grow(n + len(t_new))
        self.t_s[n : n + len(t_new)] = t_new
        self.T_K[n : n + len(t_new)] = T_new
        self._n = n + len(t_new)
        self._integrate_from(max(n - 1, 0))
        return max(n - 1, 0)

    def _append_few(self, tl: list, Tl: list) -> bool:
        """The usual poll, a few samples after the last: the same quadrature in scalars.

        Returns False (having changed nothing) when the samples are not strictly after
        the last one or an interval would need subdividing; the array path takes over.
        """
        n = self._n
        t0, T0 = float(self.t_s[n - 1]), float(self.T_K[n - 1])
        th, a1, a2 = float(self.theta[n - 1]), float(self.s1[n - 1]), float(self.s2[n - 1])
        ea, beta, inv_ref = self.ea_j_per_mol, self.ea_j_per_mol / R_J_PER_MOL_K, 1.0 / self.t_ref_k
        rows, gaps = [], []
        for t1, T1 in zip(tl, Tl, strict=True):
            if not t1 > t0 or beta * abs(1.0 / T0 - 1.0 / T1) > MAX_EXPONENT_STEP:
                return False
            half, mid, hd = (t1 - t0) / 2.0, (T0 + T1) / 2.0, (T1 - T0) / 2.0
            f0 = f1 = f2 = 0.0
            for x, w in GL_PAIRS:
                g = -(1.0 / (mid + hd * x) - inv_ref) / R_J_PER_MOL_K
                fw = w * math.exp(ea * g)
                f0 += fw
                f1 += fw * g
                f2 += fw * g * g
            th += half * f0
            a1 += half * f1
            a2 += half * f2
            if t1 - t0 > self.max_gap_s:
                gaps.append(Gap(t0, t1, half * f0, mid))
            rows.append((t1, T1, th, a1, a2))
            t0, T0 = t1, T1
        m = len(rows)
        self._grow(n + m)
        cols = list(zip(*rows, strict=True))
        self.t_s[n : n + m] = cols[0]
        self.T_K[n : n + m] = cols[1]
        self.theta[n : n + m] = cols[2]
        self.s1[n : n + m] = cols[3]
        self.s2[n : n + m] = cols[4]
        self._n = n + m
        self.gaps.extend(gaps)
        return True

    def _merge(self, t_new, T_new) -> int:
        n = self._n
        t_all = np.concatenate([self.t_s[:n], t_new])
        T_all = np.concatenate([self.T_K[:n], T_new])
        order = np.argsort(t_all, kind="stable")
        t_all, T_all = t_all[order], T_all[order]
        keep = np.concatenate([[True], np.diff(t_all) > 0])
        t_all, T_all = t_all[keep], T_all[keep]
        # everything before the first new sample's place is unchanged
        first_changed = int(np.searchsorted(self.t_s[:n], t_new.min(), side="left"))
        self._grow(len(t_all))
        self.t_s[: len(t_all)] = t_all
        self.T_K[: len(t_all)] = T_all
        self._n = len(t_all)
        i0 = max(first_changed - 1, 0)
        self.gaps = [g for g in self.gaps if g.end_s <= t_all[i0]]
        self._integrate_from(i0)
        return i0

    def _integrate_from(self, i0: int) -> None:
        n = self._n
        if i0 == 0:
            self.theta[0] = self.s1[0] = self.s2[0] = 0.0
        if n - i0 < 2:
            return
        t, T = self.t_s[i0:n], self.T_K[i0:n]
        th, a, b = segment_integrals(t, T, self.ea_j_per_mol, self.t_ref_k)
        self.theta[i0 + 1 : n] = self.theta[i0] + np.cumsum(th)
        self.s1[i0 + 1 : n] = self.s1[i0] + np.cumsum(a)
        self.s2[i0 + 1 : n] = self.s2[i0] + np.cumsum(b)
        dt = np.diff(t)
        for j in np.flatnonzero(dt > self.max_gap_s):
            self.gaps.append(
                Gap(float(t[j]), float(t[j + 1]), float(th[j]), float((T[j] + T[j + 1]) / 2))
            )

    # ---- read-outs
    @property
    def last_t_s(self) -> float | None:
        return float(self.t_s[self._n - 1]) if self._n else None

    def at(self, t_s):
        """``(Theta, S1, S2)`` at times within the trace (linear between samples)."""
        n = self._n
        ts = self.t_s[:n]
        return tuple(np.interp(t_s, ts, arr[:n]) for arr in (self.theta, self.s1, self.s2))

    def gap_log_variance(self, upto_s: float | None = None) -> float:
        """Variance of ``ln Theta`` from temperatures unknown inside gaps [-].

        Each gap's temperature is uncertain by ``gap_temperature_sd_k`` (fully
        correlated within the gap): ``d Theta = Theta_gap (Ea/R T^2) dT``.
        """
        if not self.gaps or not self._n:
            return 0.0
        upto = self.last_t_s if upto_s is None else upto_s
        total = float(np.interp(upto, self.t_s[: self._n], self.theta[: self._n]))
        if total <= 0:
            return 0.0
        beta = self.ea_j_per_mol / R_J_PER_MOL_K
        var = sum(
            (g.theta_s * beta * self.gap_temperature_sd_k / g.T_mean_k**2) ** 2
            for g in self.gaps
            if g.end_s <= upto
        )
        return var / total**2


def plan_temperature(plan, start_s: float, t_s):
    """Temperature from a recipe plan at times ``t_s`` [K].

    ``plan`` is a sequence of ``(seconds since start, T [K])``; linear between points,
    the first value before the first point and the last value held after the end.
    """
    pts = np.asarray(plan, dtype=float)
    return np.interp(np.asarray(t_s, dtype=float) - start_s, pts[:, 0], pts[:, 1])
