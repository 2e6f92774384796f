"""Thermal-safety overlay formulas (advisory only: never a safety system)."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp
from scipy.stats import norm

from monitor.batch.estimator import estimate
from monitor.batch.kinetics import Kinetics
from monitor.batch.state import BatchState, RecipeModel
from monitor.config import SafetyConfig
from monitor.physics.arrhenius import R_J_PER_MOL_K
from monitor.physics.safety import (
    adiabatic_temperature_rise,
    adiabatic_temperature_rise_specific,
    criticality_class,
    exceedance_probability,
    heat_release_rate,
    mtsr,
    mtsr_exceedance,
    probability_band,
    severity_band,
    t_d24,
    temperature_at_tmr,
    tmr_adiabatic,
)

HOUR_S = 3600.0

# --- adiabatic temperature rise -----------------------------------------------------


def test_adiabatic_rise_from_the_specific_heat_of_reaction():
    # dT_ad = Q'/c_p: 100 kJ/kg with c_p = 2 kJ/(kg K) gives 50 K (Stoessel, Thermal
    # Safety of Chemical Processes, Wiley-VCH 2008, ch. 2; from memory). Printed as 50 K.
    assert round(adiabatic_temperature_rise_specific(100e3, 2000.0)) == 50
    # the molar form is the same rise: 100 kJ/mol x 1 mol/L / 1000 kg/m^3 = 100 kJ/kg
    assert_allclose(adiabatic_temperature_rise(-100e3, 1.0, 1000.0, 2000.0), 50.0, rtol=1e-15)


def test_adiabatic_temperature_rise_by_hand():
    # dT_ad = (-dH_r) C_A0 / (rho c_p) (Stoessel 2008, ch. 2). By hand, in SI:
    # -dH = 85,000 J/mol; C_A0 = 1.8 mol/L = 1,800 mol/m^3; rho c_p = 950 * 1900 =
    # 1,805,000 J/(m^3 K); dT = 153,000,000 / 1,805,000 = 84.76 K.
    assert round(adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0), 2) == 84.76
    # an endothermic reaction cools; the rise scales with the charge
    assert adiabatic_temperature_rise(40e3, 1.0, 1000.0, 4184.0) < 0
    assert_allclose(
        adiabatic_temperature_rise(-85e3, 3.6, 950.0, 1900.0),
        2 * adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0),
        rtol=1e-15,
    )


@pytest.mark.parametrize(
    "args",
    [
        (-85e3, 1.8, 0.0, 1900.0),  # no density
        (-85e3, 1.8, 950.0, -1.0),  # negative heat capacity
        (-85e3, -1.0, 950.0, 1900.0),  # negative charge
        (float("nan"), 1.8, 950.0, 1900.0),
    ],
)
def test_adiabatic_rise_refuses_non_physical_input(args):
    with pytest.raises(ValueError):
        adiabatic_temperature_rise(*args)


# --- MTSR and its exceedance probabilities -------------------------------------------


def test_mtsr_of_a_batch_accumulates_the_unreacted_fraction():
    # MTSR = T + (1 - X) dT_ad for a batch (Stoessel 2008, ch. 3, from memory)
    X = np.array([0.0, 0.25, 0.9, 1.0])
    assert_allclose(mtsr(333.15, X, 80.0), 333.15 + (1 - X) * 80.0, rtol=1e-15)
    assert isinstance(mtsr(333.15, 0.5, 80.0), float)


@pytest.mark.parametrize("X", [-0.01, 1.01, float("nan")])
def test_mtsr_refuses_a_conversion_outside_0_1(X):
    with pytest.raises(ValueError):
        mtsr(333.15, X, 80.0)


@given(
    T=st.floats(250.0, 600.0),
    X=st.floats(0.0, 1.0),
    dT=st.floats(-100.0, 800.0),
)
@settings(max_examples=300, deadline=None)
def test_mtsr_lies_between_t_and_t_plus_the_adiabatic_rise(T, X, dT):
    # property of MTSR = T + (1 - X) dT_ad for X in [0, 1] (closed form)
    m = mtsr(T, X, dT)
    lo, hi = sorted((T, T + dT))
    assert lo - 1e-9 <= m <= hi + 1e-9


def test_exceedance_from_uniform_draws_matches_the_closed_form():
    # X uniform on [0, 1] (midpoint draws): MTSR > L exactly when X < 1 - (L - T)/dT_ad,
    # so P = 1 - (L - T)/dT_ad (closed form).
    n = 10_000
    X = (np.arange(n) + 0.5) / n
    T, dT = 343.15, 80.0
    p = mtsr_exceedance(T, X, dT, mtt_k=363.15, t_d24_k=403.15)
    assert_allclose(p.p_above_mtt, 1 - 20.0 / 80.0, atol=1.0 / n)
    assert_allclose(p.p_above_t_d24, 1 - 60.0 / 80.0, atol=1.0 / n)


def test_exceedance_from_normal_draws_matches_scipy():
    # X ~ N(0.6, 0.05^2) makes MTSR normal with mean T + 0.4 dT and sd 0.05 dT, so
    # P(MTSR > L) = norm.sf(L; mean, sd) (scipy.stats as the reference library).
    # Quantile draws X = ppf((i + 1/2)/n) make the fraction accurate to about 1/n.
    n = 20_001
    X = norm.ppf((np.arange(n) + 0.5) / n, loc=0.6, scale=0.05)
    T, dT, mtt, td24 = 343.15, 80.0, 377.15, 380.15
    p = mtsr_exceedance(T, X, dT, mtt, td24)
    mean, sd = T + 0.4 * dT, 0.05 * dT
    assert_allclose(p.p_above_mtt, norm.sf(mtt, mean, sd), atol=2.0 / n)
    assert_allclose(p.p_above_t_d24, norm.sf(td24, mean, sd), atol=2.0 / n)
    assert 0.05 < p.p_above_t_d24 < p.p_above_mtt < 0.95  # a case that can tell them apart


def test_exceedance_probability_counts_strictly_above_and_refuses_empty_or_nan_draws():
    assert exceedance_probability([1.0, 2.0, 3.0, 4.0], 3.0) == 0.25
    with pytest.raises(ValueError):
        exceedance_probability([], 3.0)
    with pytest.raises(ValueError):
        exceedance_probability([1.0, float("nan")], 3.0)


# --- criticality classes --------------------------------------------------------------


def _levels(order: str) -> dict[str, float]:
    """'T_p < MTSR = MTT < T_D24' -> temperatures [K] in that order (ties equal)."""
    out = {}
    for i, group in enumerate(order.split(" < ")):
        for name in group.split(" = "):
            out[name] = 320.0 + 20.0 * i
    assert sorted(out) == ["MTSR", "MTT", "T_D24", "T_p"], order
    return out


def _class(order: str) -> int:
    lv = _levels(order)
    return criticality_class(lv["T_p"], lv["MTSR"], lv["MTT"], lv["T_D24"])


# Stoessel, "What is your thermal risk?", Chem. Eng. Prog. 89(10) (1993) 68-75, and
# Thermal Safety of Chemical Processes, Wiley-VCH 2008, ch. 3 (criticality classes;
# from memory): the classes are defined with the process temperature lowest. Class 5
# is T_D24 below both MTSR and MTT, in either order of those two.
SOURCE_CLASSES = {
    "T_p < MTSR < MTT < T_D24": 1,
    "T_p < MTSR < T_D24 < MTT": 2,
    "T_p < MTT < MTSR < T_D24": 3,
    "T_p < MTT < T_D24 < MTSR": 4,
    "T_p < T_D24 < MTSR < MTT": 5,
    "T_p < T_D24 < MTT < MTSR": 5,
}

# Outside the sources' scheme (T_p not the lowest level): our documented convention,
# not the source's. The highest temperature after the failure is max(T_p, MTSR), and
# it takes MTSR's place; so a mass already at or above MTT has reached the MTT, and one
# at or above T_D24 has triggered the decomposition.
CONVENTION_CLASSES = {
    "MTSR < T_p < MTT < T_D24": 1,
    "MTSR < T_p < T_D24 < MTT": 2,
    "MTSR < MTT < T_p < T_D24": 3,
    "MTSR < MTT < T_D24 < T_p": 4,
    "MTSR < T_D24 < T_p < MTT": 5,
    "MTSR < T_D24 < MTT < T_p": 5,
    "MTT < T_p < MTSR < T_D24": 3,
    "MTT < T_p < T_D24 < MTSR": 4,
    "MTT < MTSR < T_p < T_D24": 3,
    "MTT < MTSR < T_D24 < T_p": 4,
    "MTT < T_D24 < T_p < MTSR": 4,
    "MTT < T_D24 < MTSR < T_p": 4,
    "T_D24 < T_p < MTSR < MTT": 5,
    "T_D24 < T_p < MTT < MTSR": 5,
    "T_D24 < MTSR < T_p < MTT": 5,
    "T_D24 < MTSR < MTT < T_p": 5,
    "T_D24 < MTT < T_p < MTSR": 5,
    "T_D24 < MTT < MTSR < T_p": 5,
}

# Ties, our documented convention (the sources use strict orders): a tie counts as the
# limit reached, i.e. the more critical class.
TIE_CLASSES = {
    "T_p < MTSR = MTT < T_D24": 3,  # the MTT is just reached
    "T_p < MTSR = T_D24 < MTT": 5,  # the decomposition is just triggered
    "T_p < MTT < MTSR = T_D24": 4,
    "T_p < MTSR < MTT = T_D24": 2,  # no barrier strictly below T_D24
    "T_p < MTT = T_D24 < MTSR": 5,
    "T_p < MTSR = MTT = T_D24": 5,
    "T_p = MTSR < MTT < T_D24": 1,  # nothing accumulated (X = 1)
    "T_p = MTT < MTSR < T_D24": 3,  # run at the boiling point
}


@pytest.mark.parametrize("order,expected", SOURCE_CLASSES.items())
def test_criticality_class_from_the_source_table(order, expected):
    assert _class(order) == expected


@pytest.mark.parametrize("order,expected", CONVENTION_CLASSES.items())
def test_criticality_class_with_the_process_above_a_level(order, expected):
    assert _class(order) == expected


@pytest.mark.parametrize("order,expected", TIE_CLASSES.items())
def test_criticality_class_on_ties_takes_the_more_critical_class(order, expected):
    assert _class(order) == expected


def test_the_class_tables_cover_every_ordering_of_the_four_levels():
    every = {" < ".join(p) for p in itertools.permutations(("T_p", "MTSR", "MTT", "T_D24"))}
    assert len(every) == 24
    assert set(SOURCE_CLASSES) | set(CONVENTION_CLASSES) == every
    assert not set(SOURCE_CLASSES) & set(CONVENTION_CLASSES)


@given(
    m1=st.floats(300.0, 600.0),
    m2=st.floats(300.0, 600.0),
    mtt=st.floats(300.0, 600.0),
    td24=st.floats(300.0, 600.0),
)
@settings(max_examples=300, deadline=None)
def test_a_hotter_mtsr_never_lowers_the_class(m1, m2, mtt, td24):
    # In the sources' table (1993, 2008 ch. 3), raising MTSR with the other levels
    # fixed runs 1 -> 3 -> 4 (MTT < T_D24) or 2 -> 5 (T_D24 < MTT): never downwards.
    lo, hi = sorted((m1, m2))
    assert criticality_class(290.0, lo, mtt, td24) <= criticality_class(290.0, hi, mtt, td24)


def test_criticality_class_refuses_non_physical_levels():
    with pytest.raises(ValueError):
        criticality_class(333.15, float("nan"), 373.15, 423.15)
    with pytest.raises(ValueError):
        criticality_class(333.15, 350.0, -1.0, 423.15)


# --- TMR_ad and T_D24 -----------------------------------------------------------------

# Decomposition data of the worked check: c_p, E, q' at T_ref.
CP, EA, Q_REF, T_REF = 1800.0, 100e3, 10.0, 393.15


def test_tmr_adiabatic_worked_value():
    # TMR_ad = c_p R T0^2 / (q'0 E) (Townsend & Tou, Thermochim. Acta 37 (1980) 1-30).
    # The value is computed from that formula, not printed in the source: 1800 x
    # 8.314462618 x 393.15^2 / (10 x 100,000) = 2313.25 s, "about 2313 s".
    assert round(tmr_adiabatic(T_REF, Q_REF, CP, EA)) == 2313


def test_t_d24_worked_value():
    # T_D24 solves TMR_ad(T) = 24 h with q'(T) = q'_ref exp[-(E/R)(1/T - 1/T_ref)]
    # (Stoessel 2008, ch. 2-3; Townsend & Tou 1980). Computed from the formula for the
    # same data, not printed in any source: about 349.1 K.
    T = t_d24(Q_REF, T_REF, EA, CP)
    assert round(T, 1) == 349.1
    # and it is a root: the TMR_ad there is one day (closed-form consistency)
    assert_allclose(tmr_adiabatic(T, heat_release_rate(T, Q_REF, T_REF, EA), CP, EA), 86400.0)


def test_tmr_adiabatic_formula():
    # TMR_ad = c_p R T^2 / (q Ea) (Townsend & Tou 1980). By hand: 1900 J/(kg K) x
    # 8.314462618 J/(mol K) x (350 K)^2 / (1 W/kg x 100 kJ/mol) = 19,351.9 s = 5.376 h.
    t = tmr_adiabatic(350.0, 1.0, 1900.0, 100e3)
    assert round(t / HOUR_S, 3) == 5.376
    # inversely proportional to the heat-release rate; no release, no runaway
    assert_allclose(tmr_adiabatic(350.0, 4.0, 1900.0, 100e3), t / 4, rtol=1e-15)
    assert tmr_adiabatic(350.0, 0.0, 1900.0, 100e3) == math.inf
    assert tmr_adiabatic(350.0, 1.0, 1900.0, 0.0) == math.inf
    with pytest.raises(ValueError):
        tmr_adiabatic(350.0, -1.0, 1900.0, 100e3)


def test_heat_release_rate_is_arrhenius_around_its_reference():
    # q'(T) = q'_ref exp[-(E/R)(1/T - 1/T_ref)] (Stoessel 2008, ch. 2): equal at T_ref,
    # and by hand 10 K above: exp(12,027.2 x (1/393.15 - 1/403.15)) = 2.1358.
    assert heat_release_rate(T_REF, Q_REF, T_REF, EA) == Q_REF
    assert round(heat_release_rate(403.15, Q_REF, T_REF, EA) / Q_REF, 4) == 2.1358


@given(
    T1=st.floats(250.0, 800.0),
    T2=st.floats(250.0, 800.0),
    ea=st.floats(40e3, 300e3),
)
@settings(max_examples=300, deadline=None)
def test_tmr_adiabatic_decreases_with_temperature(T1, T2, ea):
    # d ln TMR/dT = 2/T - E/(R T^2) < 0 for T < E/(2R) >= 2405 K here (closed form)
    lo, hi = sorted((T1, T2))
    if hi - lo < 1e-6:
        return
    tmr = [tmr_adiabatic(T, heat_release_rate(T, Q_REF, T_REF, ea), CP, ea) for T in (lo, hi)]
    assert tmr[1] < tmr[0]


@given(T=st.floats(260.0, 790.0), ea=st.floats(60e3, 250e3))
@settings(max_examples=100, deadline=None)
def test_temperature_at_tmr_inverts_tmr_adiabatic(T, ea):
    tmr = tmr_adiabatic(T, heat_release_rate(T, Q_REF, T_REF, ea), CP, ea)
    assert_allclose(temperature_at_tmr(tmr, Q_REF, T_REF, ea, CP), T, rtol=1e-10)


@pytest.mark.parametrize(
    "q_ref,ea,words",
    [
        (1e-12, 100e3, "above the searched range"),  # hardly any heat: too stable
        (1e9, 100e3, "below the searched range"),  # runs away within minutes even at 250 K
        (10.0, 5e3, "stops decreasing"),  # E so low TMR_ad is not monotone up to 800 K
    ],
)
def test_t_d24_says_plainly_when_there_is_no_root(q_ref, ea, words):
    with pytest.raises(ValueError, match=words):
        t_d24(q_ref, T_REF, ea, CP)


def test_t_d24_refuses_a_bad_range():
    with pytest.raises(ValueError):
        t_d24(Q_REF, T_REF, EA, CP, range_k=(400.0, 300.0))


# --- the adiabatic runaway, integrated ------------------------------------------------


def _time_to(rhs, y0, hit, t_max, **kw):
    """Time at which ``hit(y)`` crosses zero upwards along ``y' = rhs(t, y)`` (solve_ivp)."""

    def event(t, y):
        return hit(y)

    event.terminal = True
    event.direction = 1
    sol = solve_ivp(rhs, (0.0, t_max), y0, method="LSODA", events=event, **kw)
    assert sol.t_events[0].size == 1, sol.message
    return float(sol.t_events[0][0])


def test_frank_kamenetskii_runaway_blows_up_at_one_tmr():
    # Dimensionless zero-order adiabatic runaway in the high-activation-energy limit
    # (Frank-Kamenetskii): theta = E (T - T0)/(R T0^2), tau = t / TMR_ad gives
    # d theta/d tau = exp(theta), whose solution theta = -ln(1 - tau) is infinite at
    # tau = 1 (closed form). Integrated to theta = 25: tau = 1 - exp(-25).
    tau = _time_to(
        lambda t, y: np.exp(y), [0.0], lambda y: y[0] - 25.0, 2.0, rtol=1e-11, atol=1e-12
    )
    assert_allclose(tau, 1.0, rtol=1e-8)


@pytest.mark.parametrize("ea", [80e3, 100e3, 150e3, 200e3])
def test_adiabatic_runaway_reaches_a_large_temperature_at_tmr_adiabatic(ea):
    # Integrate c_p dT/dt = q'(T) with the full Arrhenius q'(T) (zero order) from
    # T0 = 393.15 K until 200 K above, where the runaway is all but over, and compare
    # with TMR_ad (Townsend & Tou 1980). In dimensionless form (Semenov) the equation
    # is d theta/d tau = exp(theta/(1 + eps theta)) with eps = R T0/E; TMR_ad is its
    # eps -> 0 limit. Expanding the integrand, tau_end = 1 + 2 eps + 6 eps^2 + ...
    # (our derivation), so the tolerance is the approximation's own: the simulated time
    # lies between (1 + 2 eps) and (1 + 3 eps) TMR_ad, eps = 0.016-0.041 here.
    tmr = tmr_adiabatic(T_REF, Q_REF, CP, ea)
    t_end = _time_to(
        lambda t, y: [heat_release_rate(y[0], Q_REF, T_REF, ea) / CP],
        [T_REF],
        lambda y: y[0] - (T_REF + 200.0),
        10 * tmr,
        rtol=1e-10,
        atol=1e-9,
    )
    eps = R_J_PER_MOL_K * T_REF / ea
    assert (1 + 2 * eps) * tmr < t_end < (1 + 3 * eps) * tmr


def test_zero_order_tmr_is_conservative_against_a_depleting_reaction():
    # With depletion (first order, dT_ad = 200 K) the rate peaks where
    # E dT_ad (1 - X)/(R T^2) = 1 (d/dt of k(T)(1 - X) vanishes, with T = T0 + dT_ad X);
    # it peaks later than the zero-order TMR_ad says (Stoessel 2008, ch. 2: the
    # zero-order assumption is on the safe side; from memory).
    dT_ad = 200.0
    tmr = tmr_adiabatic(T_REF, Q_REF, CP, EA)

    def rhs(t, y):
        X = min(y[0], 1.0)
        # q' at X = 0 is Q_REF; depletion scales it by (1 - X); dX/dt = q'/(c_p dT_ad)
        return [heat_release_rate(T_REF + dT_ad * X, Q_REF, T_REF, EA) * (1 - X) / (CP * dT_ad)]

    def past_peak(y):
        T = T_REF + dT_ad * y[0]
        return 1.0 - EA * dT_ad * (1 - y[0]) / (R_J_PER_MOL_K * T**2)

    t_peak = _time_to(rhs, [0.0], past_peak, 10 * tmr, rtol=1e-10, atol=1e-12)
    assert t_peak > tmr


# --- bands (common practice) ----------------------------------------------------------


@pytest.mark.parametrize(
    "dT,word",
    [
        (-20.0, "low"),
        (np.nextafter(50.0, 0.0), "low"),
        (50.0, "medium"),
        (np.nextafter(200.0, 0.0), "medium"),
        (200.0, "high"),
        (np.nextafter(400.0, 0.0), "high"),
        (400.0, "very high"),
        (1500.0, "very high"),
    ],
)
def test_severity_band_at_its_edges(dT, word):
    # dT_ad below 50 K / 50-200 K / 200-400 K / above 400 K: common practice, from
    # memory (cf. Stoessel 2008, ch. 3); an edge falls in the more severe band (ours).
    assert severity_band(dT) == word


@pytest.mark.parametrize(
    "tmr_h,word",
    [
        (0.5, "high"),
        (8.0, "high"),
        (np.nextafter(8.0, 9.0), "medium"),
        (24.0, "medium"),
        (np.nextafter(24.0, 25.0), "low"),
        (math.inf, "low"),
    ],
)
def test_probability_band_at_its_edges(tmr_h, word):
    # TMR_ad above 24 h / 8-24 h / below 8 h: common practice, from memory (cf.
    # Stoessel 2008, ch. 3); an edge falls in the more probable band (ours).
    assert probability_band(tmr_h * HOUR_S) == word


@pytest.mark.parametrize("bad", [0.0, -1.0, float("nan")])
def test_probability_band_refuses_a_non_positive_time(bad):
    with pytest.raises(ValueError):
        probability_band(bad)


# --- the overlay on an estimate (wiring) ----------------------------------------------


def test_safety_overlay_on_an_estimate():
    kin = Kinetics(
        "power", k_ref=4e-4, t_ref_k=343.15, ea_j_per_mol=65e3, order=2.0, activity_sd=0.05
    )
    state = BatchState("B1", "R1", RecipeModel("AX", kin, initial_concentration=1.8), 0.0, 1.8)
    t = np.arange(0.0, 3600.0 + 1, 5.0)
    state.add_temperature(t, np.full_like(t, 343.15))
    cfg = SafetyConfig(
        heat_of_reaction_j_per_mol=-85e3,
        heat_capacity_j_per_kg_k=1900.0,
        density_kg_per_m3=950.0,
        mtt_k=373.15,
        t_d24_k=423.15,
    )
    est = estimate(state, 3600.0, safety=cfg)
    s = est.safety
    dT = 85e3 * 1800.0 / (950.0 * 1900.0)
    assert_allclose(s["delta_t_ad_k"], dT, rtol=1e-14)
    assert_allclose(s["mtsr_k"], 343.15 + (1 - est.conversion) * dT, rtol=1e-14)
    # heat release q = (-dH)(-r_A)/rho with -r_A = k C_A^2 in mol/(m^3 s)
    k = 4e-4 * est.activity  # at T_ref
    q = 85e3 * k * 1000.0 * (1.8 * (1 - est.conversion)) ** 2 / 950.0
    assert_allclose(s["tmr_ad_s"], 1900.0 * 8.314462618 * 343.15**2 / (q * 65e3), rtol=1e-12)
    assert s["criticality_class"] == criticality_class(343.15, s["mtsr_k"], 373.15, 423.15)
