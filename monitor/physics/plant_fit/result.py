"""The joint fit's result: estimates, covariance, standard errors and intervals.

Standard errors are ``cov = f (J^T J)^-1`` at the solution with ``f`` the reduced
chi-square ``SSR/(m - p)`` (Bard, Nonlinear Parameter Estimation, 1974, ch. 7), not
below 1 when the assay errors are stated (`variance_factor`); 95 % intervals use
Student's t with ``m - p`` degrees of freedom. AIC and BIC are those of a Gaussian
likelihood with unknown scale: ``m ln(SSR/m) + 2p`` and ``m ln(SSR/m) + p ln m``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from ..arrhenius import R_J_PER_MOL_K
from ..lab_methods import pinv_cov
from .diagnostics import FitWarning, FixedParameter, FixedSource, WarningKind
from .model import EA_SCALE, Model, Spec
from .problem import Problem

#: Lower bound of the fitted activity spread tau [-]; keeps the prior rows finite.
TAU_FLOOR = 1e-3


@dataclass
class PlantFit:
    """Result of `fit_batches`. ``None`` marks what the data could not determine."""

    rate_law: str
    law_params: dict  # law-specific values used (theta_b, b, theta_r, epsilon)
    order: float  # the power-law order; overall order 2 for bimolecular/autocatalytic
    k_ref: float  # at t_ref_k [s^-1 (L/mol)^(n-1)]
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
    fixed: dict  # parameter name -> FixedParameter (what the data could not identify)
    residuals: list  # per series: dict(name, t_s, observed, predicted, residual, sigma, used)
    excluded: list  # (series, t_s, value, sigma) of assays left out as outliers
    warnings: list = field(default_factory=list)  # FitWarning
    nfev: int = 0
    njev: int = 0
    t_ref_note: str = ""
    series_temperature_k: dict = field(default_factory=dict)  # name -> effective T [K]
    activity_stderr: dict = field(default_factory=dict)  # name -> stderr of ln(activity)

    @property
    def correlation_ln_k_ea(self) -> float:
        return float(self.correlation[0, 1])


def variance_factor(chi2: float, dof: int, sd_known: bool) -> float:
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


def t_quantile(dof: int) -> float:
    """Two-sided 95 % quantile of Student's t [-] (inf without degrees of freedom)."""
    return float(stats.t.ppf(0.975, dof)) if dof > 0 else math.inf


def covariance(model: Model, active: np.ndarray, sd_known: bool):
    """``(cov, factor, dof)`` of the model's parameters at its last evaluation."""
    dof = int(active.sum()) - model.spec.n_global()
    factor = variance_factor(float(model.r @ model.r), dof, sd_known)
    return factor * pinv_cov(model.J), factor, dof


def _standard_errors(cov, names, spec: Spec, lnk, ea, shape, q) -> tuple[dict, dict]:
    """Standard errors and 95 % intervals of the reported parameters."""

    def se_of(name, factor=1.0):
        j = names.index(name)
        v = cov[j, j]
        return float(math.sqrt(v) * factor) if np.isfinite(v) and v >= 0 else None

    se_lnk = se_of("ln_k_ref")
    k_ref = float(math.exp(lnk))
    stderr = {
        "k_ref": None if se_lnk is None else k_ref * se_lnk,
        "ln_k_ref": se_lnk,
        "ea_j_per_mol": se_of("ea", EA_SCALE) if spec.ea_free else None,
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
    return stderr, ci


def _correlation(cov, names) -> np.ndarray:
    """3x3 correlation of (ln k_ref, Ea, order); identity rows for what was not fitted."""
    corr = np.eye(3)
    sub = [names.index(n) if n in names else None for n in ("ln_k_ref", "ea", "order")]
    for a in range(3):
        for b in range(3):
            ia, ib = sub[a], sub[b]
            if a != b and ia is not None and ib is not None:
                den = math.sqrt(cov[ia, ia] * cov[ib, ib])
                corr[a, b] = cov[ia, ib] / den if np.isfinite(den) and den > 0 else 0.0
    return corr


def _residuals_by_series(prob: Problem, model: Model, active: np.ndarray) -> list[dict]:
    resid_raw = prob.obs - model.pred
    out = []
    for b, name in enumerate(prob.names):
        sel = prob.bidx == b
        out.append(
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
    return out


def _activity_stderr(cov, spec: Spec, names_series) -> dict:
    if not spec.phi:
        return {}
    p = spec.n_global()
    var = np.diag(cov)[p:]
    return {
        n: (float(math.sqrt(v)) if np.isfinite(v) and v >= 0 else None)
        for n, v in zip(names_series, var, strict=True)
    }


def information_criteria(ssr: float, m: int, n_params: int) -> tuple[float, float]:
    """AIC and BIC of a Gaussian likelihood with unknown scale (NaN without residuals)."""
    if not m or ssr <= 0:
        return math.nan, math.nan
    return m * math.log(ssr / m) + 2 * n_params, m * math.log(ssr / m) + n_params * math.log(m)


def _reported_ea(spec: Spec, ea: float, fixed: dict) -> float | None:
    """Ea as estimated, or as held at a prior; None when only a placeholder was used."""
    if spec.ea_free:
        return float(ea)
    held = fixed.get("ea_j_per_mol")
    if held is not None and held.source == FixedSource.PRIOR:
        return float(held.value)
    return None


def build_result(
    prob: Problem,
    spec: Spec,
    model: Model,
    x: np.ndarray,
    active: np.ndarray,
    counts: dict,
    fixed: dict[str, FixedParameter],
    warnings: list[FitWarning],
    excluded: list,
    t_ref_note: str,
    sd_known: bool,
) -> PlantFit:
    """The `PlantFit` of the final model at ``x`` (``counts``: nfev, njev)."""
    m = int(active.sum())
    p_glob = spec.n_global()
    dof = m - p_glob
    r = model.r
    s2 = float(r @ r) / dof if dof > 0 else math.nan
    factor = variance_factor(float(r @ r), dof, sd_known)
    cov = factor * pinv_cov(model.J) if dof > 0 else np.full((len(x), len(x)), np.nan)
    names = spec.names(prob.n_series)
    lnk, ea, shape, phis = model.unpack(x)
    law = spec.law(shape)
    stderr, ci = _standard_errors(cov, names, spec, lnk, ea, shape, t_quantile(dof))

    if spec.rate_law == "power":
        order = float(shape.get("order", spec.law_fixed.get("order", 1.0)))
    else:
        order = 2.0
    used_params = {
        k: getattr(law, k) for k in ("theta_b", "b", "theta_r", "epsilon") if hasattr(law, k)
    }
    resid_raw = prob.obs - model.pred
    ssr = float(np.sum(model.r_data[active] ** 2))
    n_params = p_glob + int(spec.phi)
    aic, bic = information_criteria(ssr, m, n_params)
    if spec.phi and model.tau <= TAU_FLOOR * 1.0001:
        warnings.append(
            FitWarning(
                WarningKind.ACTIVITY_SD_AT_FLOOR,
                "no batch-to-batch activity spread is detectable; activity_sd is at "
                f"its floor {TAU_FLOOR:g}",
                {"activity_sd": TAU_FLOOR},
            )
        )
    t_eff = prob.effective_temperatures(float(ea), spec.t_ref_k)[prob.last_assays()]
    return PlantFit(
        rate_law=spec.rate_law,
        law_params=used_params,
        order=order,
        k_ref=float(math.exp(lnk)),
        t_ref_k=spec.t_ref_k,
        ea_j_per_mol=_reported_ea(spec, ea, fixed),
        stderr=stderr,
        ci95=ci,
        correlation=_correlation(cov, names),
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
        residuals=_residuals_by_series(prob, model, active),
        excluded=excluded,
        warnings=warnings,
        nfev=counts["nfev"],
        njev=counts["njev"],
        t_ref_note=t_ref_note,
        series_temperature_k={n: float(T) for n, T in zip(prob.names, t_eff, strict=True)},
        activity_stderr=_activity_stderr(cov, spec, prob.names),
    )


def excluded_mask(fit: PlantFit) -> np.ndarray:
    """The assays a fit left out, as the ``exclude`` argument of another `fit_batches`."""
    return np.concatenate([~r["used"] for r in fit.residuals])


def ln_k_band(fit: PlantFit, T_K) -> tuple[np.ndarray, np.ndarray]:
    """The fitted ``ln k(T)`` and the half-width of its 95 % confidence band [-].

    ``ln k = ln k_ref - (Ea/R)(1/T - 1/T_ref)``, so with ``d = (1/T - 1/T_ref)/R``
    ``var ln k = var ln k_ref + d^2 var Ea - 2 d cov(ln k_ref, Ea)`` (the delta method,
    exact here because ``ln k`` is linear in both). The half-width is NaN where Ea was
    not estimated (its uncertainty is then not the fit's).
    """
    if fit.ea_j_per_mol is None:
        raise ValueError("no Arrhenius line: Ea was not estimated and no prior was given")
    T = np.asarray(T_K, dtype=float)
    d = (1.0 / T - 1.0 / fit.t_ref_k) / R_J_PER_MOL_K
    ln_k = math.log(fit.k_ref) - fit.ea_j_per_mol * d
    se_lnk, se_ea = fit.stderr.get("ln_k_ref"), fit.stderr.get("ea_j_per_mol")
    if se_lnk is None or se_ea is None:
        return ln_k, np.full_like(ln_k, np.nan)
    var = se_lnk**2 + (d * se_ea) ** 2 - 2.0 * d * fit.correlation_ln_k_ea * se_lnk * se_ea
    return ln_k, t_quantile(fit.dof) * np.sqrt(np.maximum(var, 0.0))


__all__ = [
    "TAU_FLOOR",
    "PlantFit",
    "build_result",
    "covariance",
    "excluded_mask",
    "information_criteria",
    "ln_k_band",
    "t_quantile",
    "variance_factor",
]
