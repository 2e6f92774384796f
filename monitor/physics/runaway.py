"""Adiabatic runaway: time to maximum rate (TMR_ad) and the temperature T_D24.

ADVISORY ONLY. These are screening estimates for an engineer, not a safety or
control system; they never replace the site's process-safety reviews, its
protective systems, local codes, calorimetric testing or licensed practice.

The model is the zero-order (no reactant depletion) adiabatic runaway with an
Arrhenius heat-release rate, in the high-activation-energy (Semenov /
Frank-Kamenetskii) approximation. Neglecting depletion makes the runaway
faster than it would be, so TMR_ad is short and T_D24 low: on the safe side.
The approximation holds while ``E/(R T) >> 1``; its relative error in TMR_ad
is of order ``R T / E``.

References
----------
.. [1] Townsend, D. I. & Tou, J. C., "Thermal hazard evaluation by an
   accelerating rate calorimeter", Thermochim. Acta 37 (1980) 1-30,
   doi:10.1016/0040-6031(80)85001-5.
.. [2] Stoessel, F., Thermal Safety of Chemical Processes: Risk Assessment and
   Process Design, Wiley-VCH, Weinheim (2008), doi:10.1002/9783527621606,
   ch. 2 (TMR_ad) and ch. 3 (T_D24 in the assessment).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from .arrhenius import R_J_PER_MOL_K, arrhenius_factor

#: One day [s]: T_D24 is the temperature whose TMR_ad is this long.
DAY_S = 86400.0
#: Range searched for a temperature with a given TMR_ad [K] (our choice: from
#: well below ambient to far above any liquid-phase batch process).
PLAUSIBLE_RANGE_K = (250.0, 800.0)


def _check(name, value, *, positive=False, nonnegative=False):
    a = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be finite, got {value!r}")
    if positive and not np.all(a > 0):
        raise ValueError(f"{name} must be positive, got {value!r}")
    if nonnegative and not np.all(a >= 0):
        raise ValueError(f"{name} must not be negative, got {value!r}")
    return a


def heat_release_rate(T_K, q_ref_w_per_kg, t_ref_k, ea_j_per_mol):
    """Specific heat-release rate of a zero-order reaction at temperature ``T_K``.

    Parameters
    ----------
    T_K : float or array_like
        Temperature [K].
    q_ref_w_per_kg : float
        Heat-release rate measured at ``t_ref_k``, ``q'_ref`` [W/kg].
    t_ref_k : float
        Temperature of that measurement [K].
    ea_j_per_mol : float
        Activation energy, ``E`` [J/mol].

    Returns
    -------
    float or numpy.ndarray
        ``q'(T)`` [W/kg].

    Notes
    -----
    ``q'(T) = q'_ref exp[-(E/R)(1/T - 1/T_ref)]`` [2]_ (ch. 2): zero order, so
    the rate depends on temperature only, never on how much has reacted.

    Examples
    --------
    >>> round(heat_release_rate(403.15, 10.0, 393.15, 100e3), 3)
    21.358
    """
    T = _check("temperature", T_K, positive=True)
    q = _check("reference heat-release rate", q_ref_w_per_kg, nonnegative=True)
    t_ref = _check("reference temperature", t_ref_k, positive=True)
    ea = _check("activation energy", ea_j_per_mol, nonnegative=True)
    out = q * arrhenius_factor(T, ea, t_ref)
    return out if np.ndim(out) else float(out)


def tmr_adiabatic(T_K, heat_release_w_per_kg, heat_capacity_j_per_kg_k, ea_j_per_mol):
    """Time to maximum rate under adiabatic conditions, TMR_ad.

    Parameters
    ----------
    T_K : float or array_like
        Temperature at which the runaway starts, ``T_0`` [K].
    heat_release_w_per_kg : float or array_like
        Specific heat-release rate at ``T_0``, ``q'_0`` [W/kg]; zero gives
        ``inf`` (nothing runs away).
    heat_capacity_j_per_kg_k : float or array_like
        Specific heat capacity of the mass, ``c_p`` [J/(kg K)].
    ea_j_per_mol : float or array_like
        Activation energy, ``E`` [J/mol]; zero gives ``inf`` (the rate never
        accelerates).

    Returns
    -------
    float or numpy.ndarray
        TMR_ad [s].

    Notes
    -----
    ``TMR_ad = c_p R T_0^2 / (q'_0 E)`` [1]_: the time for a zero-order
    reaction, heating its own mass with no heat loss, to reach its maximum
    rate, in the high-activation-energy approximation. Neglecting reactant
    depletion shortens the time, so the figure errs on the safe side; the
    approximation's relative error is of order ``R T_0 / E``.

    Examples
    --------
    >>> round(tmr_adiabatic(393.15, 10.0, 1800.0, 100e3), 1)   # seconds
    2313.3
    """
    T = _check("temperature", T_K, positive=True)
    q = _check("heat-release rate", heat_release_w_per_kg, nonnegative=True)
    cp = _check("heat capacity", heat_capacity_j_per_kg_k, positive=True)
    ea = _check("activation energy", ea_j_per_mol, nonnegative=True)
    denominator = q * ea
    with np.errstate(divide="ignore"):
        out = np.where(denominator > 0, cp * R_J_PER_MOL_K * T**2 / denominator, np.inf)
    return out if np.ndim(out) else float(out)


def _ln_tmr(T_K, q_ref_w_per_kg, t_ref_k, ea_j_per_mol, heat_capacity_j_per_kg_k):
    """``ln TMR_ad(T)`` with ``q'(T)`` written out, so no exponential overflows."""
    beta = ea_j_per_mol / R_J_PER_MOL_K
    return (
        np.log(heat_capacity_j_per_kg_k * R_J_PER_MOL_K / (q_ref_w_per_kg * ea_j_per_mol))
        + 2.0 * np.log(T_K)
        + beta * (1.0 / T_K - 1.0 / t_ref_k)
    )


def temperature_at_tmr(
    tmr_s,
    q_ref_w_per_kg,
    t_ref_k,
    ea_j_per_mol,
    heat_capacity_j_per_kg_k,
    *,
    range_k=PLAUSIBLE_RANGE_K,
) -> float:
    """The starting temperature whose TMR_ad equals ``tmr_s``.

    Parameters
    ----------
    tmr_s : float
        The time to maximum rate asked for [s].
    q_ref_w_per_kg : float
        Heat-release rate of the (decomposition) reaction at ``t_ref_k`` [W/kg].
    t_ref_k : float
        Temperature of that measurement [K].
    ea_j_per_mol : float
        Its activation energy [J/mol].
    heat_capacity_j_per_kg_k : float
        Specific heat capacity of the mass [J/(kg K)].
    range_k : tuple of float, optional
        ``(low, high)`` temperatures searched [K]; default 250-800 K.

    Returns
    -------
    float
        The temperature ``T`` with ``TMR_ad(T) = tmr_s`` [K].

    Raises
    ------
    ValueError
        On a non-physical input, or when no such temperature lies in
        ``range_k`` (the message says on which side it lies).

    Notes
    -----
    Solves ``c_p R T^2 / (q'(T) E) = tmr_s`` with
    ``q'(T) = q'_ref exp[-(E/R)(1/T - 1/T_ref)]`` by Brent's method
    (`scipy.optimize.brentq`) on ``ln TMR_ad(T) - ln tmr_s``. The function is
    strictly decreasing for ``T < E/(2R)``, so a sign change brackets exactly
    one root; the range must stay below ``E/(2R)``, past which the
    high-activation-energy approximation has long failed. Zero order: the
    temperature errs low, on the safe side [1]_, [2]_.

    Examples
    --------
    >>> round(temperature_at_tmr(8 * 3600.0, 10.0, 393.15, 100e3, 1800.0), 2)
    361.37
    """
    target = float(_check("TMR_ad", tmr_s, positive=True))
    q_ref = float(_check("reference heat-release rate", q_ref_w_per_kg, positive=True))
    t_ref = float(_check("reference temperature", t_ref_k, positive=True))
    ea = float(_check("activation energy", ea_j_per_mol, positive=True))
    cp = float(_check("heat capacity", heat_capacity_j_per_kg_k, positive=True))
    low, high = (float(v) for v in _check("temperature range", range_k, positive=True))
    if not low < high:
        raise ValueError(f"temperature range must be (low, high) with low < high, got {range_k}")
    if high >= ea / (2.0 * R_J_PER_MOL_K):
        raise ValueError(
            f"E = {ea:g} J/mol is too low for the zero-order TMR_ad estimate up to {high:g} K: "
            f"TMR_ad(T) stops decreasing at E/(2R) = {ea / (2.0 * R_J_PER_MOL_K):.1f} K"
        )

    def excess(T):
        return _ln_tmr(T, q_ref, t_ref, ea, cp) - np.log(target)

    at_low, at_high = excess(low), excess(high)
    if at_low < 0:
        raise ValueError(
            f"TMR_ad is already {np.exp(at_low) * target / 3600.0:.3g} h at {low:g} K, shorter "
            f"than the {target / 3600.0:.3g} h asked for: the temperature lies below the "
            f"searched range {low:g}-{high:g} K (check q'_ref, T_ref and E)"
        )
    if at_high > 0:
        raise ValueError(
            f"TMR_ad is still {np.exp(at_high) * target / 3600.0:.3g} h at {high:g} K, longer "
            f"than the {target / 3600.0:.3g} h asked for: the temperature lies above the "
            f"searched range {low:g}-{high:g} K (check q'_ref, T_ref and E)"
        )
    return float(brentq(excess, low, high, xtol=1e-9, rtol=4 * np.finfo(float).eps))


def t_d24(
    q_ref_w_per_kg, t_ref_k, ea_j_per_mol, heat_capacity_j_per_kg_k, *, range_k=PLAUSIBLE_RANGE_K
) -> float:
    """T_D24: the temperature at which the decomposition's TMR_ad is 24 h.

    Parameters
    ----------
    q_ref_w_per_kg : float
        Heat-release rate of the decomposition at ``t_ref_k`` [W/kg].
    t_ref_k : float
        Temperature of that measurement [K].
    ea_j_per_mol : float
        Activation energy of the decomposition [J/mol].
    heat_capacity_j_per_kg_k : float
        Specific heat capacity of the mass [J/(kg K)].
    range_k : tuple of float, optional
        ``(low, high)`` temperatures searched [K]; default 250-800 K.

    Returns
    -------
    float
        T_D24 [K].

    Notes
    -----
    `temperature_at_tmr` with 24 h. Below T_D24 a decomposition left
    without cooling takes more than a day to run away; it is one of the four
    levels of the criticality classes [2]_ (ch. 3). Zero-order: conservative.

    Examples
    --------
    >>> round(t_d24(10.0, 393.15, 100e3, 1800.0), 1)
    349.1
    """
    return temperature_at_tmr(
        DAY_S, q_ref_w_per_kg, t_ref_k, ea_j_per_mol, heat_capacity_j_per_kg_k, range_k=range_k
    )
