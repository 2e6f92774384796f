"""What a fit job records: the kinetics it writes, their provenance, and the document.

Every value written is either estimated by the fit or marked, in the provenance's
``fixed`` table and the document's ``fixed``/``held``, with where it came from (the
prior kinetics file, the caller, an assumption). Provenance holds no absolute path.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum
from pathlib import Path

import numpy as np

from .. import __version__
from ..batch.kinetics import Kinetics, k_ref_unit
from ..physics.plant_fit import FitWarning, FixedParameter, FixedSource, PlantFit
from .candidates import DEFAULT_ACTIVITY_SD, LawChoice
from .plots import PLANT_NOTE, PLANT_POINTS, ArrheniusPoint


class JobWarning(StrEnum):
    """What the fit job itself notes (stable names: they reach JSON)."""

    ACTIVITY_SD_NOT_FITTED = "activity_sd_not_fitted"  # lab runs: the spread is not theirs


@dataclass
class JobContext:
    """What a fit job knows besides the fit: its prior, its source and its choices."""

    choice: LawChoice
    prior: Kinetics | None
    prior_name: str | None  # portable name of the prior kinetics file
    source: dict  # recipe, batches / lab_csv, runs (portable: names, no absolute paths)
    method: str
    assay_kind: str
    sd_stated: bool  # the assays state their errors (else the fit is unweighted)
    warnings: list = field(default_factory=list)  # FitWarning of the sources and the job
    extra: dict = field(default_factory=dict)  # lab_methods, arrhenius (lab jobs)
    arrhenius: list[ArrheniusPoint] = field(default_factory=list)
    arrhenius_what: str = PLANT_POINTS
    arrhenius_note: str = PLANT_NOTE


def lab_activity_sd_warning(prior: Kinetics | None) -> FitWarning:
    """Lab runs say nothing about the plant's batch-to-batch spread: say what is written."""
    where = "kept from the prior kinetics" if prior else f"assumed {DEFAULT_ACTIVITY_SD:g}"
    return FitWarning(
        JobWarning.ACTIVITY_SD_NOT_FITTED,
        f"activity_sd {where}: lab runs say nothing about the batch-to-batch spread at the plant",
        {"activity_sd": prior.activity_sd if prior else DEFAULT_ACTIVITY_SD},
    )


def _toml_safe(x):
    """Drop None (TOML has no null) and make numbers plain floats."""
    if isinstance(x, dict):
        return {k: _toml_safe(v) for k, v in x.items() if v is not None}
    if isinstance(x, list | tuple):
        return [_toml_safe(v) for v in x if v is not None]
    if isinstance(x, float | np.floating):
        return float(x) if math.isfinite(x) else str(x)
    if isinstance(x, np.integer | np.bool_):
        return x.item()
    return x


def _prior_text(ctx: JobContext) -> str:
    version = (
        f", version {ctx.prior.version}" if ctx.prior is not None and ctx.prior.version else ""
    )
    return f"the prior kinetics {ctx.prior_name}{version}"


def fixed_note(p: FixedParameter, ctx: JobContext) -> str:
    """Why a parameter was held and where its value came from (for people)."""
    if p.source == FixedSource.PRIOR:
        carried = " and standard error" if p.name in ("ea_j_per_mol", "order") else ""
        return f"{p.reason} from these data; value{carried} kept from {_prior_text(ctx)}"
    return f"{p.reason} from these data; no prior value (not written)"


def held_notes(fit: PlantFit, ctx: JobContext) -> dict[str, str]:
    """Parameters not estimated by choice (given, from the prior, assumed), with their source."""
    notes: dict[str, str] = {}
    choice = ctx.choice
    if fit.rate_law == "power" and choice.order != "free" and "order" not in fit.fixed:
        notes["order"] = {
            "given": f"given: {fit.order:g}",
            "prior": f"{fit.order:g}, from {_prior_text(ctx)}",
            "assumed": f"assumed {fit.order:g} (no order given and no prior kinetics); "
            "compare the candidates",
        }.get(choice.order_source, f"{fit.order:g}")
    for key in ("theta_b", "b"):
        if key in fit.law_params:
            notes[key] = f"{fit.law_params[key]:g}, from {_prior_text(ctx)}"
    if fit.law_params.get("epsilon"):
        notes["epsilon"] = f"{fit.law_params['epsilon']:g}, from {_prior_text(ctx)}"
    if fit.activity_sd is None:
        if ctx.prior is not None:
            notes["activity_sd"] = f"not estimated; kept from {_prior_text(ctx)}"
        else:
            notes["activity_sd"] = (
                f"not estimated; assumed {DEFAULT_ACTIVITY_SD:g} (common practice): replace "
                "it with the spread a plant fit finds"
            )
    return notes


def kinetics_of(fit: PlantFit, ctx: JobContext, prov: dict) -> Kinetics:
    """The kinetics to write: estimates, and held values with their source's uncertainty."""
    se = fit.stderr
    prior = ctx.prior
    ea, se_ea = fit.ea_j_per_mol, se["ea_j_per_mol"]
    se_order = se["order"]
    held = fit.fixed.get("ea_j_per_mol")
    if held is not None:  # held at the prior (refuse_unestimated let nothing else through)
        ea, se_ea = held.value, prior.stderr_ea_j_per_mol if prior else None
    if "order" in fit.fixed and prior is not None and prior.rate_law == "power":
        se_order = prior.stderr_order
    lp = fit.law_params
    activity_sd = fit.activity_sd
    if activity_sd is None:
        activity_sd = prior.activity_sd if prior else DEFAULT_ACTIVITY_SD
    return Kinetics(
        rate_law=fit.rate_law,
        k_ref=fit.k_ref,
        t_ref_k=fit.t_ref_k,
        ea_j_per_mol=float(ea),
        order=fit.order,
        activity_sd=activity_sd,
        theta_b=lp.get("theta_b"),
        b=lp.get("b", 1.0),
        theta_r=lp.get("theta_r", 0.0),
        epsilon=lp.get("epsilon", 0.0),
        stderr_k_ref=se["k_ref"] or 0.0,
        stderr_ea_j_per_mol=se_ea or 0.0,
        stderr_order=se_order or 0.0,
        correlation=tuple(tuple(float(v) for v in row) for row in fit.correlation),
        provenance=prov,
    )


def _all_warnings(fit: PlantFit, ctx: JobContext) -> list[FitWarning]:
    return list(ctx.warnings) + list(fit.warnings)


def provenance(fit: PlantFit, cands, ctx: JobContext, fitted_at: str) -> dict:
    """The kinetics file's ``[provenance]``: source, method, statistics, what was held."""
    fixed = {k: fixed_note(p, ctx) for k, p in fit.fixed.items()}
    fixed.update(held_notes(fit, ctx))
    return _toml_safe(
        {
            **ctx.source,
            "method": ctx.method,
            "fitted_at": fitted_at,
            "software": f"convmon {__version__}",
            "n_batches": fit.n_series,
            "n_assays": fit.n_assays,
            "rmse": fit.rmse,
            "aic": fit.aic,
            "bic": fit.bic,
            "reduced_chi2": fit.s2,
            "dof": fit.dof,
            "k_ref_unit": k_ref_unit(fit.rate_law, fit.order),
            "t_ref_choice": fit.t_ref_note,
            "correlation_ln_k_ref_ea": fit.correlation_ln_k_ea,
            "prior_kinetics": ctx.prior_name,
            "prior_kinetics_version": ctx.prior.version if ctx.prior is not None else None,
            "fixed": fixed or None,
            "excluded_assays": [
                f"{b} at {t / 60:.0f} min: {v:g} ({s:+.1f} sigma)" for b, t, v, s in fit.excluded
            ],
            "warnings": [w.message for w in _all_warnings(fit, ctx)],
            "candidates": [
                {k: v for k, v in c.as_dict().items() if k in ("label", "aic", "bic", "rmse")}
                for c in cands
            ],
        }
    )


def _by_batch(fit: PlantFit, sd_stated: bool) -> list[dict]:
    out = []
    for r in fit.residuals:
        used = r["used"]
        res = r["residual"][used]
        name = r["name"]
        out.append(
            {
                "batch": name,
                "n_assays": int(used.sum()),
                "activity": fit.activity.get(name),
                "activity_stderr_ln": fit.activity_stderr.get(name),
                "temperature_k": fit.series_temperature_k.get(name),
                "rmse": float(np.sqrt(np.mean(res**2))) if len(res) else None,
                "max_abs_sigma": (
                    float(np.max(np.abs(r["sigma"][used]))) if len(res) and sd_stated else None
                ),
                "residuals": [float(v) for v in r["residual"]],
                "t_s": [float(v) for v in r["t_s"]],
                "used": [bool(v) for v in used],
            }
        )
    return out


def fit_document(
    fit: PlantFit, cands, kin: Kinetics, out: Path, plots: dict, ctx: JobContext, fitted_at: str
) -> dict:
    """The ``fit`` document of INTERFACE.md, and what an engineer needs to check it."""
    se = fit.stderr
    warnings = _all_warnings(fit, ctx)
    doc = {
        "rate_law": fit.rate_law,
        "order": fit.order,
        "k_ref": fit.k_ref,
        "k_ref_unit": k_ref_unit(fit.rate_law, fit.order),
        "t_ref_k": fit.t_ref_k,
        "ea_j_per_mol": fit.ea_j_per_mol if "ea_j_per_mol" not in fit.fixed else None,
        "stderr": {"k_ref": se["k_ref"], "ea_j_per_mol": se["ea_j_per_mol"], "order": se["order"]},
        "activity_sd": fit.activity_sd,
        "n_batches": fit.n_series,
        "n_assays": fit.n_assays,
        "rmse": fit.rmse,
        "aic": fit.aic,
        "bic": fit.bic,
        "candidates": [c.as_dict() for c in cands],
        "reduced_chi2": fit.s2,
        "dof": fit.dof,
        "ci95": {k: list(v) for k, v in fit.ci95.items() if v is not None},
        "correlation": [[float(v) for v in row] for row in fit.correlation],
        "correlation_params": ["ln_k_ref", "ea_j_per_mol", "order"],
        "fixed": {k: {**p.as_dict(), "note": fixed_note(p, ctx)} for k, p in fit.fixed.items()},
        "held": held_notes(fit, ctx),
        "law_params": fit.law_params,
        "t_ref_choice": fit.t_ref_note,
        "ea_j_per_mol_written": kin.ea_j_per_mol,
        "warnings": [w.message for w in warnings],
        "findings": [w.as_dict() for w in warnings],
        "excluded_assays": [
            {"batch": b, "t_s": t, "value": v, "sigma": s} for b, t, v, s in fit.excluded
        ],
        "residuals_by_batch": _by_batch(fit, ctx.sd_stated),
        "assay_kind": ctx.assay_kind,
        "assay_sd_stated": ctx.sd_stated,
        "out": str(out),
        "plots": {k: str(v) for k, v in plots.items()},
        "iterations": fit.njev,
        "evaluations": fit.nfev,
        "fitted_at": fitted_at,
        **ctx.source,
        **ctx.extra,
    }
    return doc


__all__ = [
    "JobContext",
    "JobWarning",
    "fit_document",
    "fixed_note",
    "held_notes",
    "kinetics_of",
    "lab_activity_sd_warning",
    "provenance",
]
