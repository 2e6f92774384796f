"""The fit job's text for people (the JSON document is the job's own).

What an engineer needs to defend a fit: the estimates with their units and standard
errors, what was held fixed and where its value came from, the candidate laws by
AIC *and* BIC, each batch's activity and fit, the assays left out, and the files.
"""

from __future__ import annotations

import math

ZERO_C_K = 273.15


def _pm(v, se, fmt="{:.4g}") -> str:
    return fmt.format(v) + ("" if se is None else " ± " + fmt.format(se))


def _num(v, fmt: str, none: str = "-") -> str:
    return none if v is None or (isinstance(v, float) and not math.isfinite(v)) else fmt.format(v)


def _assay_unit(doc: dict) -> str:
    """The unit of assays and residuals: mol/L, or conversion's (shown as ``X``)."""
    return "mol/L" if doc.get("assay_kind", "concentration") == "concentration" else "X"


def _ea_text(doc: dict) -> str:
    se = doc["stderr"]["ea_j_per_mol"]
    if doc["ea_j_per_mol"] is not None:
        return (
            _pm(doc["ea_j_per_mol"] / 1e3, None if se is None else se / 1e3, "{:.2f}") + " kJ/mol"
        )
    held = doc.get("fixed", {}).get("ea_j_per_mol")
    if held is not None and held.get("source") == "prior":
        return (
            f"not identifiable from these data; written as fixed at the prior "
            f"{doc['ea_j_per_mol_written'] / 1e3:.1f} kJ/mol (see fixed)"
        )
    return "not identifiable from these data (not written)"


def _header(doc: dict) -> list[str]:
    se = doc["stderr"]
    law = doc["rate_law"] + (
        f", order {_pm(doc['order'], se['order'], '{:.3f}')}" if doc["rate_law"] == "power" else ""
    )
    act = "-" if doc["activity_sd"] is None else f"{doc['activity_sd']:.3f}"
    unit = _assay_unit(doc)
    t_ref = doc["t_ref_k"]
    lines = [
        f"fitted {law}",
        f"  k_ref        {_pm(doc['k_ref'], se['k_ref'])} {doc.get('k_ref_unit', '')} "
        f"at T_ref {t_ref:.2f} K ({t_ref - ZERO_C_K:.2f} °C)",
        f"  Ea           {_ea_text(doc)}",
        f"  corr(ln k_ref, Ea) {doc['correlation'][0][1]:+.3f}; activity_sd {act}",
        f"  data         {doc['n_batches']} series, {doc['n_assays']} assays, "
        f"RMSE {doc['rmse']:.4g} {unit}, reduced chi-square "
        f"{_num(doc.get('reduced_chi2'), '{:.3g}')} (dof {doc.get('dof', '-')})",
    ]
    lines += [f"  fixed        {k}: {v['note']}" for k, v in doc.get("fixed", {}).items()]
    lines += [f"  held         {k}: {v}" for k, v in doc.get("held", {}).items()]
    return lines


def _candidates(doc: dict) -> list[str]:
    rows = [
        "candidate laws (same assays; Δ from the best; * the law written)",
        f"  {'law':<22} {'params':>6} {'RMSE':>9} {'AIC':>9} {'ΔAIC':>7} {'BIC':>9} {'ΔBIC':>7}",
    ]
    for c in doc["candidates"]:
        label = c["label"] + (" *" if c.get("chosen") else "")
        if c["aic"] is None:
            rows.append(f"  {label:<22} failed: {c.get('note', '')}")
            continue
        rows.append(
            f"  {label:<22} {_num(c.get('n_params'), '{:d}'):>6} {_num(c['rmse'], '{:.4g}'):>9} "
            f"{c['aic']:>9.1f} {_num(c.get('delta_aic'), '{:.1f}'):>7} "
            f"{_num(c.get('bic'), '{:.1f}'):>9} {_num(c.get('delta_bic'), '{:.1f}'):>7}"
        )
        if c.get("note") and c["note"] not in doc["warnings"]:  # said once, below
            rows.append(f"  {'':<22} note: {c['note']}")
    return rows


def _batches(doc: dict) -> list[str]:
    unit = _assay_unit(doc)
    rows = [
        "per batch (activity: the batch's rate relative to the fitted kinetics)",
        f"  {'batch':<16} {'T_eff °C':>8} {'activity':>8} {'± s.e.':>7} {'assays':>6} "
        f"{'RMSE ' + unit:>12} {'max |σ|':>7}",
    ]
    for b in doc["residuals_by_batch"]:
        T = b.get("temperature_k")
        se_ln = b.get("activity_stderr_ln")
        act = b.get("activity")
        se_act = None if se_ln is None or act is None else act * se_ln
        rows.append(
            f"  {b['batch']:<16} {_num(None if T is None else T - ZERO_C_K, '{:.1f}'):>8} "
            f"{_num(act, '{:.3f}'):>8} {_num(se_act, '{:.3f}'):>7} {b['n_assays']:>6} "
            f"{_num(b.get('rmse'), '{:.4g}'):>12} {_num(b.get('max_abs_sigma'), '{:.1f}'):>7}"
        )
    return rows


def fit_text(doc: dict) -> str:
    """The ``fit`` document as text for people (what ``convmon fit`` prints)."""
    unit = _assay_unit(doc)
    lines = _header(doc) + [""] + _candidates(doc) + [""] + _batches(doc)
    if doc.get("excluded_assays"):
        lines += ["", "assays left out of the fit (listed, never silently dropped)"]
        lines += [
            f"  {e['batch']} at {e['t_s'] / 3600:.2f} h after start: {e['value']:g} {unit} "
            f"({e['sigma']:+.1f} σ)"
            for e in doc["excluded_assays"]
        ]
    if doc["warnings"]:
        lines += ["", "warnings"] + [f"  {w}" for w in doc["warnings"]]
    plots = ", ".join(str(p) for p in doc["plots"].values())
    lines += ["", f"wrote {doc['out']}", f"      {plots}"]
    return "\n".join(lines)
