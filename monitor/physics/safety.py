"""Thermal-safety overlay (advisory only; never a safety system).

Adiabatic temperature rise, maximum temperature of the synthesis reaction
(MTSR), criticality class and time to maximum rate under adiabatic
conditions. These advise an engineer; they do not replace the site's
process-safety reviews, its protective systems, local codes or licensed
practice.

References
----------
Stoessel, F., Thermal Safety of Chemical Processes, Wiley-VCH (2008),
ch. 2-3 (adiabatic rise, MTSR, criticality classes 1-5).
Townsend, D. I. & Tou, J. C., "Thermal hazard evaluation by an accelerating
rate calorimeter", Thermochim. Acta 37 (1980) 1-30 (TMR_ad).
"""

from __future__ import annotations

import numpy as np

from .arrhenius import R_J_PER_MOL_K


def adiabatic_temperature_rise(
    heat_of_reaction_j_per_mol, c_a0_mol_per_l, density_kg_per_m3, heat_capacity_j_per_kg_k
):
    """``dT_ad = (-dH_r) C_A0 / (rho c_p)`` [K].

    Parameters
    ----------
    heat_of_reaction_j_per_mol : float
        Reaction enthalpy per mol of A [J/mol] (negative: exothermic).
    c_a0_mol_per_l : float
        Initial concentration of A [mol/L].
    density_kg_per_m3 : float
        Density of the reaction mass [kg/m^3].
    heat_capacity_j_per_kg_k : float
        Specific heat capacity of the reaction mass [J/(kg K)].

    Examples
    --------
    >>> round(adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0), 2)
    84.76
    """
    return (
        -heat_of_reaction_j_per_mol
        * c_a0_mol_per_l
        * 1000.0
        / (density_kg_per_m3 * heat_capacity_j_per_kg_k)
    )


def mtsr(T_K, conversion, delta_t_ad_k):
    """Maximum temperature of the synthesis reaction for a batch [K].

    In a batch all of the unreacted fraction is accumulated:
    ``MTSR = T + (1 - X) dT_ad`` (Stoessel 2008, sec. 3.3).
    """
    return np.asarray(T_K) + (1.0 - np.asarray(conversion)) * delta_t_ad_k


def criticality_class(t_process_k, mtsr_k, mtt_k, t_d24_k) -> int:
    """Criticality class 1-5 from the order of T_p, MTSR, MTT and T_D24.

    From memory of Stoessel (2008), sec. 3.4: 1: MTSR < MTT < T_D24;
    2: MTSR < T_D24 < MTT; 3: MTT < MTSR < T_D24; 4: MTT < T_D24 < MTSR;
    5: T_D24 < MTSR with T_D24 < MTT.

    Examples
    --------
    >>> criticality_class(333.15, 350.0, 353.15, 423.15)
    1
    >>> criticality_class(333.15, 430.0, 353.15, 423.15)
    4
    """
    if mtsr_k <= mtt_k:
        if mtt_k <= t_d24_k:
            return 1
        return 2 if mtsr_k <= t_d24_k else 5  # T_D24 < MTSR < MTT is class 5, not 2
    if mtsr_k <= t_d24_k:
        return 3
    return 4 if mtt_k <= t_d24_k else 5


def tmr_adiabatic(T_K, heat_release_w_per_kg, heat_capacity_j_per_kg_k, ea_j_per_mol):
    """Time to maximum rate under adiabatic conditions [s] (Townsend & Tou 1980).

    ``TMR_ad = c_p R T^2 / (q Ea)`` with ``q`` the specific heat-release rate at T.

    Examples
    --------
    >>> round(tmr_adiabatic(350.0, 1.0, 1900.0, 100e3) / 3600, 3)   # hours
    5.376
    """
    q = np.asarray(heat_release_w_per_kg, dtype=float)
    with np.errstate(divide="ignore"):
        out = heat_capacity_j_per_kg_k * R_J_PER_MOL_K * np.asarray(T_K) ** 2 / (q * ea_j_per_mol)
    return out if np.ndim(out) else float(out)
