"""Fit kinetics from a recipe's plant history, or from isothermal lab data.

Service level: reads the historian through the reader, runs the fits of
`monitor.physics.fitting` and `monitor.physics.lab_kinetics`, writes the kinetics
file (with its ``[provenance]``) and two PNG plots beside it, and returns the ``fit``
document of INTERFACE.md. It prints nothing; progress goes to an optional object with
the methods ``loading(done, total, name)``, ``iteration(n)`` and ``stage(text)``.
"""

from __future__ import annotations

import csv
import math
import re
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .. import __version__
from ..batch.kinetics import Kinetics
from ..config import Config, load_kinetics, write_kinetics
from ..errors import ConfigError, DataQualityError, KineticsError, UsageError
from ..historian.reader import HistorianReader
from ..physics.lab_methods import fit_arrhenius, fit_differential, fit_integral
from ..physics.plant_fit import FitSeries, PlantFit, excluded_mask, fit_batches
from ..units import to_kelvin

FIT_METHOD = (
    "weighted nonlinear least squares (scipy.optimize.least_squares, trf, analytic "
    "Jacobian) on the assays, each batch integrated along its own temperature trace "
    "by the reference-equivalent time; per-batch activity with a shrinkage prior"
)
LAB_METHOD = (
    "nonlinear least squares on the integrated rate law of each isothermal run, all "
    "runs at once (unweighted unless the CSV gives sd)"
)


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


def _check_out(out: str | Path, force: bool) -> Path:
    """Refuse an existing output before any work is done (never overwrite silently)."""
    p = Path(out)
    if p.exists() and not force:
        raise KineticsError(
            f"file exists; write the new version as {next_free_name(p)} or pass "
            "--force to replace it",
            path=p,
        )
    return p


def plot_paths(out: str | Path) -> dict[str, Path]:
    p = Path(out)
    return {
        "parity": p.with_name(f"{p.stem}_parity.png"),
        "residuals": p.with_name(f"{p.stem}_residuals.png"),
    }


# ----------------------------------------------------------------------------- plant
def _select_batches(reader, recipe: str, wanted: list[str] | None):
    found, problems = reader.batches(recipe=recipe)
    warnings = [f"event problem: {p.message}" for p in problems]
    if wanted:
        by_id = {b.batch: b for b in found}
        missing = [w for w in wanted if w not in by_id]
        if missing:
            raise UsageError(f"--batches: not batches of recipe {recipe}: {', '.join(missing)}")
        running = [w for w in wanted if by_id[w].end_s is None]
        if running:
            raise UsageError(
                f"--batches: still running (only complete batches are fitted): {', '.join(running)}"
            )
        return [by_id[w] for w in wanted], warnings
    chosen = [b for b in found if b.end_s is not None]
    if not chosen:
        raise DataQualityError(f"recipe {recipe}: no complete batches in the export")
    return chosen, warnings


def load_series(
    cfg: Config, recipe: str, batches: list[str] | None = None, progress=None
) -> tuple[list[FitSeries], list[str]]:
    """The recipe's complete batches (or ``batches``) as fit series, and load warnings."""
    rc = cfg.recipe(recipe)
    if rc is None:
        raise ConfigError(
            f"recipe {recipe!r} has no [recipes.{recipe}] table",
            path=cfg.path,
            key=f"recipes.{recipe}",
        )
    reader = HistorianReader(cfg)
    series, excluded = [], {}
    try:
        chosen, warnings = _select_batches(reader, recipe, batches)
        for i, b in enumerate(chosen):
            data = reader.read_batch(b)
            if progress is not None:
                progress.loading(i + 1, len(chosen), b.batch)
            for row in data.quality.as_rows():
                excluded[(row["tag"], row["reason"])] = (
                    excluded.get((row["tag"], row["reason"]), 0) + row["count"]
                )
            c_a0 = (
                data.charge
                if data.charge is not None and data.charge > 0
                else rc.initial_concentration
            )
            if c_a0 is None:
                raise DataQualityError(
                    f"batch {b.batch}: no charge sample and no "
                    f"recipes.{recipe}.initial_concentration"
                )
            if len(data.temperature) < 2 or not len(data.assays):
                warnings.append(
                    f"{b.batch}: {len(data.temperature)} temperature samples and "
                    f"{len(data.assays)} assays; left out"
                )
                continue
            series.append(
                FitSeries(
                    b.batch,
                    data.temperature.t_s,
                    data.temperature.value,
                    float(c_a0),
                    data.assays.t_s,
                    data.assays.value,
                    rc.assay_kind,
                    rc.assay_sd,
                    start_s=b.start_s,
                )
            )
    finally:
        reader.close()
    if excluded:
        warnings.append(
            "excluded samples: "
            + ", ".join(f"{t} {r} ×{n}" for (t, r), n in sorted(excluded.items()))
        )
    return series, warnings


def _prior(path: Path | None) -> Kinetics | None:
    if path is None or not Path(path).exists():
        return None
    return load_kinetics(path)


def _law_params(law: str, prior: Kinetics | None, *, where) -> dict:
    same = prior is not None and prior.rate_law == law
    params = {"epsilon": prior.epsilon if prior is not None else 0.0}
    if law == "bimolecular":
        if not same or prior.theta_b is None:
            raise ConfigError(
                "the bimolecular law needs theta_b (and b) from the recipe's current kinetics file",
                path=where,
                key="theta_b",
            )
        params.update(theta_b=prior.theta_b, b=prior.b)
    elif law == "autocatalytic":
        theta_r = prior.theta_r if same and prior.theta_r > 0 else 0.01
        params.update(theta_r=theta_r)
    elif law == "reversible":
        raise UsageError(
            "--law reversible: the reversible law is not separable and cannot be "
            "fitted by this command yet (fit power, bimolecular or autocatalytic)"
        )
    return params


def _parse_order(order) -> float | str | None:
    if order is None or isinstance(order, float | int):
        return None if order is None else float(order)
    text = str(order).strip().lower()
    if text == "free":
        return "free"
    try:
        value = float(text)
    except ValueError:
        raise UsageError(f"--order: expected a number or 'free', got {order!r}") from None
    if not 0 <= value <= 5:
        raise UsageError(f"--order: expected an order between 0 and 5, got {value:g}")
    return value


def _candidates(prior: Kinetics | None) -> list[tuple[str, float | str]]:
    out: list[tuple[str, float | str]] = [("power", 1.0), ("power", 2.0), ("power", "free")]
    if prior is not None and prior.theta_b is not None:
        out.append(("bimolecular", 2.0))
    if prior is not None and prior.theta_r > 0:
        out.append(("autocatalytic", 2.0))
    return out


def _run_fits(
    series, law, order, prior, *, where, per_batch_activity, sd_known, outlier_sigma, progress
) -> tuple[PlantFit, list[dict]]:
    """The chosen fit, then every candidate law on the same assays (for AIC/BIC).

    Candidates are fitted at the activity spread the chosen fit found (no EM of their
    own), so their AIC/BIC compare the laws on equal terms and cost one fit each.
    """

    def on_iteration(n):
        if progress is not None:
            progress.iteration(n)

    def one(law_, order_, exclude=None, outliers=outlier_sigma, tau=None):
        params = _law_params(law_, prior, where=where)
        ea_prior = prior.ea_j_per_mol if prior is not None else None
        order_prior = prior.order if prior is not None and prior.rate_law == "power" else None
        return fit_batches(
            series,
            law_,
            order_,
            law_params=params,
            per_batch_activity=per_batch_activity,
            ea_prior_j_per_mol=ea_prior,
            order_prior=order_prior,
            activity_sd_start=tau or (prior.activity_sd if prior else 0.05),
            fit_activity_sd=tau is None,
            free_law_params=("theta_r",) if law_ == "autocatalytic" else (),
            outlier_sigma=outliers,
            exclude=exclude,
            sd_known=sd_known,
            on_iteration=on_iteration,
        )

    if progress is not None:
        progress.stage(f"fitting {law}" + (f", order {order}" if law == "power" else ""))
    try:
        main = one(law, order)
    except ValueError as exc:
        raise DataQualityError(f"the fit failed: {exc}") from None
    mask = excluded_mask(main)
    cands = []
    for law_c, order_c in dict.fromkeys(_candidates(prior) + [(law, order)]):
        label = law_c + (f" n={order_c}" if law_c == "power" else "")
        if (law_c, order_c) == (law, order):
            fit = main
        else:
            if progress is not None:
                progress.stage(f"candidate {label}")
            try:
                fit = one(law_c, order_c, exclude=mask, outliers=None, tau=main.activity_sd)
            except (ValueError, ConfigError) as exc:
                cands.append(
                    {
                        "rate_law": law_c,
                        "order": order_c,
                        "label": label,
                        "aic": None,
                        "bic": None,
                        "rmse": None,
                        "n_params": None,
                        "chosen": False,
                        "note": str(exc),
                    }
                )
                continue
        cands.append(
            {
                "rate_law": law_c,
                "order": fit.order if order_c == "free" else order_c,
                "order_free": order_c == "free",
                "label": label,
                "aic": fit.aic,
                "bic": fit.bic,
                "rmse": fit.rmse,
                "n_params": fit.n_params,
                "chosen": fit is main,
                "note": "; ".join(w for w in fit.warnings if "identified" in w),
            }
        )
    best = min((c for c in cands if c["aic"] is not None), key=lambda c: c["aic"], default=None)
    for c in cands:
        c["delta_aic"] = None if c["aic"] is None or best is None else c["aic"] - best["aic"]
    return main, cands


def _kinetics(fit: PlantFit, prior: Kinetics | None, provenance: dict) -> Kinetics:
    se = fit.stderr
    ea = fit.ea_j_per_mol
    se_ea = se["ea_j_per_mol"]
    if "ea_j_per_mol" in fit.fixed:  # kept at the prior: so is its uncertainty
        ea = prior.ea_j_per_mol if prior is not None else 0.0
        se_ea = prior.stderr_ea_j_per_mol if prior is not None else 0.0
    lp = fit.law_params
    return Kinetics(
        rate_law=fit.rate_law,
        k_ref=fit.k_ref,
        t_ref_k=fit.t_ref_k,
        ea_j_per_mol=float(ea),
        order=fit.order,
        activity_sd=fit.activity_sd
        if fit.activity_sd is not None
        else (prior.activity_sd if prior else 0.05),
        theta_b=lp.get("theta_b"),
        b=lp.get("b", 1.0),
        theta_r=lp.get("theta_r", 0.0),
        epsilon=lp.get("epsilon", 0.0),
        stderr_k_ref=se["k_ref"] or 0.0,
        stderr_ea_j_per_mol=se_ea or 0.0,
        stderr_order=se["order"] or 0.0,
        correlation=tuple(tuple(float(v) for v in row) for row in fit.correlation),
        provenance=provenance,
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


def _document(
    fit: PlantFit,
    cands: list[dict],
    kin: Kinetics,
    out: Path,
    plots: dict,
    warnings: list[str],
    extra: dict,
) -> dict:
    se = fit.stderr
    ea_known = "ea_j_per_mol" not in fit.fixed
    by_batch = []
    for r in fit.residuals:
        used = r["used"]
        res = r["residual"][used]
        by_batch.append(
            {
                "batch": r["name"],
                "n_assays": int(used.sum()),
                "activity": fit.activity.get(r["name"]),
                "rmse": float(np.sqrt(np.mean(res**2))) if len(res) else None,
                "max_abs_sigma": float(np.max(np.abs(r["sigma"][used]))) if len(res) else None,
                "residuals": [float(v) for v in r["residual"]],
                "t_s": [float(v) for v in r["t_s"]],
                "used": [bool(v) for v in used],
            }
        )
    doc = {
        "rate_law": fit.rate_law,
        "order": fit.order,
        "k_ref": fit.k_ref,
        "t_ref_k": fit.t_ref_k,
        "ea_j_per_mol": fit.ea_j_per_mol if ea_known else None,
        "stderr": {"k_ref": se["k_ref"], "ea_j_per_mol": se["ea_j_per_mol"], "order": se["order"]},
        "activity_sd": fit.activity_sd,
        "n_batches": fit.n_series,
        "n_assays": fit.n_assays,
        "rmse": fit.rmse,
        "aic": fit.aic,
        "candidates": cands,
        "bic": fit.bic,
        "reduced_chi2": fit.s2,
        "dof": fit.dof,
        "ci95": {k: list(v) for k, v in fit.ci95.items() if v is not None},
        "correlation": [[float(v) for v in row] for row in fit.correlation],
        "correlation_params": ["ln_k_ref", "ea_j_per_mol", "order"],
        "fixed": fit.fixed,
        "law_params": fit.law_params,
        "t_ref_choice": fit.t_ref_note,
        "ea_j_per_mol_written": kin.ea_j_per_mol,
        "warnings": warnings,
        "excluded_assays": [
            {"batch": b, "t_s": t, "value": v, "sigma": s} for b, t, v, s in fit.excluded
        ],
        "residuals_by_batch": by_batch,
        "out": str(out),
        "plots": {k: str(v) for k, v in plots.items()},
        "iterations": fit.njev,
        "evaluations": fit.nfev,
    }
    doc.update(extra)
    return doc


def _provenance(
    fit: PlantFit, cands, warnings, source: dict, fitted_at: str, prior_path, method: str
) -> dict:
    return _toml_safe(
        {
            **source,
            "method": method,
            "fitted_at": fitted_at,
            "software": f"convmon {__version__}",
            "n_batches": fit.n_series,
            "n_assays": fit.n_assays,
            "rmse": fit.rmse,
            "aic": fit.aic,
            "bic": fit.bic,
            "reduced_chi2": fit.s2,
            "dof": fit.dof,
            "t_ref_choice": fit.t_ref_note,
            "correlation_ln_k_ref_ea": fit.correlation_ln_k_ea,
            "prior_kinetics": str(prior_path) if prior_path else None,
            "fixed": {
                k: (f"{v}: kept at the prior kinetics' value" if v == "unidentifiable" else v)
                for k, v in fit.fixed.items()
            }
            or None,
            "excluded_assays": [
                f"{b} at {t / 60:.0f} min: {v:g} ({s:+.1f} sigma)" for b, t, v, s in fit.excluded
            ],
            "warnings": warnings,
            "candidates": [
                {k: c[k] for k in ("label", "aic", "bic", "rmse") if c[k] is not None}
                for c in cands
            ],
        }
    )


def _finish(
    fit,
    cands,
    prior,
    prior_path,
    out: Path,
    force: bool,
    warnings,
    source: dict,
    method: str,
    clock,
    extra: dict | None = None,
) -> dict:
    fitted_at = (
        (clock() if clock else datetime.now(UTC)).astimezone(UTC).isoformat(timespec="seconds")
    )
    warnings = list(warnings) + list(fit.warnings)
    prov = _provenance(fit, cands, warnings, source, fitted_at, prior_path, method)
    kin = _kinetics(fit, prior, prov)
    write_kinetics(kin, out, force=force)
    plots = write_plots(fit, out)
    return _document(
        fit,
        cands,
        kin,
        out,
        plots,
        warnings,
        {
            "fitted_at": fitted_at,
            **source,
            **(extra or {}),
            "prior_kinetics": str(prior_path) if prior_path else None,
        },
    )


def fit_recipe(
    cfg: Config,
    recipe: str,
    out: str | Path,
    *,
    batches: list[str] | None = None,
    law: str | None = None,
    order=None,
    force: bool = False,
    progress=None,
    clock: Callable[[], datetime] | None = None,
) -> dict:
    """Fit the recipe's kinetics from its complete batches; write ``out`` and the plots.

    ``law`` defaults to the recipe's current law, ``order`` (a number or ``"free"``)
    to the current order. Returns the INTERFACE.md ``fit`` document plus
    ``warnings``, ``correlation``, ``residuals_by_batch`` and ``plots``.
    """
    out = _check_out(out, force)
    rc = cfg.recipe(recipe)
    if rc is None:
        raise ConfigError(
            f"recipe {recipe!r} has no [recipes.{recipe}] table",
            path=cfg.path,
            key=f"recipes.{recipe}",
        )
    prior = _prior(rc.kinetics)
    law, order = _law_and_order(law, order, prior, rc.kinetics)
    _law_params(law, prior, where=rc.kinetics)  # refuse a law it cannot fit before loading
    series, warnings = load_series(cfg, recipe, batches, progress)
    if not series:
        raise DataQualityError(f"recipe {recipe}: no batch with temperatures and assays")
    fit, cands = _run_fits(
        series,
        law,
        order,
        prior,
        where=rc.kinetics,
        per_batch_activity=True,
        sd_known=True,
        outlier_sigma=4.0,
        progress=progress,
    )
    source = {"recipe": recipe, "batches": [s.name for s in series]}
    return _finish(
        fit,
        cands,
        prior,
        rc.kinetics if prior else None,
        out,
        force,
        warnings,
        source,
        FIT_METHOD,
        clock,
    )


def _law_and_order(law, order, prior, where):
    if law is None:
        if prior is None:
            raise UsageError(f"no current kinetics file ({where}): give --law")
        law = prior.rate_law
    order = _parse_order(order)
    if order is None:
        order = prior.order if prior is not None and prior.rate_law == "power" else 1.0
    if law != "power":
        order = 2.0
    return law, order


# ----------------------------------------------------------------------------- lab data
_TIME = {"time_s": 1.0, "time_min": 60.0, "time_h": 3600.0}
_TEMP = {"T_K": "K", "T_degC": "degC", "T_degF": "degF"}


def read_lab_csv(path: str | Path) -> tuple[list[FitSeries], bool]:
    """Isothermal runs from a CSV: one series per ``run`` (or per temperature).

    Columns: one of ``time_s``/``time_min``/``time_h``; one of ``T_K``/``T_degC``/
    ``T_degF``; ``c_a`` [mol/L]; optional ``run``, ``sd`` [mol/L] and ``c_a0``
    [mol/L]. Without ``c_a0`` each run needs a row at time 0, which then defines
    ``C_A0`` and is not a residual. Lines starting with ``#`` are comments.
    Returns the series and whether the CSV states assay errors (an ``sd`` column;
    without it the fit is unweighted and the errors come from the scatter).
    """
    p = Path(path)
    try:
        lines = [
            ln
            for ln in p.read_text(encoding="utf-8").splitlines()
            if ln.strip() and not ln.lstrip().startswith("#")
        ]
    except FileNotFoundError:
        raise UsageError(f"{p}: lab CSV not found") from None
    rows = list(csv.DictReader(lines))
    if not rows:
        raise UsageError(f"{p}: no data rows")
    cols = set(rows[0])
    tcol = next((c for c in _TIME if c in cols), None)
    Tcol = next((c for c in _TEMP if c in cols), None)
    if tcol is None or Tcol is None or "c_a" not in cols:
        raise UsageError(
            f"{p}: expected columns time_s|time_min|time_h, T_K|T_degC|T_degF and "
            f"c_a; found {', '.join(sorted(cols))}"
        )
    groups: dict[str, list] = {}
    for i, r in enumerate(rows, start=2):
        try:
            t = float(r[tcol]) * _TIME[tcol]
            T = float(to_kelvin(float(r[Tcol]), _TEMP[Tcol]))
            c = float(r["c_a"])
            sd = float(r["sd"]) if r.get("sd") not in (None, "") else None
            c0 = float(r["c_a0"]) if r.get("c_a0") not in (None, "") else None
        except (TypeError, ValueError):
            raise UsageError(f"{p}: data row {i - 1}: expected numbers, got {r}") from None
        key = r.get("run") or f"{T:.2f} K"
        groups.setdefault(key, []).append((t, T, c, sd, c0))
    series = []
    for key, g in groups.items():
        a = np.array([(t, T, c) for t, T, c, _, _ in g])
        order = np.argsort(a[:, 0], kind="stable")
        a = a[order]
        sds = np.array([g[j][3] if g[j][3] is not None else 1.0 for j in order])
        c0 = next((v[4] for v in g if v[4] is not None), None)
        assays = np.ones(len(a), bool)
        if c0 is None:
            at0 = a[:, 0] == 0
            if not at0.any():
                raise UsageError(f"{p}: run {key}: no row at time 0 and no c_a0 column")
            c0 = float(np.mean(a[at0, 2]))
            assays = ~at0
        T_run = float(np.mean(a[:, 1]))
        if np.ptp(a[:, 1]) > 0.5:
            raise UsageError(
                f"{p}: run {key}: temperature varies by {np.ptp(a[:, 1]):.1f} K; "
                "a lab run must be isothermal (give each temperature its own run)"
            )
        t_end = max(float(a[:, 0].max()), 1.0)
        series.append(
            FitSeries(
                key,
                np.array([0.0, t_end]),
                np.array([T_run, T_run]),
                c0,
                a[assays, 0],
                a[assays, 2],
                "concentration",
                sds[assays],
                start_s=0.0,
            )
        )
    return series, "sd" in cols


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
    progress=None,
    clock: Callable[[], datetime] | None = None,
) -> dict:
    """Fit kinetics to isothermal lab runs; also the classic per-run methods.

    The kinetics written are those of the joint fit of all runs (Ea when they span
    more than one temperature). ``lab_methods`` holds each run's integral and
    differential fits, and ``arrhenius`` the regression of the runs' integral-method
    rate constants at the joint order (with two or more temperatures).
    """
    out = _check_out(out, force)
    series, sd_known = read_lab_csv(path)
    if law is None:
        law = prior.rate_law if prior is not None else "power"
    law, order = _law_and_order(law, order, prior, prior_path)
    fit, cands = _run_fits(
        series,
        law,
        order,
        prior,
        where=prior_path,
        per_batch_activity=False,
        sd_known=sd_known,
        outlier_sigma=None,
        progress=progress,
    )
    methods = []
    k_at_order = []
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
            k_at_order.append((T, fit_integral(s.assay_t_s, s.assay_value, s.c_a0, fit.order).k))
        methods.append(row)
    arr = None
    temps = sorted({round(T, 2) for T, _ in k_at_order})
    if len(temps) >= 2:
        a = fit_arrhenius([T for T, _ in k_at_order], [k for _, k in k_at_order])
        arr = {
            "order": fit.order,
            "k_ref": a.k_ref,
            "t_ref_k": a.t_ref_k,
            "ea_j_per_mol": a.ea_j_per_mol,
            "stderr_ea_j_per_mol": a.stderr_ea_j_per_mol,
            "correlation_ln_k_ref_ea": a.correlation,
        }
    source = {
        "recipe": recipe,
        "lab_csv": str(Path(path).resolve()),
        "runs": [s.name for s in series],
    }
    notes = [
        f"activity_sd {'kept from the prior kinetics' if prior else 'set to 0.05'}: lab "
        "runs say nothing about the batch-to-batch spread at the plant"
    ]
    return _finish(
        fit,
        cands,
        prior,
        prior_path,
        out,
        force,
        notes,
        source,
        LAB_METHOD,
        clock,
        {"lab_methods": methods, "arrhenius": arr},
    )


# ----------------------------------------------------------------------------- plots
def write_plots(fit: PlantFit, out: str | Path) -> dict[str, Path]:
    """Parity (observed vs predicted) and residual-vs-time plots beside ``out`` (PNG)."""
    paths = plot_paths(out)
    cat = np.concatenate
    rs = fit.residuals
    obs, pred = cat([r["observed"] for r in rs]), cat([r["predicted"] for r in rs])
    res, t_h = cat([r["residual"] for r in rs]), cat([r["t_s"] for r in rs]) / 3600.0
    used = cat([r["used"] for r in rs])
    series = cat([np.full(len(r["t_s"]), i) for i, r in enumerate(rs)])
    color = dict(c=series[used], cmap="viridis", vmin=0, vmax=max(len(rs) - 1, 1), s=14, alpha=0.8)
    left_out = dict(s=40, marker="x", color="red", label="left out (outlier)")

    def points(ax, x, y, legend_loc: str) -> None:
        """Used assays coloured by series; outliers left out of the fit as red crosses."""
        ax.scatter(x[used], y[used], **color)
        if (~used).any():
            ax.scatter(x[~used], y[~used], **left_out)
            ax.legend(loc=legend_loc)

    fig = Figure(figsize=(6.0, 6.0), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    points(ax, pred, obs, "upper left")
    lo, hi = float(min(obs.min(), pred.min())), float(max(obs.max(), pred.max()))
    ax.plot([lo, hi], [lo, hi], color="black", lw=1)
    ax.set_xlabel("predicted assay")
    ax.set_ylabel("observed assay")
    ax.set_title(
        f"{fit.rate_law} law: {fit.n_assays} assays, {fit.n_series} series, "
        f"RMSE {fit.rmse:.3g} (colour: series)",
        fontsize=10,
    )
    fig.tight_layout()
    fig.savefig(paths["parity"])

    fig = Figure(figsize=(8.0, 4.5), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    points(ax, t_h, res, "upper right")
    ax.axhline(0.0, color="black", lw=1)
    ax.set_xlabel("time since batch start [h]")
    ax.set_ylabel("observed - predicted [assay units]")
    ax.set_title("residuals against time (colour: series)", fontsize=10)
    fig.tight_layout()
    fig.savefig(paths["residuals"])
    return paths


__all__ = [
    "fit_lab_csv",
    "fit_recipe",
    "load_series",
    "next_free_name",
    "read_lab_csv",
    "write_plots",
]
