"""The true physics of the sample plant, computed independently of ``monitor``.

Reactor temperature is a first-order lag of a piecewise-linear setpoint,
evaluated in closed form. Conversion is the batch mole balance integrated
with ``scipy.integrate.solve_ivp`` (DOP853, rtol 1e-10) on that smooth
temperature, restarting at every kink of the setpoint. Nothing here imports
the code under test.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from .scenario import R_GAS, ZERO_CELSIUS_K, Recipe

RTOL = 1e-10
ATOL = 1e-12


@dataclass
class LagTrace:
    """Contents temperature following a piecewise-linear setpoint through a first-order lag.

    On segment ``i`` (from ``t0[i]``) the setpoint is ``a + slope * s`` with
    ``s = t - t0[i]``, and ``tau dT/dt = SP - T`` has the exact solution
    ``T = a + slope (s - tau) + (T0 - a + slope tau) exp(-s / tau)``.
    Times [s] since the history start, temperatures [K].
    """

    t0: list[float] = field(default_factory=list)
    a: list[float] = field(default_factory=list)
    slope: list[float] = field(default_factory=list)
    tau: list[float] = field(default_factory=list)
    T0: list[float] = field(default_factory=list)

    @classmethod
    def starting(cls, t_s: float, T_K: float, a_K: float, slope: float, tau_s: float) -> LagTrace:
        return cls([t_s], [a_K], [slope], [tau_s], [T_K])

    def _segment_value(self, i: int, t_s: float) -> float:
        s = t_s - self.t0[i]
        a, m, tau = self.a[i], self.slope[i], self.tau[i]
        return a + m * (s - tau) + (self.T0[i] - a + m * tau) * math.exp(-s / tau)

    def switch(self, t_s: float, a_K: float, slope: float, tau_s: float) -> None:
        """From ``t_s`` on, follow the setpoint ``a_K + slope (t - t_s)`` with lag ``tau_s``."""
        if t_s < self.t0[-1]:
            raise ValueError("setpoint switches must come in time order")
        T_now = self._segment_value(len(self.t0) - 1, t_s)
        if t_s == self.t0[-1]:  # a step: replace the zero-length segment
            for lst in (self.t0, self.a, self.slope, self.tau, self.T0):
                lst.pop()
        self.t0.append(t_s)
        self.a.append(a_K)
        self.slope.append(slope)
        self.tau.append(tau_s)
        self.T0.append(T_now)

    def at(self, t_s):
        """Temperature [K] at times ``t_s`` [s] (scalar or array)."""
        t = np.asarray(t_s, dtype=float)
        t0 = np.asarray(self.t0)
        i = np.clip(np.searchsorted(t0, t, side="right") - 1, 0, len(t0) - 1)
        a, m, tau = np.asarray(self.a)[i], np.asarray(self.slope)[i], np.asarray(self.tau)[i]
        s = t - t0[i]
        out = a + m * (s - tau) + (np.asarray(self.T0)[i] - a + m * tau) * np.exp(-s / tau)
        return out if out.ndim else float(out)


def plan_switches(
    start_s: float, plan: tuple[tuple[float, float], ...], tau_s: float
) -> list[tuple[float, float, float, float]]:
    """Setpoint switches ``(t, a_K, slope, tau)`` of a recipe plan started at ``start_s``.

    ``plan`` holds ``(minutes since start, setpoint [degC])``; between points the
    setpoint ramps linearly, after the last point it holds.
    """
    points = [(start_s + 60.0 * m, sp + ZERO_CELSIUS_K) for m, sp in plan]
    if points[0][0] > start_s:
        points.insert(0, (start_s, points[0][1]))
    out = []
    for (t_a, sp_a), nxt in zip(points, [*points[1:], None], strict=True):
        if nxt is None:
            out.append((t_a, sp_a, 0.0, tau_s))
        elif nxt[0] > t_a:
            out.append((t_a, sp_a, (nxt[1] - sp_a) / (nxt[0] - t_a), tau_s))
    return out


def rate_factor(recipe: Recipe, c_a0: float):
    """``h(X)`` such that ``dX/dt = alpha k(T) h(X)`` at constant volume [mol/L]^(n-1)."""
    if recipe.rate_law == "power":
        n = recipe.order
        scale = c_a0 ** (n - 1.0)
        return lambda x: scale * max(1.0 - x, 0.0) ** n
    if recipe.rate_law == "bimolecular":
        theta, b = recipe.theta_b, recipe.b
        return lambda x: c_a0 * max(1.0 - x, 0.0) * max(theta - b * x, 0.0)
    raise ValueError(f"unknown rate law {recipe.rate_law!r}")


@dataclass
class BatchKinetics:
    """Dense true conversion of one batch from its start to ``t_end_s``."""

    t_starts: np.ndarray  # start of each integration piece [s]
    pieces: list  # scipy OdeSolution per piece

    def x_at(self, t_s):
        """True conversion [-] at times ``t_s`` [s] (scalar or array)."""
        t = np.atleast_1d(np.asarray(t_s, dtype=float))
        i = np.clip(np.searchsorted(self.t_starts, t, side="right") - 1, 0, len(self.pieces) - 1)
        out = np.empty_like(t)
        for j in np.unique(i):
            sel = i == j
            out[sel] = self.pieces[j](t[sel])[0]
        return out if np.ndim(t_s) else float(out[0])

    def time_to(self, x_target: float) -> float | None:
        """First time [s] at which the true conversion reaches ``x_target``, None if never."""
        for t_a, piece in zip(self.t_starts, self.pieces, strict=True):
            t_b = piece.t_max
            if piece(t_b)[0] >= x_target:
                if piece(t_a)[0] >= x_target:
                    return float(t_a)
                return float(
                    brentq(lambda t, p=piece: p(t)[0] - x_target, t_a, t_b, xtol=1e-6, rtol=1e-12)
                )
        return None


def integrate_batch(
    recipe: Recipe, c_a0: float, activity: float, trace: LagTrace, start_s: float, end_s: float
) -> BatchKinetics:
    """Integrate ``dX/dt = activity k(T) h(X)`` from ``X(start) = 0`` to ``end_s``.

    ``k(T) = k_ref exp[-(Ea/R)(1/T - 1/T_ref)]``; T from ``trace``, smooth on each
    of its segments, so the integration restarts at every segment boundary.
    """
    h = rate_factor(recipe, c_a0)
    k_ref, e_over_r, inv_tref = recipe.k_ref, recipe.ea_j_per_mol / R_GAS, 1.0 / recipe.t_ref_k
    bounds = [t for t in trace.t0 if start_s < t < end_s]
    edges = [start_s, *bounds, end_s]
    x = 0.0
    t_starts, pieces = [], []
    for t_a, t_b in zip(edges[:-1], edges[1:], strict=True):
        i = int(np.searchsorted(trace.t0, t_a, side="right") - 1)
        seg0, a, m, tau, T0 = trace.t0[i], trace.a[i], trace.slope[i], trace.tau[i], trace.T0[i]
        c = T0 - a + m * tau

        def rhs(t, y, seg0=seg0, a=a, m=m, tau=tau, c=c):
            s = t - seg0
            T = a + m * (s - tau) + c * math.exp(-s / tau)
            k = k_ref * math.exp(-e_over_r * (1.0 / T - inv_tref))
            return [activity * k * h(y[0])]

        sol = solve_ivp(
            rhs, (t_a, t_b), [x], method="DOP853", rtol=RTOL, atol=ATOL, dense_output=True
        )
        if not sol.success:
            raise RuntimeError(f"true kinetics failed to integrate: {sol.message}")
        x = float(sol.y[0, -1])
        t_starts.append(t_a)
        pieces.append(sol.sol)
    return BatchKinetics(np.asarray(t_starts), pieces)
