"""The fit job's text for people (the JSON document is the job's own)."""

from __future__ import annotations


def fit_text(doc: dict) -> str:
    def pm(v, se, fmt="{:.4g}"):
        return fmt.format(v) + ("" if se is None else " ± " + fmt.format(se))

    se = doc["stderr"]
    law = doc["rate_law"] + (
        f", order {pm(doc['order'], se['order'], '{:.3f}')}" if doc["rate_law"] == "power" else ""
    )
    if doc["ea_j_per_mol"] is None and doc.get("prior_kinetics"):
        ea = (
            f"not identifiable from these data (the file keeps the prior "
            f"{doc['ea_j_per_mol_written'] / 1e3:.1f} kJ/mol)"
        )
    elif doc["ea_j_per_mol"] is None:
        ea = "not identifiable from these data (no prior: k_ref applies at T_ref only)"
    else:
        ea = (
            pm(
                doc["ea_j_per_mol"] / 1e3,
                None if se["ea_j_per_mol"] is None else se["ea_j_per_mol"] / 1e3,
                "{:.2f}",
            )
            + " kJ/mol"
        )
    act = "-" if doc["activity_sd"] is None else f"{doc['activity_sd']:.3f}"
    lines = [
        f"fitted {law}",
        f"  k_ref        {pm(doc['k_ref'], se['k_ref'])} at T_ref {doc['t_ref_k']:.2f} K",
        f"  Ea           {ea}",
        f"  corr(ln k_ref, Ea) {doc['correlation'][0][1]:+.3f}; activity_sd {act}",
        f"  data         {doc['n_batches']} series, {doc['n_assays']} assays, "
        f"RMSE {doc['rmse']:.4g}, AIC {doc['aic']:.1f}",
        "  candidates   "
        + "; ".join(
            f"{c['label']}: "
            + ("failed" if c["aic"] is None else f"AIC {c['aic']:.1f} (Δ {c['delta_aic']:.1f})")
            for c in doc["candidates"]
        ),
    ]
    lines += [f"  warning      {w}" for w in doc["warnings"]]
    lines.append(
        f"  wrote        {doc['out']}, {doc['plots']['parity']}, {doc['plots']['residuals']}"
    )
    return "\n".join(lines)
