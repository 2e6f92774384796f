"""The joint plant fit: kinetics from many batches at once, as a sequence of named steps.

`fit_batches` is weighted nonlinear least squares over many batches (or lab runs)
at once, each integrated along its own measured temperature trace; a pure function
(SI units, no I/O, no clock). The data are prepared in `.problem`, the model and its
analytic Jacobian are in `.model`, standard errors and the result in `.result`;
the isothermal lab methods and the Arrhenius regression are in
`monitor.physics.lab_methods`.

The steps: specify which parameters are free; start from a linearised fit over a
grid; solve (least squares, with an EM update of the activity spread ``tau`` around
it); hold what the data cannot identify and solve again; leave out gross outliers
and solve again; move ``T_ref`` to where ``ln k_ref`` and ``Ea`` are uncorrelated.

Per-batch activities carry a shrinkage prior ``phi_b ~ N(0, tau^2)``; ``tau`` is
updated by the EM step ``tau^2 = mean(phi_b^2 + var phi_b)`` (Dempster, Laird &
Rubin, J. R. Stat. Soc. B 39 (1977) 1-38) and becomes the kinetics file's
``activity_sd``. ``T_ref`` is finally moved to where the fitted ``ln k_ref`` and
``Ea`` are uncorrelated (Schwaab, M. & Pinto, J. C., "Optimum reference temperature
for reparameterization of the Arrhenius equation", Chem. Eng. Sci. 62 (2007)
2750-2764, doi:10.1016/j.ces.2007.02.020).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from scipy.optimize import least_squares

from ..arrhenius import R_J_PER_MOL_K
from ..lab_methods import ORDER_GRID, pinv_cov
from .diagnostics import FitWarning, WarningKind
from .identifiability import EA_NOMINAL_J_PER_MOL, hold_unidentifiable
from .model import EA_SCALE, SHAPE_PARAMETERS, Model, Spec, start_guess
from .problem import FitSeries, Problem
from .result import TAU_FLOOR, PlantFit, build_result, covariance, variance_factor

#: Start grid of Ea for the linearised start [kJ/mol].
EA_GRID_KJ = np.arange(10.0, 251.0, 10.0)
#: Tolerances of least squares while tau moves, and at the end [-].
LOOSE_TOL, TIGHT_TOL = 1e-7, 1e-10
#: Most EM updates of tau before a final tight solve.
MAX_EM_STEPS = 60


class _Solver:
    """Least squares with the EM update of ``tau`` around it; counts the work done."""

    def __init__(self, prob: Problem, active, *, tau, em, sd_known, on_iteration):
        self.prob, self.active = prob, active
        self.tau = max(tau, TAU_FLOOR)
        self.em, self.sd_known, self.on_iteration = em, sd_known, on_iteration
        self.nfev = self.njev = 0

    def solve(self, spec: Spec, x0: np.ndarray) -> tuple[Model, np.ndarray]:
        """Fit ``spec`` from ``x0``; returns the model (evaluated at the solution) and it."""
        model = Model(self.prob, spec, self.active)
        iters = 0

        def count(_):
            nonlocal iters
            iters += 1
            if self.on_iteration is not None:
                self.on_iteration(self.njev + iters)

        model.on_jacobian = count
        lo, hi = model.bounds()
        x = np.clip(x0, lo + 1e-9, hi - 1e-9)
        em = spec.phi and self.em
        for it in range(MAX_EM_STEPS + 1 if em else 1):
            model.tau = self.tau
            model.invalidate()
            tol = LOOSE_TOL if em and it < MAX_EM_STEPS else TIGHT_TOL
            x = _least_squares(model, x, lo, hi, tol)
            if tol == TIGHT_TOL:
                break
            tau_new = self._em_tau(model, x, spec)
            # tau to 0.5 %: its own sampling error is ~1/sqrt(2 n_series), far larger
            converged = abs(tau_new - self.tau) <= 5e-3 * self.tau
            self.tau = tau_new
            if converged:
                model.tau = self.tau
                model.invalidate()
                x = _least_squares(model, x, lo, hi, TIGHT_TOL)
                break
        model.tau = self.tau
        model.invalidate()
        model.evaluate(x)
        self.nfev += model.nfev
        self.njev += model.njev
        return model, x

    def _em_tau(self, model: Model, x: np.ndarray, spec: Spec) -> float:
        """The EM update ``tau^2 = mean(phi_b^2 + var phi_b)``, not below `TAU_FLOOR`."""
        model.evaluate(x)
        p_glob = spec.n_global()
        dof = max(int(self.active.sum()) - p_glob, 1)
        cov = variance_factor(float(model.r @ model.r), dof, self.sd_known) * pinv_cov(model.J)
        var_phi = np.diag(cov)[p_glob:]
        var_phi = np.where(np.isfinite(var_phi), var_phi, 0.0)
        return max(math.sqrt(float(np.mean(x[p_glob:] ** 2 + var_phi))), TAU_FLOOR)


def _least_squares(model: Model, x, lo, hi, tol: float) -> np.ndarray:
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
    return sol.x


def _specify(prob: Problem, rate_law, order, law_params, free_law_params, per_batch_activity):
    """Which parameters are free: ``(law_fixed, shape_free, phi, free_order)``."""
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
    phi = per_batch_activity and prob.n_series > 1
    return law_fixed, shape_free, phi, free_order


def _start(prob, spec: Spec, active, *, free_order, order_prior, law_params, ea_prior):
    """The linearised start over a grid of Ea (and of the order when it is free)."""
    shape_start = {
        "order": order_prior or 1.0,
        "ln_theta_r": math.log(max(law_params.get("theta_r") or 0.01, 1e-8)),
    }
    others = {k: shape_start[k] for k in spec.shape_free if k != "order"}
    if free_order:
        shape_grid = [{"order": n, **others} for n in ORDER_GRID]
    else:
        shape_grid = [{k: shape_start[k] for k in spec.shape_free}]
    ea_grid = EA_GRID_KJ * EA_SCALE
    if ea_prior is not None:
        ea_grid = np.append(ea_grid, ea_prior)
    ea0, shape0, lnk0 = start_guess(prob, spec, active, ea_grid, shape_grid)
    return spec.vector(lnk0, ea0, shape0, np.zeros(prob.n_series))


def _leave_out_outliers(prob, spec, model, x, active, solver, warnings, outlier_sigma):
    """Assays beyond ``outlier_sigma`` robust sigmas: listed, left out, fitted again."""
    excluded: list = []
    if outlier_sigma is None:
        return model, x, excluded
    rd = model.r_data
    scale = max(1.0, 1.4826 * float(np.median(np.abs(rd[active]))))
    bad = active & (np.abs(rd) > outlier_sigma * scale)
    if not bad.any():
        return model, x, excluded
    for i in np.flatnonzero(bad):
        name = prob.names[prob.bidx[i]]
        t, value, sigma = float(prob.t_rel[i]), float(prob.obs[i]), float(rd[i])
        excluded.append((name, t, value, sigma))
        warnings.append(
            FitWarning(
                WarningKind.OUTLIER_LEFT_OUT,
                f"{name}: assay at {t / 60:.0f} min after start (value {value:g}) is "
                f"{sigma:+.1f} sigma from the model; left out of the fit",
                {"series": name, "t_s": t, "value": value, "sigma": sigma},
            )
        )
    active &= ~bad  # in place: the solver's models share this mask
    model, x = solver.solve(spec, x)
    return model, x, excluded


def _decorrelate_t_ref(prob, spec, model, x, active, solver):
    """Move ``T_ref`` to where ln k_ref and Ea are uncorrelated (an exact reparameterisation).

    ``1/T' = 1/T + R cov(ln k, Ea)/var(Ea)``; the minimum is the same point, so only
    the Jacobian is evaluated again there.
    """
    cov, _, _ = covariance(model, active, solver.sd_known)
    lnk, ea, shape, phis = model.unpack(x)
    if not (np.isfinite(cov[0, 1]) and cov[1, 1] > 0):
        return model, x
    # cov is in (ln k, Ea [kJ/mol]): cov(ln k, Ea)/var(Ea) in mol/J needs 1/1000
    inv_new = 1.0 / spec.t_ref_k + R_J_PER_MOL_K * cov[0, 1] / (cov[1, 1] * EA_SCALE)
    t_all = np.concatenate([T for _, T in prob.traces])
    t_new = round(float(np.clip(1.0 / inv_new, t_all.min(), t_all.max())), 2)
    lnk_new = lnk - ea / R_J_PER_MOL_K * (1.0 / t_new - 1.0 / spec.t_ref_k)
    spec.t_ref_k = t_new
    x = spec.vector(lnk_new, ea, shape, phis)
    model = Model(prob, spec, active)
    model.tau = solver.tau
    model.evaluate(x)
    return model, x


def _place_t_ref(prob, spec, model, x, active, solver, t_ref_k):
    """``T_ref`` as given, else decorrelated when Ea is fitted; with a note of which."""
    if t_ref_k is not None:
        return model, x, "given"
    if not spec.ea_free:
        return model, x, "Θ-weighted harmonic mean temperature of the fitted windows"
    model, x = _decorrelate_t_ref(prob, spec, model, x, active, solver)
    note = (
        "chosen where the fitted ln k_ref and Ea are uncorrelated (Schwaab & "
        "Pinto 2007), started from the Θ-weighted harmonic mean temperature"
    )
    return model, x, note


def fit_batches(
    series: Sequence[FitSeries],
    rate_law: str = "power",
    order: float | str = 1.0,
    *,
    law_params: dict | None = None,
    per_batch_activity: bool = True,
    ea_prior_j_per_mol: float | None = None,
    order_prior: float | None = None,
    theta_r_prior: float | None = None,
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
    ea_prior_j_per_mol, order_prior, theta_r_prior : float, optional
        Prior values [J/mol], [-], [-]: what a parameter is held at when the data
        cannot identify it (`FixedSource.PRIOR`). Without one it is held at a
        placeholder (Ea 0, order 1, theta_r its start; `FixedSource.PLACEHOLDER`)
        that the result never reports as an estimate.
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
        With typed ``warnings`` (`FitWarning`) and ``fixed`` (`FixedParameter`).

    Notes
    -----
    Residuals ``(y - yhat)/sd``; ``yhat`` from ``X = G^-1(exp(ln k_ref + phi_b)
    s(C_A0) Theta_b(t; Ea))`` (`monitor.physics.plant_fit.model`). ``T_ref`` starts
    at the Θ-weighted harmonic mean temperature of the fitted windows and is then
    moved once to where the fitted covariance of ``ln k_ref`` and Ea vanishes.
    """
    warnings: list[FitWarning] = []
    law_params = dict(law_params or {})
    if rate_law not in SHAPE_PARAMETERS:
        raise ValueError(
            f"rate law {rate_law!r} cannot be fitted by separation "
            "(supported: power, bimolecular, autocatalytic)"
        )
    prob = Problem(series, warnings)
    law_fixed, shape_free, phi, free_order = _specify(
        prob, rate_law, order, law_params, free_law_params, per_batch_activity
    )
    active = np.ones(len(prob.obs), bool) if exclude is None else ~np.asarray(exclude, bool)
    if per_batch_activity and not phi:
        warnings.append(
            FitWarning(WarningKind.ONE_SERIES, "one series only: no per-batch activity fitted")
        )
    ea_nominal = ea_prior_j_per_mol if ea_prior_j_per_mol is not None else EA_NOMINAL_J_PER_MOL
    t_guess = float(np.mean(np.concatenate([T for _, T in prob.traces])))
    t_ref = t_ref_k or 1.0 / prob.mean_inverse_temperature(ea_nominal, t_guess)
    spec = Spec(rate_law, law_fixed, shape_free, True, phi, t_ref)
    solver = _Solver(
        prob,
        active,
        tau=activity_sd_start,
        em=fit_activity_sd,
        sd_known=sd_known,
        on_iteration=on_iteration,
    )
    x0 = _start(
        prob,
        spec,
        active,
        free_order=free_order,
        order_prior=order_prior,
        law_params=law_params,
        ea_prior=ea_prior_j_per_mol,
    )
    model, x = solver.solve(spec, x0)
    priors = {
        "ea_j_per_mol": (ea_prior_j_per_mol, 0.0),
        "order": (order_prior, 1.0),
        "theta_r": (theta_r_prior, law_params.get("theta_r") or 0.01),
    }
    model, x, fixed = hold_unidentifiable(prob, spec, model, x, active, solver, warnings, priors)
    model, x, excluded = _leave_out_outliers(
        prob, spec, model, x, active, solver, warnings, outlier_sigma
    )
    model, x, t_ref_note = _place_t_ref(prob, spec, model, x, active, solver, t_ref_k)
    counts = {"nfev": solver.nfev, "njev": solver.njev}
    return build_result(
        prob, spec, model, x, active, counts, fixed, warnings, excluded, t_ref_note, sd_known
    )


__all__ = [
    "FitSeries",
    "PlantFit",
    "fit_batches",
]
