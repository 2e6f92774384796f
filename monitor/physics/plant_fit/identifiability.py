"""Identifiability: what the data cannot pin is held fixed, said, and fitted around.

After a first solve, a parameter whose standard error is too large for the data to
determine it (`UNIDENTIFIABLE_REL_SE_EA`, `UNIDENTIFIABLE_SE_SHAPE`) is held at its
prior, or without one at a placeholder that is never reported as an estimate
(`FixedSource`); a `WarningKind.UNIDENTIFIABLE` warning says which data would
identify it, and the remaining parameters are fitted again.
"""

from __future__ import annotations

import math

import numpy as np

from .diagnostics import FitWarning, FixedParameter, FixedSource, WarningKind
from .model import EA_SCALE, SHAPE_PARAMETERS, Spec
from .result import covariance

#: Identifiability: a parameter whose standard error exceeds this fraction of its
#: value (Ea) or this absolute size (order, ln theta_r) is taken as not determined
#: by the data and held fixed (common practice: a 95 % interval that spans zero or a
#: whole unit of order says the data do not pin it).
UNIDENTIFIABLE_REL_SE_EA = 0.5
UNIDENTIFIABLE_SE_SHAPE = 0.5
#: Ea at which T_ref is first placed (and windows are weighed) when no prior is given [J/mol].
EA_NOMINAL_J_PER_MOL = 60e3


def _hold_ea(prob, spec: Spec, cov, factor, ea, ea_prior) -> tuple[FixedParameter, float] | None:
    """Ea held fixed, and the span of effective temperatures [K], when the data cannot
    identify it (None: they can)."""
    se_ea = math.sqrt(cov[1, 1]) * EA_SCALE if np.isfinite(cov[1, 1]) else math.inf
    if np.isfinite(factor) and se_ea <= UNIDENTIFIABLE_REL_SE_EA * abs(ea):
        return None
    nominal = ea_prior if ea_prior is not None else EA_NOMINAL_J_PER_MOL
    t_eff = prob.effective_temperatures(ea if np.isfinite(ea) else nominal, spec.t_ref_k)
    span = float(np.nanmax(t_eff) - np.nanmin(t_eff)) if np.isfinite(t_eff).any() else 0.0
    source = FixedSource.PRIOR if ea_prior is not None else FixedSource.PLACEHOLDER
    value = float(ea_prior) if ea_prior is not None else 0.0  # 0: Theta is plain time
    return FixedParameter("ea_j_per_mol", value, source, se_ea), span


def hold_unidentifiable(prob, spec, model, x, active, solver, warnings, priors):
    """Hold what the data cannot pin at its prior (or a placeholder) and solve again.

    ``priors``: parameter name -> (prior or None, placeholder).
    """
    cov, factor, _ = covariance(model, active, solver.sd_known)
    lnk, ea, shape, phis = model.unpack(x)
    names = spec.names(prob.n_series)
    fixed: dict[str, FixedParameter] = {}
    if spec.ea_free:
        held = _hold_ea(prob, spec, cov, factor, ea, priors["ea_j_per_mol"][0])
        if held is not None:
            fixed["ea_j_per_mol"], span = held
            warnings.append(_ea_warning(fixed["ea_j_per_mol"], span))
            spec.ea_free = False
            spec.ea_fixed_j = fixed["ea_j_per_mol"].value
    for name in list(spec.shape_free):
        j = names.index(name)
        se = math.sqrt(cov[j, j]) if np.isfinite(cov[j, j]) else math.inf
        if np.isfinite(factor) and se <= UNIDENTIFIABLE_SE_SHAPE:
            continue
        key = SHAPE_PARAMETERS[spec.rate_law][name][0]
        prior, placeholder = priors[key]
        source = FixedSource.PRIOR if prior is not None else FixedSource.PLACEHOLDER
        value = float(prior if prior is not None else placeholder)
        fixed[key] = FixedParameter(key, value, source, se)
        warnings.append(_shape_warning(fixed[key]))
        spec.shape_free.remove(name)
        spec.law_fixed[key] = fixed[key].value
    if not fixed:
        return model, x, fixed
    x0 = spec.vector(
        lnk,
        spec.ea_fixed_j if not spec.ea_free else ea,
        {k: v for k, v in shape.items() if k in spec.shape_free},
        phis,
    )
    model, x = solver.solve(spec, x0)
    return model, x, fixed


def _ea_warning(held: FixedParameter, span_k: float) -> FitWarning:
    se = held.standard_error
    size = f"±{se / 1e3:.0f} kJ/mol" if np.isfinite(se) else "unbounded"
    if held.source == FixedSource.PRIOR:
        fixed_at = f"fixed at the prior {held.value / 1e3:.1f} kJ/mol"
    else:
        fixed_at = "not reported (no prior given); k_ref holds at T_ref only"
    return FitWarning(
        WarningKind.UNIDENTIFIABLE,
        f"Ea cannot be identified from these data: the assays' windows span only "
        f"{span_k:.1f} K of effective temperature (its standard error would be {size}); "
        f"{fixed_at}. Batches (or runs) held at two or more temperatures would identify it",
        {
            "parameter": "ea_j_per_mol",
            "span_k": span_k,
            "fixed_at": held.value if held.source == FixedSource.PRIOR else None,
            "source": str(held.source),
        },
    )


def _shape_warning(held: FixedParameter) -> FitWarning:
    se = held.standard_error
    what = "fixed at the prior" if held.source == FixedSource.PRIOR else "held at the start value"
    need = (
        "assays at higher conversion would identify it"
        if held.name == "order"
        else "assays early in the batch, while the reaction accelerates, would identify it"
    )
    return FitWarning(
        WarningKind.UNIDENTIFIABLE,
        f"{held.name} cannot be identified from these data (standard error "
        f"{'unbounded' if not np.isfinite(se) else f'{se:.2g}'}); {what} {held.value:g}; "
        f"{need}",
        {
            "parameter": held.name,
            "fixed_at": held.value if held.source == FixedSource.PRIOR else None,
            "source": str(held.source),
        },
    )


__all__ = [
    "EA_NOMINAL_J_PER_MOL",
    "UNIDENTIFIABLE_REL_SE_EA",
    "UNIDENTIFIABLE_SE_SHAPE",
    "hold_unidentifiable",
]
