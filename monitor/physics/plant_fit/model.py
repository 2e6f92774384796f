"""The joint fit's model: parameters, weighted residuals and their analytic Jacobian.

For ``dX/dt = alpha k(T) s(C_A0) h(X)`` the model conversion at an assay is
``X = G^-1(u)`` with ``u = exp(ln k_ref + phi_b) s(C_A0) Theta_b(t; Ea)``. Because
``dTheta/dEa = S1`` exactly, the Jacobian is analytic: ``dX/du = h(X)``,
``du/d ln k = du/d phi = u``, ``du/dEa = u S1/Theta``; a shape parameter ``p`` of the
law (the order, ln theta_r) adds ``dX/dp = h(X) (u d ln s/dp - dG/dp|_X)``, the last
term by a central difference of the closed-form ``G``.

Per-batch activities carry the shrinkage prior ``phi_b ~ N(0, tau^2)`` as the
pseudo-observations ``phi_b/tau`` appended to the residuals.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..rate_laws import make_law
from .problem import Problem

#: The optimiser sees Ea in kJ/mol: Ea [J/mol] = x * EA_SCALE.
EA_SCALE = 1000.0

#: law -> {internal name: (law keyword, internal -> law value, bounds of the internal value)}
SHAPE_PARAMETERS = {
    "power": {"order": ("order", lambda v: v, (0.0, 5.0))},
    "autocatalytic": {"ln_theta_r": ("theta_r", math.exp, (math.log(1e-8), math.log(10.0)))},
    "bimolecular": {},
}

#: Bounds of Ea in the optimiser's unit [kJ/mol].
EA_BOUNDS_KJ = (-100.0, 500.0)


@dataclass
class Spec:
    """Which parameters are free, and the values of the fixed ones."""

    rate_law: str
    law_fixed: dict  # law keywords held fixed (theta_b, b, theta_r, epsilon, order)
    shape_free: list  # internal names of free shape parameters
    ea_free: bool
    phi: bool  # per-series activities
    t_ref_k: float
    ea_fixed_j: float = 0.0

    def names(self, n_series: int) -> list[str]:
        """Names of the parameter vector's entries, in order."""
        out = ["ln_k_ref"] + (["ea"] if self.ea_free else []) + list(self.shape_free)
        return out + ([f"phi[{b}]" for b in range(n_series)] if self.phi else [])

    def n_global(self) -> int:
        """Parameters shared by all series (ln k_ref, Ea, shape)."""
        return 1 + int(self.ea_free) + len(self.shape_free)

    def law(self, shape_values: dict):
        """The rate-law object at these values of the free shape parameters."""
        kw = dict(self.law_fixed)
        for name, v in shape_values.items():
            key, to_law, _ = SHAPE_PARAMETERS[self.rate_law][name]
            kw[key] = to_law(v)
        return make_law(self.rate_law, **kw)

    def vector(self, lnk: float, ea: float, shape: dict, phis) -> np.ndarray:
        """The parameter vector of these values (the inverse of `Model.unpack`)."""
        x = [lnk] + ([ea / EA_SCALE] if self.ea_free else [])
        x += [shape[n] for n in self.shape_free]
        if self.phi:
            x += list(phis)
        return np.array(x, dtype=float)


class Model:
    """Residuals and analytic Jacobian of the joint fit for one `Spec`.

    ``active`` marks the assays in the fit (shared with the caller: leaving an
    outlier out there leaves it out here). After `evaluate`, ``r`` and ``J`` are
    the residuals and Jacobian seen by the optimiser (active assays, then the
    activity prior rows), ``pred``, ``r_data`` and ``X`` are per assay (all of them).
    """

    def __init__(self, prob: Problem, spec: Spec, active: np.ndarray):
        self.prob, self.spec, self.active = prob, spec, active
        self.tau = 1.0
        self._cache_x: np.ndarray | None = None
        self.nfev = self.njev = 0
        self.on_jacobian: Callable[[int], None] | None = None
        self.r = self.J = self.pred = self.r_data = self.X = None

    def unpack(self, x):
        """``(ln k_ref, Ea [J/mol], {shape name: value}, phi per series)`` of ``x``."""
        sp, nb = self.spec, self.prob.n_series
        lnk = x[0]
        j = 1
        ea = x[j] * EA_SCALE if sp.ea_free else sp.ea_fixed_j
        j += int(sp.ea_free)
        shape = {name: x[j + q] for q, name in enumerate(sp.shape_free)}
        j += len(sp.shape_free)
        phi = x[j : j + nb] if sp.phi else np.zeros(nb)
        return lnk, ea, shape, phi

    def invalidate(self) -> None:
        """Forget the last evaluation (after ``tau`` or ``active`` changed)."""
        self._cache_x = None

    def evaluate(self, x) -> None:
        """Residuals, Jacobian and predictions at ``x`` (cached for the same ``x``)."""
        if self._cache_x is not None and np.array_equal(x, self._cache_x):
            return
        p, sp = self.prob, self.spec
        lnk, ea, shape, phi = self.unpack(x)
        law = sp.law(shape)
        theta, s1 = p.theta(ea, sp.t_ref_k)
        scale_b = np.array([law.scale(c) for c in p.c0_series], dtype=float)
        a = np.exp(lnk + phi[p.bidx]) * scale_b[p.bidx]
        u = a * theta
        X = np.asarray(law.G_inv(u), dtype=float)
        hX = np.asarray(law.h(X), dtype=float)
        pred = np.where(p.conc, p.c0 * (1.0 - X), X)
        dpred = np.where(p.conc, -p.c0, 1.0) * hX  # d pred / du times dX/du
        w = 1.0 / p.sd
        cols = [dpred * u]  # ln k_ref
        if sp.ea_free:
            cols.append(dpred * a * s1 * EA_SCALE)
        for name in sp.shape_free:
            cols.append(np.where(hX > 0, dpred * self._shape_term(shape, name, X, u), 0.0))
        J_data = -np.column_stack(cols) * w[:, None]
        if sp.phi:
            Jphi = np.zeros((len(u), p.n_series))
            Jphi[np.arange(len(u)), p.bidx] = -(dpred * u) * w
            J_data = np.hstack([J_data, Jphi])
        r_data = (p.obs - pred) * w
        act = self.active
        r, J = r_data[act], J_data[act]
        if sp.phi:
            r = np.concatenate([r, phi / self.tau])
            Jp = np.zeros((p.n_series, J.shape[1]))
            Jp[:, sp.n_global() :] = np.eye(p.n_series) / self.tau
            J = np.vstack([J, Jp])
        self._cache_x, self.r, self.J = x.copy(), r, J
        self.pred, self.r_data, self.X = pred, r_data, X

    def _shape_term(self, shape, name, X, u):
        """``(u d ln s/dp - dG/dp|_X)``: ``dX/dp`` divided by ``h(X)``."""
        d = 1e-5
        lo = self.spec.law({**shape, name: shape[name] - d})
        hi = self.spec.law({**shape, name: shape[name] + d})
        p = self.prob
        dlns = (
            np.log([hi.scale(c) for c in p.c0_series]) - np.log([lo.scale(c) for c in p.c0_series])
        ) / (2 * d)
        Xc = np.minimum(X, 1.0 - 1e-12)
        with np.errstate(invalid="ignore", over="ignore"):
            dG = (np.asarray(hi.G(Xc)) - np.asarray(lo.G(Xc))) / (2 * d)
        return u * dlns[p.bidx] - np.nan_to_num(dG)

    def fun(self, x):
        """The residual vector (for `scipy.optimize.least_squares`)."""
        self.nfev += 1
        self.evaluate(x)
        return self.r

    def jac(self, x):
        """The Jacobian of `fun` (for `scipy.optimize.least_squares`)."""
        self.njev += 1
        self.evaluate(x)
        if self.on_jacobian is not None:
            self.on_jacobian(self.njev)
        return self.J

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of the parameter vector."""
        sp, nb = self.spec, self.prob.n_series
        lo, hi = [-np.inf], [np.inf]
        if sp.ea_free:
            lo.append(EA_BOUNDS_KJ[0])
            hi.append(EA_BOUNDS_KJ[1])
        for name in sp.shape_free:
            b = SHAPE_PARAMETERS[sp.rate_law][name][2]
            lo.append(b[0])
            hi.append(b[1])
        if sp.phi:
            lo += [-np.inf] * nb
            hi += [np.inf] * nb
        return np.array(lo), np.array(hi)


def start_guess(prob: Problem, spec: Spec, active, ea_grid_j, shape_grid):
    """Linearised fit: ``ln G(X_obs) - ln s - ln Theta(Ea)`` should be constant (= ln k).

    Over a grid of Ea (and of the free shape parameter) pick the point with the
    least weighted scatter of that quantity; its weighted mean starts ln k_ref.
    Returns ``(Ea [J/mol], shape values, ln k_ref)``.
    """
    x_obs, sd_x = prob.observed_conversion()
    best = None
    for ea in ea_grid_j:
        theta, _ = prob.theta(ea, spec.t_ref_k)
        for shape in shape_grid:
            law = spec.law(shape)
            xm = law.x_max
            ok = active & (theta > 0) & (x_obs > 2 * sd_x) & (x_obs < xm - 2 * sd_x)
            if ok.sum() < 2:
                ok = active & (theta > 0) & (x_obs > 0) & (x_obs < xm)
            if ok.sum() < 1:
                continue
            xo = x_obs[ok]
            G = np.asarray(law.G(xo), dtype=float)
            h = np.asarray(law.h(xo), dtype=float)
            scale = np.array([law.scale(c) for c in prob.c0[ok]])
            z = np.log(G) - np.log(scale) - np.log(theta[ok])
            w = (h * G / sd_x[ok]) ** 2
            good = np.isfinite(z) & np.isfinite(w) & (w > 0)
            if not good.any():
                continue
            zm = float(np.average(z[good], weights=w[good]))
            chi2 = float(np.sum(w[good] * (z[good] - zm) ** 2))
            if best is None or chi2 < best[0]:
                best = (chi2, ea, shape, zm)
    if best is None:
        raise ValueError("no assay shows a conversion the rate law can reach; cannot start")
    return best[1], best[2], best[3]


__all__ = ["EA_SCALE", "SHAPE_PARAMETERS", "Model", "Spec", "start_guess"]
