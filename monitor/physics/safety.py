"""Thermal-safety overlay: how hot a batch could get if its cooling failed.

ADVISORY ONLY. These functions help an engineer read a running batch; they are
not a safety system, a protection layer or a control system. Every figure they
give is subordinate to the site's process-safety reviews (HAZOP, thermal-risk
assessment), its protective systems, local codes and licensed practice, and a
decision about a real reactor must rest on those, never on this module.

Contents: the adiabatic temperature rise, the maximum temperature of the
synthesis reaction (MTSR) of a batch, the probability that MTSR passes a limit
from draws of the conversion, the criticality class (1-5) of the cooling-failure
scenario, and common-practice bands for severity and probability. The time to
maximum rate (TMR_ad) and T_D24 live in `monitor.physics.runaway` and are
re-exported here, so the overlay has one place to import from.

References
----------
.. [1] Stoessel, F., "What is your thermal risk?", Chem. Eng. Prog. 89(10) (1993)
   68-75 (the cooling-failure scenario and the criticality classes).
.. [2] Stoessel, F., Thermal Safety of Chemical Processes: Risk Assessment and
   Process Design, Wiley-VCH, Weinheim (2008), doi:10.1002/9783527621606,
   ch. 2-3 (adiabatic rise, MTSR, criticality classes, assessment bands).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .runaway import heat_release_rate, t_d24, temperature_at_tmr, tmr_adiabatic

__all__ = [
    "MtsrExceedance",
    "adiabatic_temperature_rise",
    "adiabatic_temperature_rise_specific",
    "criticality_class",
    "exceedance_probability",
    "heat_release_rate",
    "mtsr",
    "mtsr_exceedance",
    "probability_band",
    "severity_band",
    "t_d24",
    "temperature_at_tmr",
    "tmr_adiabatic",
]

#: Upper edges of the severity bands of dT_ad [K] (common practice, from memory).
SEVERITY_EDGES_K = (50.0, 200.0, 400.0)
SEVERITY_WORDS = ("low", "medium", "high", "very high")
#: Edges of the probability bands of TMR_ad [s]: 8 h and 24 h (common practice).
PROBABILITY_EDGES_S = (8 * 3600.0, 24 * 3600.0)


def _floats(name, value, *, positive=False, nonnegative=False):
    """``value`` as a float array; ValueError if any entry is not finite or out of sign."""
    a = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be finite, got {value!r}")
    if positive and not np.all(a > 0):
        raise ValueError(f"{name} must be positive, got {value!r}")
    if nonnegative and not np.all(a >= 0):
        raise ValueError(f"{name} must not be negative, got {value!r}")
    return a


def _scalar(name, value) -> float:
    """``value`` as one finite float; ValueError otherwise."""
    a = _floats(name, value)
    if a.ndim:
        raise ValueError(f"{name} must be a single number, got {value!r}")
    return float(a)


def _out(a):
    """A plain float for a scalar result, the array otherwise."""
    return a if np.ndim(a) else float(a)


def adiabatic_temperature_rise_specific(specific_heat_j_per_kg, heat_capacity_j_per_kg_k):
    """Adiabatic temperature rise from the specific heat of reaction.

    Parameters
    ----------
    specific_heat_j_per_kg : float or array_like
        Heat released per kilogram of reaction mass, ``Q'`` [J/kg]
        (positive: exothermic).
    heat_capacity_j_per_kg_k : float or array_like
        Specific heat capacity of the reaction mass, ``c_p`` [J/(kg K)].

    Returns
    -------
    float or numpy.ndarray
        ``dT_ad`` [K]; negative for an endothermic reaction.

    Notes
    -----
    ``dT_ad = Q' / c_p`` [2]_ (ch. 2): all the heat stays in the mass.

    Examples
    --------
    >>> adiabatic_temperature_rise_specific(100e3, 2000.0)   # 100 kJ/kg, 2 kJ/(kg K)
    50.0
    """
    q = _floats("specific heat of reaction", specific_heat_j_per_kg)
    cp = _floats("heat capacity", heat_capacity_j_per_kg_k, positive=True)
    return _out(q / cp)


def adiabatic_temperature_rise(
    heat_of_reaction_j_per_mol, c_a0_mol_per_l, density_kg_per_m3, heat_capacity_j_per_kg_k
):
    """Adiabatic temperature rise of a charge from its molar heat of reaction.

    Parameters
    ----------
    heat_of_reaction_j_per_mol : float or array_like
        Reaction enthalpy per mol of A, ``dH_r`` [J/mol] (negative: exothermic).
    c_a0_mol_per_l : float or array_like
        Initial concentration of A, ``C_A0`` [mol/L].
    density_kg_per_m3 : float or array_like
        Density of the reaction mass, ``rho`` [kg/m^3].
    heat_capacity_j_per_kg_k : float or array_like
        Specific heat capacity of the reaction mass, ``c_p`` [J/(kg K)].

    Returns
    -------
    float or numpy.ndarray
        ``dT_ad`` [K]; negative for an endothermic reaction.

    Notes
    -----
    ``dT_ad = (-dH_r) C_A0 / (rho c_p)`` [2]_ (ch. 2), i.e. ``Q'/c_p`` with the
    specific heat ``Q' = (-dH_r) C_A0 / rho``; ``C_A0`` is taken to [mol/m^3].

    Examples
    --------
    >>> round(adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0), 2)
    84.76
    """
    dh = _floats("heat of reaction", heat_of_reaction_j_per_mol)
    c0 = _floats("initial concentration", c_a0_mol_per_l, nonnegative=True)
    rho = _floats("density", density_kg_per_m3, positive=True)
    return adiabatic_temperature_rise_specific(-dh * c0 * 1000.0 / rho, heat_capacity_j_per_kg_k)


def mtsr(T_K, conversion, delta_t_ad_k):
    """Maximum temperature of the synthesis reaction (MTSR) of a batch.

    Parameters
    ----------
    T_K : float or array_like
        Temperature of the reaction mass when cooling fails [K].
    conversion : float or array_like
        Conversion of A at that moment, ``X`` in [0, 1] [-]. An array of
        posterior draws gives one MTSR per draw (broadcast against ``T_K``).
    delta_t_ad_k : float or array_like
        Adiabatic temperature rise of the full charge [K].

    Returns
    -------
    float or numpy.ndarray
        MTSR [K].

    Notes
    -----
    In a batch every unreacted mole is accumulated, so after a cooling failure
    the rest of the reaction heats the mass by ``(1 - X) dT_ad``:
    ``MTSR = T + (1 - X) dT_ad`` [1]_, [2]_ (ch. 3).

    Examples
    --------
    >>> round(mtsr(343.15, 0.25, 80.0), 2)
    403.15
    >>> mtsr(343.15, [0.0, 0.5, 1.0], 80.0).round(2).tolist()
    [423.15, 383.15, 343.15]
    """
    T = _floats("temperature", T_K, positive=True)
    X = _floats("conversion", conversion)
    if not np.all((X >= 0.0) & (X <= 1.0)):
        raise ValueError(f"conversion must lie in [0, 1], got {conversion!r}")
    dT = _floats("adiabatic temperature rise", delta_t_ad_k)
    return _out(T + (1.0 - X) * dT)


def exceedance_probability(values, limit) -> float:
    """Fraction of Monte Carlo draws strictly above a limit.

    Parameters
    ----------
    values : array_like
        Draws of a quantity, e.g. MTSR [K].
    limit : float
        The limit, in the same unit as ``values``.

    Returns
    -------
    float
        ``P(value > limit)`` estimated as a fraction of draws [-]. Its Monte
        Carlo standard error is ``sqrt(p (1 - p) / n)``.

    Examples
    --------
    >>> exceedance_probability([350.0, 360.0, 370.0, 380.0], 365.0)
    0.5
    """
    v = _floats("draws", values).ravel()
    if v.size == 0:
        raise ValueError("at least one draw is needed")
    lim = _scalar("limit", limit)
    return float(np.count_nonzero(v > lim) / v.size)


class MtsrExceedance(NamedTuple):
    """Probabilities that MTSR passes the two limits of the scenario [-]."""

    p_above_mtt: float
    p_above_t_d24: float


def mtsr_exceedance(T_K, conversion_draws, delta_t_ad_k, mtt_k, t_d24_k) -> MtsrExceedance:
    """P(MTSR > MTT) and P(MTSR > T_D24) from draws of the conversion.

    Parameters
    ----------
    T_K : float or array_like
        Temperature of the reaction mass [K] (one value, or one per draw).
    conversion_draws : array_like
        Draws from the conversion's posterior, each in [0, 1] [-].
    delta_t_ad_k : float or array_like
        Adiabatic temperature rise of the full charge [K] (one, or one per draw).
    mtt_k : float
        Maximum temperature for technical reasons (MTT), e.g. the boiling point
        of an open system [K].
    t_d24_k : float
        Temperature at which the decomposition's TMR_ad is 24 h [K].

    Returns
    -------
    MtsrExceedance
        ``(p_above_mtt, p_above_t_d24)`` [-], fractions of draws.

    Notes
    -----
    Each draw of ``X`` gives one MTSR by `mtsr`; the probabilities are the
    fractions of those MTSRs strictly above each limit. Advisory only.

    Examples
    --------
    >>> mtsr_exceedance(343.15, [0.6, 0.7, 0.8, 0.9], 80.0, 363.15, 373.15)
    MtsrExceedance(p_above_mtt=0.5, p_above_t_d24=0.25)
    """
    m = np.atleast_1d(mtsr(T_K, conversion_draws, delta_t_ad_k))
    return MtsrExceedance(exceedance_probability(m, mtt_k), exceedance_probability(m, t_d24_k))


def criticality_class(t_process_k, mtsr_k, mtt_k, t_d24_k) -> int:
    """Criticality class 1-5 of the cooling-failure scenario.

    Parameters
    ----------
    t_process_k : float
        Process temperature ``T_p`` when cooling fails [K].
    mtsr_k : float
        Maximum temperature of the synthesis reaction [K].
    mtt_k : float
        Maximum temperature for technical reasons, e.g. the boiling point [K].
    t_d24_k : float
        Temperature at which the decomposition's TMR_ad is 24 h [K].

    Returns
    -------
    int
        1 (least critical) to 5.

    Notes
    -----
    The classes of [1]_ and [2]_ (ch. 3), with ``T_p`` the lowest level;
    written from memory of those sources:

    =====  ===========================  ===================================
    class  order of the levels          reading
    =====  ===========================  ===================================
    1      T_p < MTSR < MTT < T_D24     MTT not reached, no decomposition
    2      T_p < MTSR < T_D24 < MTT     as 1, but the MTT barrier lies
                                        above T_D24
    3      T_p < MTT < MTSR < T_D24     MTT reached, no decomposition
    4      T_p < MTT < T_D24 < MTSR     MTT reached before the decomposition
                                        could start
    5      T_p < T_D24 < MTSR, MTT      decomposition triggered before the
                                        MTT barrier (both orders of MTSR
                                        and MTT)
    =====  ===========================  ===================================

    Two conventions of ours, not of the sources, both leaning to the more
    critical class: (a) a tie between two levels counts as the limit reached
    (MTSR = MTT reaches the MTT, MTSR = T_D24 triggers the decomposition, and
    MTT = T_D24 gives no barrier below T_D24); (b) the sources assume
    ``T_p < MTSR``; where the mass is hotter than MTSR (an endothermic step, or
    a process run above a limit) the highest temperature after the failure,
    ``max(T_p, MTSR)``, takes MTSR's place, so a process run at or above MTT
    or T_D24 is classed as having reached it.

    Examples
    --------
    >>> criticality_class(333.15, 350.0, 353.15, 423.15)
    1
    >>> criticality_class(333.15, 430.0, 353.15, 423.15)
    4
    """
    levels = _floats("temperatures", [t_process_k, mtsr_k, mtt_k, t_d24_k], positive=True)
    t_p, m, mtt, td24 = (float(v) for v in levels)
    t_max = max(t_p, m)
    barrier_below_decomposition = mtt < td24
    if t_max >= td24:
        return 4 if barrier_below_decomposition else 5
    if t_max >= mtt:
        return 3
    return 1 if barrier_below_decomposition else 2


def severity_band(delta_t_ad_k) -> str:
    """Severity of a runaway from the adiabatic temperature rise, in a word.

    Parameters
    ----------
    delta_t_ad_k : float
        Adiabatic temperature rise [K].

    Returns
    -------
    str
        ``"low"`` below 50 K, ``"medium"`` from 50 K, ``"high"`` from 200 K,
        ``"very high"`` from 400 K.

    Notes
    -----
    Common practice, from memory (the bands are those of the four-level scale
    used in thermal-risk assessment, cf. [2]_ ch. 3); the words are ours.
    A value on an edge is put in the more severe band. A negative rise
    (endothermic) is "low". An indication for a review, not a verdict.

    Examples
    --------
    >>> severity_band(49.9), severity_band(50.0), severity_band(450.0)
    ('low', 'medium', 'very high')
    """
    dT = _scalar("adiabatic temperature rise", delta_t_ad_k)
    # side="right": a value on an edge falls in the band above it
    return SEVERITY_WORDS[int(np.searchsorted(SEVERITY_EDGES_K, dT, side="right"))]


def probability_band(tmr_ad_s) -> str:
    """Probability of a runaway from the time to maximum rate, in a word.

    Parameters
    ----------
    tmr_ad_s : float
        Time to maximum rate under adiabatic conditions [s]; ``inf`` for no
        heat release.

    Returns
    -------
    str
        ``"high"`` for 8 h or less, ``"medium"`` up to and including 24 h,
        ``"low"`` above 24 h.

    Notes
    -----
    Common practice, from memory (the 8 h / 24 h edges of the three-level
    scale, cf. [2]_ ch. 3): a runaway that takes longer than a day leaves time
    for counter-measures. The words are ours; a value on an edge is put in the
    more probable band. An indication for a review, not a verdict.

    Examples
    --------
    >>> probability_band(8 * 3600.0), probability_band(86400.0), probability_band(float("inf"))
    ('high', 'medium', 'low')
    """
    t = float(np.asarray(tmr_ad_s, dtype=float)) if np.ndim(tmr_ad_s) == 0 else math.nan
    if math.isnan(t) or t <= 0:
        raise ValueError(f"TMR_ad must be one positive time [s], got {tmr_ad_s!r}")
    short, long = PROBABILITY_EDGES_S
    if t <= short:
        return "high"
    return "medium" if t <= long else "low"
