"""The thermal-safety overlay of an estimate (advisory only, never a safety system)."""

from __future__ import annotations

from ..physics.arrhenius import equilibrium_constant, rate_constant
from ..physics.safety import adiabatic_temperature_rise, criticality_class, mtsr, tmr_adiabatic


def safety_overlay(state, est, safety) -> dict:
    """``delta_t_ad_k``, ``mtsr_k``, ``mtsr_sd_k``, ``criticality_class``, ``tmr_ad_s``.

    ``safety`` is a `monitor.config.SafetyConfig` (SI). The heat-release rate for
    TMR_ad is that of the desired reaction at the current state and temperature.
    """
    dT = adiabatic_temperature_rise(
        safety.heat_of_reaction_j_per_mol,
        state.c_a0,
        safety.density_kg_per_m3,
        safety.heat_capacity_j_per_kg_k,
    )
    T = est.temperature_k
    m = float(mtsr(T, est.conversion, dT))
    kin = state.kinetics
    law = kin.law
    k = rate_constant(T, kin.k_ref, kin.ea_j_per_mol, kin.t_ref_k) * est.activity
    if law.separable:
        dxdt = k * law.scale(state.c_a0) * float(law.h(min(est.conversion, 1.0)))
    else:
        K = equilibrium_constant(T, law.k_eq_ref, law.dh_rxn_j_per_mol, kin.t_ref_k)
        dxdt = max(float(law.dxdt(est.conversion, k, K)), 0.0)
    # q = (-dH) (-r_A) / rho with -r_A = C_A0 dX/dt [mol/(m^3 s)]
    q = -safety.heat_of_reaction_j_per_mol * state.c_a0 * 1000.0 * dxdt / safety.density_kg_per_m3
    tmr = tmr_adiabatic(T, q, safety.heat_capacity_j_per_kg_k, kin.ea_j_per_mol) if q > 0 else None
    return {
        "delta_t_ad_k": float(dT),
        "mtsr_k": m,
        "mtsr_sd_k": float(abs(dT) * est.conversion_sd),
        "criticality_class": criticality_class(T, m, safety.mtt_k, safety.t_d24_k),
        "tmr_ad_s": None if tmr is None or tmr == float("inf") else float(tmr),
    }
