"""Benchmark: the joint kinetics fit over 40 batches x 10 assays with 5-s temperature traces.

Measures, in one process on the same invented data:

* the wall time of `fit_batches` (free order, per-batch activity with EM for its
  spread, T_ref decorrelation), which integrates each batch once per evaluation as
  the cumulative reference-equivalent time Θ with an analytic Jacobian;
* the baseline it replaces: re-integrating each batch's ODE (scipy ``solve_ivp``,
  RK45, rtol 1e-8) along its measured trace at every optimiser step, with a
  finite-difference Jacobian. The baseline is timed on a few evaluations and scaled
  by the evaluation count the fit needed: ``nfev + njev * (p + 1)``, where the
  Jacobian costs ``p + 1`` evaluations for ``p`` global parameters because the
  per-batch activity columns touch disjoint rows and can share one (column
  grouping, the most favourable case for the baseline).

Run: ``python -m tests.benchmarks.bench_fit`` (or ``make bench``).
"""

from __future__ import annotations

import math
import os
import time

import numpy as np
from scipy.integrate import solve_ivp

from monitor.physics.plant_fit import FitSeries, fit_batches
from monitor.physics.plant_fit.model import Model, Spec
from monitor.physics.plant_fit.problem import Problem

R = 8.314462618
EA, K_REF, T_REF, ORDER = 70e3, 5e-4, 343.15, 2.0


def make_batches(n_batches=40, n_assays=10, dt_s=5.0, seed=20261201):
    """Invented batches: ramp 30 degC -> hold 60-75 degC, then solve_ivp to the assays."""
    rng = np.random.default_rng(seed)
    dur, ramp = 6 * 3600.0, 3000.0
    out = []
    for b in range(n_batches):
        hold = 333.15 + 5.0 * (b % 4) + rng.normal(0.0, 1.0)

        def T_of(t, hold=hold):
            return np.where(t < ramp, 303.15 + (hold - 303.15) * t / ramp, hold)

        c0 = 1.6 * (1 + 0.02 * rng.normal())
        alpha = math.exp(rng.normal(0.0, 0.06))

        def rhs(t, x, c0=c0, alpha=alpha, T_of=T_of):
            k = K_REF * math.exp(-EA / R * (1 / float(T_of(t)) - 1 / T_REF))
            return [alpha * k * c0 ** (ORDER - 1) * max(1 - x[0], 0.0) ** ORDER]

        ta = np.sort(rng.uniform(1800.0, dur, n_assays))
        sol = solve_ivp(
            rhs,
            (0.0, dur),
            [0.0],
            t_eval=ta,
            method="DOP853",
            rtol=1e-10,
            atol=1e-12,
            max_step=600.0,
        )
        y = c0 * (1 - sol.y[0]) + rng.normal(0.0, 0.02, n_assays)
        t = np.arange(0.0, dur + dt_s, dt_s)
        out.append(
            FitSeries(
                f"B{b:02d}",
                t,
                T_of(t) + rng.normal(0.0, 0.15, len(t)),
                c0,
                ta,
                y,
                "concentration",
                0.02,
            )
        )
    return out


def ode_residuals(series, lnk, ea, order, phi, t_ref):
    """The baseline model: each batch's ODE along its piecewise-linear measured trace."""
    out = []
    for s, ph in zip(series, phi, strict=True):
        a = math.exp(lnk + ph) * s.c_a0 ** (order - 1)
        t_tr, T_tr = s.t_s, s.T_K

        def rhs(t, x, a=a, t_tr=t_tr, T_tr=T_tr):
            T = np.interp(t, t_tr, T_tr)
            return [a * math.exp(-ea / R * (1 / T - 1 / t_ref)) * max(1 - x[0], 0.0) ** order]

        sol = solve_ivp(
            rhs, (0.0, s.assay_t_s[-1]), [0.0], t_eval=s.assay_t_s, rtol=1e-8, atol=1e-10
        )
        out.append((s.assay_value - s.c_a0 * (1 - sol.y[0])) / s.assay_sd)
    return np.concatenate(out)


def main() -> dict:
    series = make_batches()
    n_samples = sum(len(s.t_s) for s in series)
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()

    t0 = time.perf_counter()
    fit = fit_batches(series, "power", "free", ea_prior_j_per_mol=65e3)
    wall = time.perf_counter() - t0

    # per-evaluation cost of the Θ model at the solution (residuals + analytic Jacobian)
    prob = Problem(series, [])
    spec = Spec("power", {}, ["order"], True, True, fit.t_ref_k)
    model = Model(prob, spec, np.ones(len(prob.obs), bool))
    phi = np.log([fit.activity[s.name] for s in series])
    x = np.r_[math.log(fit.k_ref), fit.ea_j_per_mol / 1e3, fit.order, phi]
    reps = 20
    t0 = time.perf_counter()
    for i in range(reps):
        model.invalidate()
        model.fun(x + 1e-9 * i)
        model.jac(x + 1e-9 * i)
    theta_eval = (time.perf_counter() - t0) / reps

    ode_reps = 2
    t0 = time.perf_counter()
    for _ in range(ode_reps):
        r_ode = ode_residuals(
            series, math.log(fit.k_ref), fit.ea_j_per_mol, fit.order, phi, fit.t_ref_k
        )
    ode_eval = (time.perf_counter() - t0) / ode_reps
    model.invalidate()
    r_theta = model.fun(x)[: len(r_ode)]
    agreement = float(np.max(np.abs(r_ode - r_theta)))  # in assay sigmas

    p_global = 4  # ln k_ref, Ea, order, and one grouped column for all activities
    ode_fit_estimate = (fit.nfev + fit.njev * (p_global + 1)) * ode_eval
    report = {
        "batches": len(series),
        "assays": fit.n_assays,
        "temperature_samples": n_samples,
        "cores": cores,
        "fit_wall_s": wall,
        "nfev": fit.nfev,
        "njev": fit.njev,
        "theta_eval_s": theta_eval,
        "ode_eval_s": ode_eval,
        "speedup_per_evaluation": ode_eval / theta_eval,
        "ode_fit_estimate_s": ode_fit_estimate,
        "speedup_whole_fit": ode_fit_estimate / wall,
        "max_model_difference_sigma": agreement,
        "ea_kj_per_mol": fit.ea_j_per_mol / 1e3,
        "order": fit.order,
    }
    print(
        f"bench_fit: {len(series)} batches x 10 assays, {n_samples} temperature samples "
        f"(5 s), {cores} cores"
    )
    print(
        f"  joint fit (cumulative Θ, analytic Jacobian): {wall:.2f} s wall "
        f"({fit.nfev} evaluations, {fit.njev} Jacobians; aim < 10 s)"
    )
    print(
        f"  one residual+Jacobian evaluation: Θ {theta_eval * 1e3:.1f} ms; "
        f"ODE re-integration (residuals only) {ode_eval:.2f} s "
        f"-> {ode_eval / theta_eval:.0f}x per evaluation"
    )
    print(
        f"  ODE fit estimated from {ode_reps} timed evaluations x "
        f"({fit.nfev} + {fit.njev} x {p_global + 1}) = {ode_fit_estimate:.0f} s "
        f"-> {ode_fit_estimate / wall:.0f}x for the whole fit (baseline measured in this run)"
    )
    lo, hi = (v / 1e3 for v in fit.ci95["ea_j_per_mol"])
    n_lo, n_hi = fit.ci95["order"]
    print(
        f"  the two models agree to {agreement:.2g} assay sigma at the solution; fitted Ea "
        f"{fit.ea_j_per_mol / 1e3:.1f} kJ/mol, 95 % [{lo:.1f}, {hi:.1f}] (true 70), order "
        f"{fit.order:.3f} [{n_lo:.3f}, {n_hi:.3f}] (true 2)"
    )
    return report


if __name__ == "__main__":
    main()
