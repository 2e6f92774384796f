"""The joint plant fit: kinetics from many batches at once.

`fit_batches` is weighted nonlinear least squares over many batches (or lab runs)
at once, each integrated along its own measured temperature trace; a pure function
(SI units, no I/O, no clock). The isothermal lab methods and the Arrhenius
regression are in `monitor.physics.lab_kinetics`.

The joint fit uses the separation of `monitor.physics.rate_laws`: for
``dX/dt = alpha k(T) s(C_A0) h(X)`` the model conversion at an assay is

    X = G^-1(u),   u = exp(ln k_ref + phi_b) s(C_A0) Theta_b(t; Ea)

with ``phi_b = ln alpha_b`` the batch's activity and ``Theta`` the
reference-equivalent time of `monitor.physics.trace`. Because
``dTheta/dEa = S1`` exactly, the Jacobian is analytic: ``dX/du = h(X)``,
``du/d ln k = du/d phi = u``, ``du/dEa = u S1/Theta``; a shape parameter ``p``
of the law (the order) adds ``dX/dp = h(X) (u d ln s/dp - dG/dp|_X)``, the last
term by a central difference of the closed-form ``G``. Re-integrating the ODE at
every optimiser step is never needed.

Per-batch activities carry a shrinkage prior ``phi_b ~ N(0, tau^2)`` entered as
pseudo-observations ``phi_b/tau``; ``tau`` is updated by the EM step
``tau^2 = mean(phi_b^2 + var phi_b)`` (Dempster, Laird & Rubin, J. R. Stat. Soc. B
39 (1977) 1-38) and becomes the kinetics file's ``activity_sd``. Standard errors
are ``cov = s^2 (J^T J)^-1`` with ``s^2 = SSR/(m - p)`` at the solution (Bard,
Nonlinear Parameter Estimation, 1974, ch. 7). ``T_ref`` is finally moved to where
the fitted ``ln k_ref`` and ``Ea`` are uncorrelated (Schwaab, M. & Pinto, J. C.,
"Optimum reference temperature for reparameterization of the Arrhenius equation",
Chem. Eng. Sci. 62 (2007) 2750-2764, doi:10.1016/j.ces.2007.02.020).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import stats
from scipy.optimize import least_squares

from ..arrhenius import R_J_PER_MOL_K
from ..lab_methods import ORDER_GRID, pinv_cov
from ..quadrature import GL_NODES, GL_WEIGHTS, split_cells  # the same quadrature as Θ
from ..rate_laws import make_law

#: Identifiability: a parameter whose standard error exceeds this fraction of its
#: value (Ea) or this absolute size (order, ln theta_r) is taken as not determined
#: by the data and fixed at its prior value [-] (common practice: a 95 % interval
#: that spans zero or a whole unit of order says the data do not pin it).
UNIDENTIFIABLE_REL_SE_EA = 0.5
UNIDENTIFIABLE_SE_SHAPE = 0.5
#: Lower bound of the fitted activity spread tau [-]; keeps the prior rows finite.
TAU_FLOOR = 1e-3
_EA_SCALE = 1000.0  # the optimiser sees Ea in kJ/mol
_EA_PLAN_J = 300e3  # quadrature cells are planned for Ea up to this [J/mol]
_EA_GRID_KJ = np.arange(10.0, 251.0, 10.0)


@dataclass
class FitSeries:
    """One batch (or one lab run) for `fit_batches`.

    Times may be epoch seconds or seconds since the start, consistently; Θ is zero
    at ``start_s`` (default the first trace sample). The trace is taken piecewise
    linear and held at its last value if an assay lies beyond it.
    """

    name: str
    t_s: np.ndarray  # temperature sample times [s]
    T_K: np.ndarray  # temperatures [K]
    c_a0: float  # initial concentration of A [mol/L]
    assay_t_s: np.ndarray  # assay sample times [s]
    assay_value: np.ndarray  # [mol/L] ("concentration") or [-] ("conversion")
    assay_kind: str = "concentration"
    assay_sd: float | np.ndarray = 0.02  # one-sigma assay error [assay units]
    start_s: float | None = None


@dataclass
class PlantFit:
    """Result of `fit_batches`. ``None`` marks what the data could not determine."""

    rate_law: str
    law_params: dict  # law-specific values used (theta_b, b, theta_r, epsilon)
    order: float  # the power-law order; overall order 2 for bimolecular/autocatalytic
    k_ref: float
    t_ref_k: float
    ea_j_per_mol: float | None  # None: not identifiable and no prior given
    stderr: dict  # k_ref, ln_k_ref, ea_j_per_mol, order (+ law params); None = fixed
    ci95: dict  # name -> (low, high)
    correlation: np.ndarray  # 3x3 of (ln k_ref, Ea, order)
    activity: dict  # series name -> exp(phi_b)
    activity_sd: float | None  # fitted tau, None without per-batch activity
    n_series: int
    n_assays: int
    n_params: int  # global parameters counted in AIC/BIC (incl. tau)
    rmse: float  # of assay residuals, in assay units
    ssr: float  # weighted: sum of ((y - yhat)/sd)^2 over the assays used
    s2: float  # reduced chi-square (incl. prior rows) [-]
    dof: int
    aic: float
    bic: float
    fixed: dict  # parameter -> why the fit held it ("unidentifiable")
    residuals: list  # per series: dict(name, t_s, observed, predicted, residual, sigma, used)
    excluded: list  # (series, t_s, value, sigma) of assays left out as outliers
    warnings: list = field(default_factory=list)
    nfev: int = 0
    njev: int = 0
    t_ref_note: str = ""

    @property
    def correlation_ln_k_ea(self) -> float:
        return float(self.correlation[0, 1])


_SHAPE = {  # law -> {internal name: (law keyword, internal -> law value, bounds)}
    "power": {"order": ("order", lambda v: v, (0.0, 5.0))},
    "autocatalytic": {"ln_theta_r": ("theta_r", math.exp, (math.log(1e-8), math.log(10.0)))},
    "bimolecular": {},
}


class _Problem:
    """The prepared data: per-series traces and assay interpolation weights."""

    def __init__(self, series: Sequence[FitSeries], warnings: list):
        self.names, self.traces = [], []
        obs, sd, conc, c0, bidx, t_rel, idx, frac = [], [], [], [], [], [], [], []
        for s in series:
            t = np.asarray(s.t_s, dtype=float)
            T = np.asarray(s.T_K, dtype=float)
            good = np.isfinite(t) & np.isfinite(T)
            t, T = t[good], T[good]
            t, first = np.unique(t, return_index=True)  # sorted, the first of equal times
            T = T[first]
            ta = np.asarray(s.assay_t_s, dtype=float)
            ya = np.asarray(s.assay_value, dtype=float)
            sa = np.broadcast_to(np.asarray(s.assay_sd, dtype=float), ta.shape)
            start = float(t[0]) if s.start_s is None and len(t) else float(s.start_s or 0.0)
            use = np.isfinite(ya) & np.isfinite(ta) & (ta >= start) & (sa > 0)
            if not len(t) or not use.any() or t[-1] < start:
                warnings.append(f"{s.name}: no temperature samples or no usable assays; left out")
                continue
            if s.assay_kind not in ("concentration", "conversion"):
                raise ValueError(f"{s.name}: assay_kind must be 'concentration' or 'conversion'")
            ta, ya, sa = ta[use], ya[use], sa[use]
            t = t - start
            keep = t >= 0
            t, T = t[keep], T[keep]
            if t[0] > 0:  # the trace starts late: hold its first value back to the start
                t, T = np.concatenate([[0.0], t]), np.concatenate([[T[0]], T])
            last = float(ta.max() - start)
            if last > t[-1]:
                if last - t[-1] > 300.0:
                    warnings.append(
                        f"{s.name}: assays run {(last - t[-1]) / 60:.0f} min past "
                        "the last temperature sample; its last value is held"
                    )
                t, T = np.concatenate([t, [last]]), np.concatenate([T, [T[-1]]])
            if len(t) < 2:  # a single sample: hold it over one second
                t, T = np.array([0.0, max(last, 1.0)]), np.array([T[0], T[0]])
            n_keep = int(np.searchsorted(t, last, side="left")) + 1
            t, T = t[: max(n_keep, 2)], T[: max(n_keep, 2)]
            rel = ta - start
            i = np.clip(np.searchsorted(t, rel, side="right") - 1, 0, len(t) - 2)
            w = np.clip((rel - t[i]) / (t[i + 1] - t[i]), 0.0, 1.0)
            b = len(self.names)
            self.names.append(s.name)
            self.traces.append((t, T))
            obs.append(ya)
            sd.append(sa)
            conc.append(np.full(len(ya), s.assay_kind == "concentration"))
            c0.append(np.full(len(ya), float(s.c_a0)))
            bidx.append(np.full(len(ya), b))
            t_rel.append(rel)
            idx.append(i)
            frac.append(w)
        if not self.names:
            raise ValueError("no series with temperature samples and usable assays")
        cat = np.concatenate
        self.obs, self.sd, self.conc = cat(obs), cat(sd), cat(conc)
        self.c0, self.bidx, self.t_rel = cat(c0), cat(bidx).astype(int), cat(t_rel)
        self._idx, self._frac = idx, frac
        self._node_ref, self._node_data = None, None
        self.c0_series = np.array([c[0] for c in c0])
        self.n_series = len(self.names)
        self.counts = np.array([len(o) for o in obs])

    def _nodes(self, t_ref_k: float):
        """Quadrature nodes of every trace interval, fixed for a given ``T_ref``.

        The cells are those of `monitor.physics.trace.segment_integrals` planned for
        the largest Ea the fit considers (``_EA_PLAN_J``), so for any smaller Ea they
        are at least as fine; one evaluation is then a single ``exp`` over all nodes.
        """
        if self._node_ref == t_ref_k:
            return self._node_data
        G, half, starts, first, n_int = [], [], [], [], 0
        n_cells = 0
        for t, T in self.traces:
            a, b, Ta, Tb, split = split_cells(t[:-1], t[1:], T[:-1], T[1:], _EA_PLAN_J, t_ref_k)
            Tn = (Ta + Tb)[:, None] / 2.0 + ((Tb - Ta) / 2.0)[:, None] * GL_NODES[None, :]
            G.append(-(1.0 / Tn - 1.0 / t_ref_k) / R_J_PER_MOL_K)
            half.append((b - a) / 2.0)
            cell_owner = np.arange(len(t) - 1) if split is None else split[0]
            # index of each interval's first cell (cells of one interval are contiguous)
            starts.append(n_cells + np.flatnonzero(np.r_[True, np.diff(cell_owner) != 0]))
            first.append(n_int)
            n_cells += len(a)
            n_int += len(t) - 1
        first = np.array(first)
        gi = np.concatenate([i + f for i, f in zip(self._idx, first, strict=True)])
        self._node_data = (
            np.vstack(G),
            np.concatenate(half),
            np.concatenate(starts),
            first[self.bidx],
            gi,
            np.concatenate(self._frac),
        )
        self._node_ref = t_ref_k
        return self._node_data

    def theta(self, ea_j_per_mol: float, t_ref_k: float) -> tuple[np.ndarray, np.ndarray]:
        """``Theta`` [s] and ``S1 = dTheta/dEa`` [s mol/J] at every assay.

        Θ is linear between trace samples, as `monitor.physics.trace.ThetaTrace.at`.
        """
        G, half, starts, first, gi, frac = self._nodes(t_ref_k)
        E = np.exp(ea_j_per_mol * G)
        th = np.add.reduceat(half * (E @ GL_WEIGHTS), starts)
        s1 = np.add.reduceat(half * ((E * G) @ GL_WEIGHTS), starts)
        cth = np.concatenate([[0.0], np.cumsum(th)])
        cs1 = np.concatenate([[0.0], np.cumsum(s1)])
        return (cth[gi] - cth[first] + frac * th[gi], cs1[gi] - cs1[first] + frac * s1[gi])

    def mean_inverse_temperature(self, ea_j_per_mol: float, t_ref_k: float) -> float:
        """Θ-weighted mean of 1/T over each series up to its last assay [1/K]."""
        th, s1 = self.theta(ea_j_per_mol, t_ref_k)
        last = np.array(
            [
                np.flatnonzero(self.bidx == b)[np.argmax(self.t_rel[self.bidx == b])]
                for b in range(self.n_series)
            ]
        )
        # mean of g = -(1/T - 1/T_ref)/R over a window is S1/Theta
        return float(1.0 / t_ref_k - R_J_PER_MOL_K * np.sum(s1[last]) / np.sum(th[last]))

    def effective_temperatures(self, ea_j_per_mol: float, t_ref_k: float) -> np.ndarray:
        """Per assay, the Θ-weighted harmonic mean temperature of its window [K]."""
        th, s1 = self.theta(ea_j_per_mol, t_ref_k)
        ok = th > 0
        out = np.full(len(th), np.nan)
        out[ok] = 1.0 / (1.0 / t_ref_k - R_J_PER_MOL_K * s1[ok] / th[ok])
        return out


@dataclass
class _Spec:
    """Which parameters are free, and the values of the fixed ones."""

    rate_law: str
    law_fixed: dict  # law keywords held fixed (theta_b, b, theta_r, epsilon, order)
    shape_free: list  # internal names of free shape parameters
    ea_free: bool
    phi: bool  # per-series activities
    t_ref_k: float
    ea_fixed_j: float = 0.0

    def names(self, n_series: int) -> list[str]:
        out = ["ln_k_ref"] + (["ea"] if self.ea_free else []) + list(self.shape_free)
        return out + ([f"phi[{b}]" for b in range(n_series)] if self.phi else [])

    def n_global(self) -> int:
        return 1 + int(self.ea_free) + len(self.shape_free)

    def law(self, shape_values: dict):
        kw = dict(self.law_fixed)
        for name, v in shape_values.items():
            key, to_law, _ = _SHAPE[self.rate_law][name]
            kw[key] = to_law(v)
        return make_law(self.rate_law, **kw)


class _Model:
    """Residuals and analytic Jacobian of the joint fit for one `_Spec`."""

    def __init__(self, prob: _Problem, spec: _Spec, active: np.ndarray):
        self.prob, self.spec, self.active = prob, spec, active
        self.tau = 1.0
        self._cache_x = None
        self.nfev = self.njev = 0
        self.on_jacobian: Callable[[int], None] | None = None

    def unpack(self, x):
        sp, nb = self.spec, self.prob.n_series
        lnk = x[0]
        j = 1
        ea = x[j] * _EA_SCALE if sp.ea_free else sp.ea_fixed_j
        j += int(sp.ea_free)
        shape = {name: x[j + q] for q, name in enumerate(sp.shape_free)}
        j += len(sp.shape_free)
        phi = x[j : j + nb] if sp.phi else np.zeros(nb)
        return lnk, ea, shape, phi

    def _evaluate(self, x):
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
            cols.append(dpred * a * s1 * _EA_SCALE)
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
        self._cache_x, self._r, self._J = x.copy(), r, J
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
        self.nfev += 1
        self._evaluate(x)
        return self._r

    def jac(self, x):
        self.njev += 1
        self._evaluate(x)
        if self.on_jacobian is not None:
            self.on_jacobian(self.njev)
        return self._J

    def bounds(self):
        sp, nb = self.spec, self.prob.n_series
        lo, hi = [-np.inf], [np.inf]
        if sp.ea_free:
            lo.append(-100.0)
            hi.append(500.0)
        for name in sp.shape_free:
            b = _SHAPE[sp.rate_law][name][2]
            lo.append(b[0])
            hi.append(b[1])
        if sp.phi:
            lo += [-np.inf] * nb
            hi += [np.inf] * nb
        return np.array(lo), np.array(hi)


def _observed_conversion(prob: _Problem):
    x = np.where(prob.conc, 1.0 - prob.obs / prob.c0, prob.obs)
    sd_x = np.where(prob.conc, prob.sd / prob.c0, prob.sd)
    return x, sd_x


def _start_guess(prob: _Problem, spec: _Spec, active, ea_grid_j, shape_grid):
    """Linearised fit: ``ln G(X_obs) - ln s - ln Theta(Ea)`` should be constant (= ln k).

    Over a grid of Ea (and of the free shape parameter) pick the point with the
    least weighted scatter of that quantity; its weighted mean starts ln k_ref.
    """
    x_obs, sd_x = _observed_conversion(prob)
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


def _variance_factor(chi2: float, dof: int, sd_known: bool) -> float:
    """The factor on ``(J^T J)^-1``: the reduced chi-square, not below 1 when the sd is known.

    With stated assay errors a fit that scatters *less* than stated keeps the stated
    errors (the scale-factor rule of the Particle Data Group, Review of Particle
    Physics, Introduction, "Averages and fits"; from memory); one that scatters more
    inflates them by its reduced chi-square.
    """
    if dof <= 0:
        return math.nan
    s2 = chi2 / dof
    return max(1.0, s2) if sd_known else s2


def _t_quantile(dof: int) -> float:
    return float(stats.t.ppf(0.975, dof)) if dof > 0 else math.inf


def fit_batches(
    series: Sequence[FitSeries],
    rate_law: str = "power",
    order: float | str = 1.0,
    *,
    law_params: dict | None = None,
    per_batch_activity: bool = True,
    ea_prior_j_per_mol: float | None = None,
    order_prior: float | None = None,
    activity_sd_start: float = 0.05,
    fit_activity_sd: bool = True,
    free_law_params: Sequence[str] = (),
    outlier_sigma: float | None = 4.0,
    exclude: np.ndarray | None = None,
    t_ref_k: float | None = None,
    sd_known: bool = True,
    on_iteration: Callable[[int], None] | None = None,
) -> PlantFit:
    """Joint weighted nonlinear least-squares fit of kinetics to many batches.

    Parameters
    ----------
    series : sequence of FitSeries
        Batches (or lab runs), each with its own temperature trace and assays.
    rate_law : {"power", "bimolecular", "autocatalytic"}
        A separable law of `monitor.physics.rate_laws` (the reversible law is not).
    order : float or "free"
        Power-law order, fixed or fitted.
    law_params : dict, optional
        Fixed law keywords: ``theta_b``, ``b`` (bimolecular), ``theta_r``
        (autocatalytic; also its start when freed), ``epsilon``.
    per_batch_activity : bool
        Fit ``phi_b = ln alpha_b`` per series with the shrinkage prior ``N(0, tau^2)``.
    ea_prior_j_per_mol : float, optional
        The value Ea is fixed at when the data cannot identify it [J/mol].
    order_prior : float, optional
        The value a free order is fixed at when it cannot be identified [-].
    activity_sd_start : float
        Start of ``tau`` [-].
    fit_activity_sd : bool
        Update ``tau`` by EM; ``False`` holds it at ``activity_sd_start`` (e.g. to
        compare laws at the spread a main fit found).
    free_law_params : sequence of str
        Law parameters to fit as well: ``"theta_r"`` (autocatalytic).
    outlier_sigma : float or None
        Assays whose residual exceeds this many sigma (of the robust residual scale,
        at least 1) after a first fit are left out and listed in ``excluded``;
        ``None`` keeps all.
    exclude : array of bool, optional
        Assays to leave out from the start (in the order of the series' usable
        assays; e.g. the ``excluded`` set of another fit, to compare laws fairly).
    t_ref_k : float, optional
        Fixed reference temperature [K]; default: chosen from the data so that
        ``ln k_ref`` and ``Ea`` are uncorrelated (Schwaab & Pinto 2007).
    sd_known : bool
        The assay sd are stated errors (plant lab): standard errors use
        ``max(1, s^2)``. ``False`` (e.g. lab data with no stated error, sd = 1)
        scales by ``s^2`` itself.
    on_iteration : callable, optional
        Called with the running count of optimiser iterations (Jacobian evaluations).

    Returns
    -------
    PlantFit

    Notes
    -----
    Residuals ``(y - yhat)/sd``; ``yhat`` from ``X = G^-1(exp(ln k_ref + phi_b)
    s(C_A0) Theta_b(t; Ea))`` (module docstring). The start is the linearised fit of
    `_start_guess`. ``T_ref`` starts at the Θ-weighted harmonic mean temperature of
    the fitted windows and is then moved once to where the fitted covariance of
    ``ln k_ref`` and Ea vanishes: ``1/T' = 1/T + R cov(ln k, Ea)/var(Ea)``, an exact
    reparameterisation (the minimum is the same point; the Jacobian is evaluated there).
    """
    warnings: list[str] = []
    law_params = dict(law_params or {})
    if rate_law not in _SHAPE:
        raise ValueError(
            f"rate law {rate_law!r} cannot be fitted by separation "
            "(supported: power, bimolecular, autocatalytic)"
        )
    prob = _Problem(series, warnings)
    free_order = rate_law == "power" and isinstance(order, str)
    if isinstance(order, str) and order != "free":
        raise ValueError(f"order must be a number or 'free', got {order!r}")
    if free_order and law_params.get("epsilon"):
        raise ValueError("a free order needs constant volume (epsilon = 0)")
    law_fixed = {k: v for k, v in law_params.items() if v is not None}
    shape_free: list[str] = []
    if free_order:
        shape_free.append("order")
        law_fixed.pop("order", None)
    elif rate_law == "power":
        law_fixed["order"] = float(order)
    for name in free_law_params:
        if name == "theta_r" and rate_law == "autocatalytic":
            shape_free.append("ln_theta_r")
            law_fixed.pop("theta_r", None)
        else:
            raise ValueError(f"{name!r} cannot be fitted for the {rate_law} law")
    fixed: dict[str, str] = {}
    active = np.ones(len(prob.obs), bool) if exclude is None else ~np.asarray(exclude, bool)
    phi = per_batch_activity and prob.n_series > 1
    if per_batch_activity and not phi:
        warnings.append("one series only: no per-batch activity fitted")

    ea_nominal = ea_prior_j_per_mol if ea_prior_j_per_mol is not None else 60e3
    t_guess = float(np.mean(np.concatenate([T for _, T in prob.traces])))
    t_ref = t_ref_k or 1.0 / prob.mean_inverse_temperature(ea_nominal, t_guess)
    spec = _Spec(rate_law, law_fixed, shape_free, True, phi, t_ref)

    shape_start = {
        "order": order_prior or 1.0,
        "ln_theta_r": math.log(max(law_params.get("theta_r") or 0.01, 1e-8)),
    }
    if free_order:
        shape_grid = [
            {"order": n, **{k: shape_start[k] for k in shape_free if k != "order"}}
            for n in ORDER_GRID
        ]
    else:
        shape_grid = [{k: shape_start[k] for k in shape_free}]
    ea_grid = _EA_GRID_KJ * _EA_SCALE
    if ea_prior_j_per_mol is not None:
        ea_grid = np.append(ea_grid, ea_prior_j_per_mol)
    ea0, shape0, lnk0 = _start_guess(prob, spec, active, ea_grid, shape_grid)

    state = {"x": None, "tau": max(activity_sd_start, TAU_FLOOR), "nfev": 0, "njev": 0}

    def vector(spec_, lnk, ea, shape, phis):
        x = [lnk] + ([ea / _EA_SCALE] if spec_.ea_free else [])
        x += [shape[n] for n in spec_.shape_free]
        if spec_.phi:
            x += list(phis)
        return np.array(x, dtype=float)

    def run(spec_, x0):
        """Least squares, with the EM update of tau around it; returns model, solution."""
        model = _Model(prob, spec_, active)
        iters = [0]

        def count(_):
            iters[0] += 1
            if on_iteration is not None:
                on_iteration(state["njev"] + iters[0])

        model.on_jacobian = count
        lo, hi = model.bounds()
        x = np.clip(x0, lo + 1e-9, hi - 1e-9)
        em = spec_.phi and fit_activity_sd
        for it in range(61 if em else 1):
            model.tau = state["tau"]
            model._cache_x = None
            tol = 1e-7 if em and it < 60 else 1e-10  # loose while tau moves, tight at the end
            sol = least_squares(
                model.fun,
                x,
                jac=model.jac,
                bounds=(lo, hi),
                method="trf",
                x_scale="jac",
                ftol=tol,
                xtol=tol,
                gtol=tol,
                max_nfev=500,
            )
            x = sol.x
            if tol == 1e-10:
                break
            model._evaluate(x)
            m_act = int(active.sum())
            p_glob = spec_.n_global()
            s2 = _variance_factor(float(model._r @ model._r), max(m_act - p_glob, 1), sd_known)
            cov = s2 * pinv_cov(model._J)
            var_phi = np.diag(cov)[p_glob:]
            var_phi = np.where(np.isfinite(var_phi), var_phi, 0.0)
            tau_new = max(math.sqrt(float(np.mean(x[p_glob:] ** 2 + var_phi))), TAU_FLOOR)
            # tau to 0.5 %: its own sampling error is ~1/sqrt(2 n_series), far larger
            converged = abs(tau_new - state["tau"]) <= 5e-3 * state["tau"]
            state["tau"] = tau_new
            if converged:
                model.tau = state["tau"]
                model._cache_x = None
                sol = least_squares(
                    model.fun,
                    x,
                    jac=model.jac,
                    bounds=(lo, hi),
                    method="trf",
                    x_scale="jac",
                    ftol=1e-10,
                    xtol=1e-10,
                    gtol=1e-10,
                    max_nfev=500,
                )
                x = sol.x
                break
        model.tau = state["tau"]
        model._cache_x = None
        model._evaluate(x)
        state["nfev"] += model.nfev
        state["njev"] += model.njev
        return model, x

    x0 = vector(spec, lnk0, ea0, shape0, np.zeros(prob.n_series))
    model, x = run(spec, x0)

    # identifiability: a parameter the data cannot pin is fixed at its prior
    def covariance(model_):
        m_act = int(active.sum())
        dof_ = m_act - model_.spec.n_global()
        s2_ = _variance_factor(float(model_._r @ model_._r), dof_, sd_known)
        return s2_ * pinv_cov(model_._J), s2_, dof_

    cov, s2, dof = covariance(model)
    lnk, ea, shape, phis = model.unpack(x)
    names = spec.names(prob.n_series)
    refit = False
    if spec.ea_free:
        se_ea = math.sqrt(cov[1, 1]) * _EA_SCALE if np.isfinite(cov[1, 1]) else math.inf
        if not np.isfinite(s2) or not se_ea <= UNIDENTIFIABLE_REL_SE_EA * abs(ea):
            t_eff = prob.effective_temperatures(ea if np.isfinite(ea) else ea_nominal, t_ref)
            span = float(np.nanmax(t_eff) - np.nanmin(t_eff)) if np.isfinite(t_eff).any() else 0
            size = f"±{se_ea / 1e3:.0f} kJ/mol" if np.isfinite(se_ea) else "unbounded"
            fixed_at = (
                f"fixed at the prior {ea_prior_j_per_mol / 1e3:.1f} kJ/mol"
                if ea_prior_j_per_mol is not None
                else "not reported (no prior given); k_ref holds at T_ref only"
            )
            warnings.append(
                f"Ea cannot be identified from these data: the assays' windows "
                f"span only {span:.1f} K of effective temperature (its standard "
                f"error would be {size}); {fixed_at}"
            )
            fixed["ea_j_per_mol"] = "unidentifiable"
            spec.ea_free = False
            spec.ea_fixed_j = ea_prior_j_per_mol if ea_prior_j_per_mol is not None else 0.0
            refit = True
    for name in list(spec.shape_free):
        j = names.index(name)
        se = math.sqrt(cov[j, j]) if np.isfinite(cov[j, j]) else math.inf
        if not np.isfinite(s2) or not se <= UNIDENTIFIABLE_SE_SHAPE:
            key, to_law, _ = _SHAPE[rate_law][name]
            prior_v = order_prior if key == "order" else law_params.get(key)
            if prior_v is None:
                prior_v = 1.0 if key == "order" else 0.01
            warnings.append(
                f"{key} cannot be identified from these data (standard error "
                f"{'unbounded' if not np.isfinite(se) else f'{se:.2g}'}); fixed "
                f"at {prior_v:g}"
            )
            fixed[key] = "unidentifiable"
            spec.shape_free.remove(name)
            spec.law_fixed[key] = float(prior_v)
            refit = True
    if refit:
        x0 = vector(
            spec,
            lnk,
            spec.ea_fixed_j if not spec.ea_free else ea,
            {k: v for k, v in shape.items() if k in spec.shape_free},
            phis,
        )
        model, x = run(spec, x0)

    # outliers: listed, left out, fitted again (never silently)
    excluded = []
    if outlier_sigma is not None:
        rd = model.r_data
        scale = max(1.0, 1.4826 * float(np.median(np.abs(rd[active]))))
        bad = active & (np.abs(rd) > outlier_sigma * scale)
        if bad.any():
            for i in np.flatnonzero(bad):
                nm = prob.names[prob.bidx[i]]
                excluded.append((nm, float(prob.t_rel[i]), float(prob.obs[i]), float(rd[i])))
                warnings.append(
                    f"{nm}: assay at {prob.t_rel[i] / 60:.0f} min after start "
                    f"(value {prob.obs[i]:g}) is {rd[i]:+.1f} sigma from the model; "
                    "left out of the fit"
                )
            active &= ~bad
            model, x = run(spec, model._cache_x)

    # T_ref: move to where ln k_ref and Ea are uncorrelated, then fit there
    if spec.ea_free and t_ref_k is None:
        cov, s2, dof = covariance(model)
        lnk, ea, shape, phis = model.unpack(x)
        if np.isfinite(cov[0, 1]) and cov[1, 1] > 0:
            # cov is in (ln k, Ea [kJ/mol]): cov(ln k, Ea)/var(Ea) in mol/J needs 1/1000
            inv_new = 1.0 / spec.t_ref_k + R_J_PER_MOL_K * cov[0, 1] / (cov[1, 1] * _EA_SCALE)
            t_all = np.concatenate([T for _, T in prob.traces])
            t_new = float(np.clip(1.0 / inv_new, t_all.min(), t_all.max()))
            t_new = round(t_new, 2)
            lnk_new = lnk - ea / R_J_PER_MOL_K * (1.0 / t_new - 1.0 / spec.t_ref_k)
            spec.t_ref_k = t_new
            x = vector(spec, lnk_new, ea, shape, phis)
            # an exact reparameterisation: the minimum is the same point, only J changes
            model = _Model(prob, spec, active)
            model.tau = state["tau"]
            model._evaluate(x)
        t_ref_note = (
            "chosen where the fitted ln k_ref and Ea are uncorrelated (Schwaab & "
            "Pinto 2007), started from the Θ-weighted harmonic mean temperature"
        )
    elif t_ref_k is not None:
        t_ref_note = "given"
    else:
        t_ref_note = "Θ-weighted harmonic mean temperature of the fitted windows"

    return _result(
        prob,
        spec,
        model,
        x,
        active,
        state,
        fixed,
        warnings,
        excluded,
        ea_prior_j_per_mol,
        t_ref_note,
        sd_known,
    )


def _result(
    prob, spec, model, x, active, state, fixed, warnings, excluded, ea_prior, t_ref_note, sd_known
) -> PlantFit:
    m = int(active.sum())
    p_glob = spec.n_global()
    dof = m - p_glob
    r = model._r
    s2 = float(r @ r) / dof if dof > 0 else math.nan
    factor = _variance_factor(float(r @ r), dof, sd_known)
    cov = factor * pinv_cov(model._J) if dof > 0 else np.full((len(x), len(x)), np.nan)
    names = spec.names(prob.n_series)
    lnk, ea, shape, phis = model.unpack(x)
    law = spec.law(shape)
    q = _t_quantile(dof)

    def se_of(name, factor=1.0):
        j = names.index(name)
        v = cov[j, j]
        return float(math.sqrt(v) * factor) if np.isfinite(v) and v >= 0 else None

    se_lnk = se_of("ln_k_ref")
    k_ref = float(math.exp(lnk))
    stderr = {
        "k_ref": None if se_lnk is None else k_ref * se_lnk,
        "ln_k_ref": se_lnk,
        "ea_j_per_mol": se_of("ea", _EA_SCALE) if spec.ea_free else None,
        "order": se_of("order") if "order" in spec.shape_free else None,
    }
    ci = {"ln_k_ref": None if se_lnk is None else (lnk - q * se_lnk, lnk + q * se_lnk)}
    ci["k_ref"] = None if se_lnk is None else tuple(math.exp(v) for v in ci["ln_k_ref"])
    if stderr["ea_j_per_mol"] is not None:
        ci["ea_j_per_mol"] = (ea - q * stderr["ea_j_per_mol"], ea + q * stderr["ea_j_per_mol"])
    if stderr["order"] is not None:
        n = shape["order"]
        ci["order"] = (n - q * stderr["order"], n + q * stderr["order"])
    if "ln_theta_r" in spec.shape_free:
        se = se_of("ln_theta_r")
        th = math.exp(shape["ln_theta_r"])
        stderr["theta_r"] = None if se is None else th * se
        if se is not None:
            ci["theta_r"] = (th * math.exp(-q * se), th * math.exp(q * se))

    corr = np.eye(3)
    sub = [names.index(n) if n in names else None for n in ("ln_k_ref", "ea", "order")]
    for a in range(3):
        for b in range(3):
            ia, ib = sub[a], sub[b]
            if a != b and ia is not None and ib is not None:
                den = math.sqrt(cov[ia, ia] * cov[ib, ib])
                corr[a, b] = cov[ia, ib] / den if np.isfinite(den) and den > 0 else 0.0

    if spec.rate_law == "power":
        order = float(shape.get("order", spec.law_fixed.get("order", 1.0)))
    else:
        order = 2.0
    used_params = {
        k: getattr(law, k) for k in ("theta_b", "b", "theta_r", "epsilon") if hasattr(law, k)
    }
    resid_raw = prob.obs - model.pred
    residuals = []
    for b, name in enumerate(prob.names):
        sel = prob.bidx == b
        residuals.append(
            {
                "name": name,
                "t_s": prob.t_rel[sel],
                "observed": prob.obs[sel],
                "predicted": model.pred[sel],
                "residual": resid_raw[sel],
                "sigma": model.r_data[sel],
                "used": active[sel],
            }
        )
    ssr = float(np.sum(model.r_data[active] ** 2))
    n_params = p_glob + int(spec.phi)
    aic = m * math.log(ssr / m) + 2 * n_params if m and ssr > 0 else math.nan
    bic = m * math.log(ssr / m) + n_params * math.log(m) if m and ssr > 0 else math.nan
    if spec.phi and model.tau <= TAU_FLOOR * 1.0001:
        warnings.append(
            "no batch-to-batch activity spread is detectable; activity_sd is at "
            f"its floor {TAU_FLOOR:g}"
        )
    ea_out = ea if spec.ea_free else (ea_prior if ea_prior is not None else None)
    return PlantFit(
        rate_law=spec.rate_law,
        law_params=used_params,
        order=order,
        k_ref=k_ref,
        t_ref_k=spec.t_ref_k,
        ea_j_per_mol=None if ea_out is None else float(ea_out),
        stderr=stderr,
        ci95=ci,
        correlation=corr,
        activity={n: float(math.exp(v)) for n, v in zip(prob.names, phis, strict=True)},
        activity_sd=float(model.tau) if spec.phi else None,
        n_series=prob.n_series,
        n_assays=m,
        n_params=n_params,
        rmse=float(np.sqrt(np.mean(resid_raw[active] ** 2))),
        ssr=ssr,
        s2=s2,
        dof=dof,
        aic=aic,
        bic=bic,
        fixed=fixed,
        residuals=residuals,
        excluded=excluded,
        warnings=warnings,
        nfev=state["nfev"],
        njev=state["njev"],
        t_ref_note=t_ref_note,
    )


def excluded_mask(fit: PlantFit) -> np.ndarray:
    """The assays a fit left out, as the ``exclude`` argument of another `fit_batches`."""
    return np.concatenate([~r["used"] for r in fit.residuals])


__all__ = ["FitSeries", "PlantFit", "excluded_mask", "fit_batches"]
