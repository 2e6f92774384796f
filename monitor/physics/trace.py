"""Integration along a measured temperature trace.

For a separable law ``G(X) = alpha k_ref s Theta(t)`` with the
*reference-equivalent time*

    Theta(t) = int_0^t exp[-(Ea/R)(1/T(s) - 1/T_ref)] ds   [s],

the seconds at ``T_ref`` that did the same work. ``T(s)`` is taken piecewise
linear between samples and each interval is integrated by 4-point
Gauss-Legendre quadrature, subdivided where the exponent changes by more
than ``MAX_EXPONENT_STEP`` across the interval, so the quadrature error is far
below any measurement error. This is the temperature integral of
non-isothermal kinetics (Vyazovkin et al., ICTAC Kinetics Committee
recommendations, Thermochim. Acta 520 (2011) 1-19, doi:10.1016/j.tca.2011.03.034).

Besides ``Theta`` the trace keeps the first two moments of the exponent's
sensitivity to ``Ea`` (``S1 = int f g ds`` and ``S2 = int f g^2 ds`` with
``g = -(1/T - 1/T_ref)/R``), so the effect of an Ea perturbation ``d`` is
``ln Theta(Ea + d) ~ ln Theta + d S1/Theta + d^2 (S2/Theta - (S1/Theta)^2)/2``
without re-integrating: this is what lets a Monte Carlo forecast draw Ea.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .arrhenius import R_J_PER_MOL_K

#: Largest change of the Arrhenius exponent over one quadrature cell [-].
MAX_EXPONENT_STEP = 0.05
#: Largest exponent change over one step of the reversible law (`refine_trace`) [-].
REVERSIBLE_EXPONENT_STEP = 0.0025
_GL_X, _GL_W = np.polynomial.legendre.leggauss(4)
_GL_PAIRS = tuple(zip(_GL_X.tolist(), _GL_W.tolist(), strict=True))
_FEW = 32  # appends up to this many samples take the scalar path


def _cells(t0, t1, T0, T1, ea, t_ref_k):
    """Split intervals whose exponent changes too much; returns cell arrays and owner index."""
    beta = ea / R_J_PER_MOL_K
    m = np.maximum(1, np.ceil(beta * np.abs(1.0 / T0 - 1.0 / T1) / MAX_EXPONENT_STEP)).astype(int)
    if np.all(m == 1):
        return t0, t1, T0, T1, None
    owner = np.repeat(np.arange(len(t0)), m)
    j = np.arange(len(owner)) - np.repeat(np.cumsum(m) - m, m)  # cell number within its interval
    frac0, frac1 = j / m[owner], (j + 1) / m[owner]
    dt, dT = (t1 - t0)[owner], (T1 - T0)[owner]
    return (
        t0[owner] + frac0 * dt,
        t0[owner] + frac1 * dt,
        T0[owner] + frac0 * dT,
        T0[owner] + frac1 * dT,
        (owner, len(t0)),
    )


def segment_integrals(t_s, T_K, ea_j_per_mol, t_ref_k):
    """Integrals over each interval between consecutive samples.

    Parameters
    ----------
    t_s : array_like
        Sample times, increasing [s].
    T_K : array_like
        Temperatures at those times [K].
    ea_j_per_mol : float
        Activation energy [J/mol].
    t_ref_k : float
        Reference temperature [K].

    Returns
    -------
    theta, s1, s2 : numpy.ndarray
        Per interval (length ``len(t_s) - 1``): ``int f ds`` [s], ``int f g ds``
        [s mol/J] and ``int f g^2 ds`` [s (mol/J)^2], with
        ``f = exp(Ea g)`` and ``g = -(1/T - 1/T_ref)/R``.

    Examples
    --------
    >>> th, _, _ = segment_integrals([0.0, 60.0], [343.15, 343.15], 65e3, 343.15)
    >>> float(th[0])
    60.0
    """
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(T_K, dtype=float)
    if len(t) < 2:
        z = np.zeros(0)
        return z, z, z
    a, b, Ta, Tb, split = _cells(t[:-1], t[1:], T[:-1], T[1:], ea_j_per_mol, t_ref_k)
    half = (b - a) / 2.0
    Tn = (Ta + Tb)[:, None] / 2.0 + ((Tb - Ta) / 2.0)[:, None] * _GL_X[None, :]
    g = -(1.0 / Tn - 1.0 / t_ref_k) / R_J_PER_MOL_K
    fw = np.exp(ea_j_per_mol * g) * _GL_W[None, :]
    theta = half * fw.sum(axis=1)
    s1 = half * (fw * g).sum(axis=1)
    s2 = half * (fw * g * g).sum(axis=1)
    if split is not None:
        owner, n = split
        theta, s1, s2 = (np.bincount(owner, v, minlength=n) for v in (theta, s1, s2))
    return theta, s1, s2


def reference_time(t_s, T_K, ea_j_per_mol, t_ref_k):
    """Cumulative reference-equivalent time ``Theta`` at each sample [s] (0 at the first).

    Examples
    --------
    >>> import numpy as np
    >>> reference_time([0, 10, 20], [343.15] * 3, 65e3, 343.15).tolist()
    [0.0, 10.0, 20.0]
    """
    theta, _, _ = segment_integrals(t_s, T_K, ea_j_per_mol, t_ref_k)
    return np.concatenate([[0.0], np.cumsum(theta)])


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
            for x, w in _GL_PAIRS:
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


def reversible_segments(
    t_s, T_K, ea_j_per_mol, t_ref_k, k_ref, k_eq_ref, dh_rxn_j_per_mol, theta_r
):
    """Per-interval coefficients of the first-order reversible law, for any activity.

    Over an interval the law ``dX/dt = alpha k [(1 - theta_r/K) - (1 + 1/K) X]`` is
    linear in X; with ``C = int k (1 + 1/K) ds`` and ``A = int k (1 - theta_r/K) ds``
    (Gauss-Legendre, as for `segment_integrals`) one step is
    ``X1 = X* + (X0 - X*) exp(-alpha C)``, ``X* = A/C``. The frozen-coefficient error is
    of second order in the change of ``X*`` over the interval, so a long interval with a
    changing temperature must be cut first with `refine_trace` (the quadrature cells here
    are summed back per interval and do not shorten the step).

    Returns
    -------
    C, A : numpy.ndarray
        Per interval [-] (``k_ref`` times seconds).
    """
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(T_K, dtype=float)
    scale = max(abs(ea_j_per_mol), abs(dh_rxn_j_per_mol), 1.0)
    a, b, Ta, Tb, split = _cells(t[:-1], t[1:], T[:-1], T[1:], scale, t_ref_k)
    half = (b - a) / 2.0
    Tn = (Ta + Tb)[:, None] / 2.0 + ((Tb - Ta) / 2.0)[:, None] * _GL_X[None, :]
    inv = -(1.0 / Tn - 1.0 / t_ref_k) / R_J_PER_MOL_K
    k = k_ref * np.exp(ea_j_per_mol * inv)
    K = k_eq_ref * np.exp(dh_rxn_j_per_mol * inv)
    C = half * (k * (1.0 + 1.0 / K) * _GL_W).sum(axis=1)
    A = half * (k * (1.0 - theta_r / K) * _GL_W).sum(axis=1)
    if split is not None:
        owner, n = split
        C, A = (np.bincount(owner, v, minlength=n) for v in (C, A))
    return C, A


def refine_trace(t_s, T_K, scale_j_per_mol, t_ref_k, max_step=REVERSIBLE_EXPONENT_STEP):
    """Cut intervals whose exponent ``scale/R (1/T)`` changes by more than ``max_step``.

    ``T`` stays piecewise linear, so integrals over the refined trace are unchanged.
    The default step keeps the frozen-coefficient error of `step_reversible` on a
    coarse trace near that of a 5-s sampled one.

    Returns
    -------
    t, T, at : numpy.ndarray
        Refined times [s] and temperatures [K]; ``at`` holds the index of each
        original sample in the refined arrays.

    Examples
    --------
    >>> t, T, at = refine_trace([0.0, 60.0], [343.15, 343.15], 65e3, 343.15)
    >>> t.tolist(), at.tolist()
    ([0.0, 60.0], [0, 1])
    """
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(T_K, dtype=float)
    if len(t) < 2:
        return t, T, np.arange(len(t))
    beta = scale_j_per_mol / R_J_PER_MOL_K
    m = np.maximum(1, np.ceil(beta * np.abs(1.0 / T[:-1] - 1.0 / T[1:]) / max_step)).astype(int)
    at = np.concatenate([[0], np.cumsum(m)])
    if at[-1] == len(t) - 1:
        return t, T, at
    owner = np.repeat(np.arange(len(m)), m)
    frac = (np.arange(at[-1]) - at[owner]) / m[owner]
    t_f = np.append(t[owner] + frac * np.diff(t)[owner], t[-1])
    T_f = np.append(T[owner] + frac * np.diff(T)[owner], T[-1])
    return t_f, T_f, at


def step_reversible(X0, alpha, C, A):
    """Advance the reversible law over intervals; returns X after each [-].

    ``X0`` and ``alpha`` broadcast together (e.g. a grid of activities); the result
    has one more leading axis of length ``len(C)``.
    """
    X = np.asarray(X0, dtype=float) * np.ones_like(np.asarray(alpha, dtype=float))
    out = np.empty((len(C),) + X.shape)
    x_star = np.where(C > 0, A / np.where(C > 0, C, 1.0), 0.0)
    for i in range(len(C)):
        X = x_star[i] + (X - x_star[i]) * np.exp(-alpha * C[i])
        out[i] = X
    return out


def plan_temperature(plan, start_s: float, t_s):
    """Temperature from a recipe plan at times ``t_s`` [K].

    ``plan`` is a sequence of ``(seconds since start, T [K])``; linear between points,
    the first value before the first point and the last value held after the end.
    """
    pts = np.asarray(plan, dtype=float)
    return np.interp(np.asarray(t_s, dtype=float) - start_s, pts[:, 0], pts[:, 1])
