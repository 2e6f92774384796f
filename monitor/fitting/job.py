"""Fit kinetics from a recipe's plant history (`fit_recipe`) or from lab runs (`fit_lab_csv`).

Each job reads its data (`.sources`) and fits the chosen law (`.candidates`). When
that fit holds a value the data did not estimate and no prior supplies, it refuses
before anything is written (`refuse_unestimated`); else it compares the candidate
laws, writes the kinetics file with its ``[provenance]`` and the plots beside it
(`.plots`), and returns the ``fit`` document of INTERFACE.md (`.record`). It prints
nothing; progress goes to the caller's `FitProgress`.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from ..batch.kinetics import Kinetics
from ..config import Config, load_kinetics, write_kinetics
from ..errors import DataQualityError, KineticsError
from ..physics.lab_methods import fit_arrhenius, fit_differential, fit_integral
from ..physics.plant_fit import FitSeries, FixedSource, PlantFit, WarningKind, of_kind
from .candidates import FitRunner, choose_law, compare_candidates, fit_chosen, law_params
from .plots import ArrheniusPoint, plant_arrhenius_points, write_plots
from .progress import FitProgress
from .record import JobContext, fit_document, kinetics_of, lab_activity_sd_warning, provenance
from .sources import load_series, read_lab_csv, recipe_config

FIT_METHOD = (
    "weighted nonlinear least squares (scipy.optimize.least_squares, trf, analytic "
    "Jacobian) on the assays, each batch integrated along its own temperature trace "
    "by the reference-equivalent time; per-batch activity with a shrinkage prior"
)
LAB_METHOD = (
    "nonlinear least squares on the integrated rate law of each isothermal run, all "
    "runs at once (unweighted unless the CSV gives sd)"
)
#: Assays farther than this many robust sigmas from a plant fit are left out [-].
PLANT_OUTLIER_SIGMA = 4.0

#: What data would identify a parameter the fit could not (for the refusal message).
IDENTIFIED_BY = {
    "ea_j_per_mol": (
        "batches (or lab runs) held at two or more temperatures{span}, or a current "
        "kinetics file for the recipe, whose Ea is then kept and marked as fixed"
    ),
    "order": "assays at higher conversion, or a fixed order (--order N)",
    "theta_r": (
        "assays early in the batch while the reaction accelerates, or a current "
        "autocatalytic kinetics file with theta_r"
    ),
}


# ----------------------------------------------------------------------------- files
def next_free_name(path: str | Path) -> Path:
    """``k.toml`` -> ``k-v2.toml``; ``k-v2.toml`` -> ``k-v3.toml``; the first that is free."""
    p = Path(path)
    m = re.match(r"^(.*)-v(\d+)$", p.stem)
    stem, n = (m.group(1), int(m.group(2)) + 1) if m else (p.stem, 2)
    while True:
        cand = p.with_name(f"{stem}-v{n}{p.suffix}")
        if not cand.exists():
            return cand
        n += 1


def check_out(out: str | Path, force: bool) -> Path:
    """Refuse an existing output before any work is done (never overwrite silently)."""
    p = Path(out)
    if p.exists() and not force:
        raise KineticsError(
            f"file exists; write the new version as {next_free_name(p)} or pass "
            "--force to replace it",
            path=p,
        )
    return p


def portable_name(path: str | Path, base: str | Path | None) -> str:
    """``path`` relative to the folder ``base`` when inside it, else its file name.

    Files the job writes never hold an absolute path (they move between machines).
    """
    p = Path(path).resolve()
    if base is not None:
        try:
            return p.relative_to(Path(base).resolve()).as_posix()
        except ValueError:
            pass
    return p.name


# ----------------------------------------------------------------------------- the job
def refuse_unestimated(fit: PlantFit, out: Path) -> None:
    """Raise when the fit holds a parameter at a placeholder: nothing is written then.

    A parameter the data cannot identify is written only with a prior value to hold
    it at (and marked as fixed); without one the `KineticsError` (naming ``out`` and
    the parameter, exit 2) says which data would identify it.
    """
    missing = [p for p in fit.fixed.values() if p.source == FixedSource.PLACEHOLDER]
    if not missing:
        return
    spans = {
        w.data.get("parameter"): w.data.get("span_k")
        for w in of_kind(fit.warnings, WarningKind.UNIDENTIFIABLE)
    }
    parts = []
    for p in missing:
        span = spans.get(p.name)
        span_text = (
            f" (these assays' windows span only {span:.1f} K of effective temperature)"
            if span is not None
            else ""
        )
        parts.append(
            f"{p.name} cannot be identified from these data and there is no prior value "
            f"to hold it at; {IDENTIFIED_BY[p.name].format(span=span_text)} would identify it"
        )
    raise KineticsError("not written: " + "; ".join(parts), path=out, key=missing[0].name)


def _finish(
    fit: PlantFit,
    cands,
    ctx: JobContext,
    out: Path,
    force: bool,
    clock: Callable[[], datetime] | None,
) -> dict:
    """Write the kinetics file (its provenance), the plots, and return the document."""
    fitted_at = (
        (clock() if clock else datetime.now(UTC)).astimezone(UTC).isoformat(timespec="seconds")
    )
    prov = provenance(fit, cands, ctx, fitted_at)
    kin = kinetics_of(fit, ctx, prov)
    write_kinetics(kin, out, force=force)
    arrhenius = ctx.arrhenius if "ea_j_per_mol" not in fit.fixed else None
    plots = write_plots(
        fit,
        out,
        assay_kind=ctx.assay_kind,
        sd_stated=ctx.sd_stated,
        arrhenius=arrhenius,
        arrhenius_what=ctx.arrhenius_what,
        arrhenius_note=ctx.arrhenius_note,
    )
    return fit_document(fit, cands, kin, out, plots, ctx, fitted_at)


def _prior(path: Path | None) -> Kinetics | None:
    if path is None or not Path(path).exists():
        return None
    return load_kinetics(path)


def fit_recipe(
    cfg: Config,
    recipe: str,
    out: str | Path,
    *,
    batches: list[str] | None = None,
    law: str | None = None,
    order=None,
    force: bool = False,
    progress: FitProgress | None = None,
    clock: Callable[[], datetime] | None = None,
) -> dict:
    """Fit the recipe's kinetics from its complete batches; write ``out`` and the plots.

    ``law`` defaults to the recipe's current law, ``order`` (a number or ``"free"``)
    to the current order. Returns the INTERFACE.md ``fit`` document plus
    ``warnings``, ``findings``, ``correlation``, ``residuals_by_batch`` and ``plots``.
    Refuses (`KineticsError`, exit 2, nothing written) when a parameter cannot be
    identified and the recipe has no current kinetics to hold it at.
    """
    out = check_out(out, force)
    rc = recipe_config(cfg, recipe)
    prior = _prior(rc.kinetics)
    choice = choose_law(law, order, prior, rc.kinetics)
    law_params(choice.rate_law, prior, where=rc.kinetics)  # refuse a law it cannot fit early
    series, warnings = load_series(cfg, recipe, batches, progress)
    if not series:
        raise DataQualityError(f"recipe {recipe}: no batch with temperatures and assays")
    runner = FitRunner(series, prior, rc.kinetics, True, True, progress)
    fit = fit_chosen(runner, choice, outlier_sigma=PLANT_OUTLIER_SIGMA)
    refuse_unestimated(fit, out)  # before the candidates: nothing more to do then
    cands = compare_candidates(runner, choice, fit)
    base = Path(cfg.path).parent if getattr(cfg, "path", None) else None
    ctx = JobContext(
        choice=choice,
        prior=prior,
        prior_name=portable_name(rc.kinetics, base) if prior else None,
        source={"recipe": recipe, "batches": [s.name for s in series]},
        method=FIT_METHOD,
        assay_kind=rc.assay_kind,
        sd_stated=True,
        warnings=warnings,
        arrhenius=plant_arrhenius_points(fit),
    )
    doc = _finish(fit, cands, ctx, out, force, clock)
    doc["prior_kinetics"] = str(rc.kinetics) if prior else None
    return doc


def lab_methods(series: list[FitSeries], fit: PlantFit, order) -> tuple[list, dict | None]:
    """Each run's integral and differential fits, and the Arrhenius regression of the runs'
    integral-method rate constants at the joint order (with two or more temperatures)."""
    methods, k_at_order = [], []
    fixed_order = None if order == "free" else float(fit.order)
    for s in series:
        T = float(s.T_K[0])
        row = {"run": s.name, "T_K": T, "c_a0": s.c_a0, "n_points": len(s.assay_t_s)}
        t_all = np.concatenate([[0.0], s.assay_t_s])
        c_all = np.concatenate([[s.c_a0], s.assay_value])
        for key, fn, fn_args in (
            ("integral", fit_integral, (s.assay_t_s, s.assay_value, s.c_a0, fixed_order)),
            ("differential", fit_differential, (t_all, c_all)),
        ):
            try:
                r = fn(*fn_args)
                row[key] = {
                    "k": r.k,
                    "order": r.order,
                    "stderr_k": r.stderr_k,
                    "stderr_order": r.stderr_order,
                }
            except ValueError as exc:
                row[key] = {"note": str(exc)}
        if fit.rate_law == "power" and len(s.assay_t_s) >= 1:
            r = fit_integral(s.assay_t_s, s.assay_value, s.c_a0, fit.order)
            k_at_order.append((s.name, T, r.k, r.stderr_k))
        methods.append(row)
    arr = None
    if len({round(T, 2) for _, T, _, _ in k_at_order}) >= 2:
        a = fit_arrhenius([T for _, T, _, _ in k_at_order], [k for _, _, k, _ in k_at_order])
        arr = {
            "order": fit.order,
            "k_ref": a.k_ref,
            "t_ref_k": a.t_ref_k,
            "ea_j_per_mol": a.ea_j_per_mol,
            "stderr_ea_j_per_mol": a.stderr_ea_j_per_mol,
            "correlation_ln_k_ref_ea": a.correlation,
            "points": [{"run": n, "T_K": T, "k": k, "stderr_k": se} for n, T, k, se in k_at_order],
        }
    return methods, arr


def fit_lab_csv(
    path: str | Path,
    out: str | Path,
    *,
    prior: Kinetics | None = None,
    prior_path: Path | None = None,
    law: str | None = None,
    order=None,
    force: bool = False,
    recipe: str | None = None,
    progress: FitProgress | None = None,
    clock: Callable[[], datetime] | None = None,
) -> dict:
    """Fit kinetics to isothermal lab runs; also the classic per-run methods.

    The kinetics written are those of the joint fit of all runs (Ea when they span
    more than one temperature; with one temperature only the prior's Ea, marked as
    fixed, else nothing is written). ``lab_methods`` holds each run's integral and
    differential fits, and ``arrhenius`` the regression of the runs' integral-method
    rate constants at the joint order (with two or more temperatures).
    """
    out = check_out(out, force)
    series, sd_known = read_lab_csv(path)
    if law is None:
        law = prior.rate_law if prior is not None else "power"
    choice = choose_law(law, order, prior, prior_path)
    runner = FitRunner(series, prior, prior_path, False, sd_known, progress)
    fit = fit_chosen(runner, choice, outlier_sigma=None)
    refuse_unestimated(fit, out)
    cands = compare_candidates(runner, choice, fit)
    methods, arr = lab_methods(series, fit, choice.order)
    points = [
        ArrheniusPoint(p["run"], p["T_K"], p["k"], p["stderr_k"] / p["k"] if p["k"] else None)
        for p in (arr or {}).get("points", [])
    ]
    csv_path = Path(path)
    ctx = JobContext(
        choice=choice,
        prior=prior,
        prior_name=portable_name(prior_path, None) if prior is not None and prior_path else None,
        source={
            "recipe": recipe,
            "lab_csv": csv_path.name,
            "lab_csv_sha256": hashlib.sha256(csv_path.read_bytes()).hexdigest(),
            "runs": [s.name for s in series],
        },
        method=LAB_METHOD,
        assay_kind="concentration",
        sd_stated=sd_known,
        warnings=[lab_activity_sd_warning(prior)],
        extra={"lab_methods": methods, "arrhenius": arr},
        arrhenius=points,
        arrhenius_what="run: integral-method k at the joint order",
        arrhenius_note="Each point is one isothermal run's own integral-method fit; the "
        "line is the joint fit of all runs.",
    )
    doc = _finish(fit, cands, ctx, out, force, clock)
    doc["prior_kinetics"] = str(prior_path) if prior_path else None
    return doc


__all__ = [
    "FIT_METHOD",
    "LAB_METHOD",
    "JobContext",
    "check_out",
    "fit_lab_csv",
    "fit_recipe",
    "lab_methods",
    "next_free_name",
    "portable_name",
    "refuse_unestimated",
]
