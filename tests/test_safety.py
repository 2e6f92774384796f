"""Thermal-safety overlay formulas (advisory only)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose

from monitor.batch.estimator import estimate
from monitor.batch.kinetics import Kinetics
from monitor.batch.state import BatchState, RecipeModel
from monitor.config import SafetyConfig
from monitor.physics.safety import (
    adiabatic_temperature_rise,
    criticality_class,
    mtsr,
    tmr_adiabatic,
)


def test_adiabatic_temperature_rise_by_hand():
    # dT_ad = (-dH_r) C_A0 / (rho c_p) (common practice). By hand, in SI:
    # -dH = 85,000 J/mol; C_A0 = 1.8 mol/L = 1,800 mol/m^3; rho c_p = 950 * 1900 =
    # 1,805,000 J/(m^3 K); dT = 153,000,000 / 1,805,000 = 84.76 K.
    assert round(adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0), 2) == 84.76
    assert_allclose(
        adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0),
        85e3 * 1800.0 / (950.0 * 1900.0),
        rtol=1e-15,
    )
    # an endothermic reaction cools; the rise scales with the charge
    assert adiabatic_temperature_rise(40e3, 1.0, 1000.0, 4184.0) < 0
    assert_allclose(
        adiabatic_temperature_rise(-85e3, 3.6, 950.0, 1900.0),
        2 * adiabatic_temperature_rise(-85e3, 1.8, 950.0, 1900.0),
        rtol=1e-15,
    )


def test_mtsr_of_a_batch_accumulates_the_unreacted_fraction():
    # MTSR = T + (1 - X) dT_ad for a batch (Stoessel 2008, ch. 3, from memory)
    X = np.array([0.0, 0.25, 0.9, 1.0])
    assert_allclose(mtsr(333.15, X, 80.0), 333.15 + (1 - X) * 80.0, rtol=1e-15)


# Stoessel, Thermal Safety of Chemical Processes, Wiley-VCH 2008, ch. 3 (criticality
# classes, from memory): the order of MTSR, MTT and T_D24 above the process temperature.
CLASS_ORDERS = {
    1: ("MTSR", "MTT", "T_D24"),
    2: ("MTSR", "T_D24", "MTT"),
    3: ("MTT", "MTSR", "T_D24"),
    4: ("MTT", "T_D24", "MTSR"),
    5: ("T_D24", "MTT", "MTSR"),
}


@pytest.mark.parametrize("expected,order", sorted(CLASS_ORDERS.items()))
def test_criticality_class_for_each_ordering(expected, order):
    levels = dict(zip(order, (350.0, 380.0, 410.0), strict=True))  # K, above T_p = 333.15 K
    assert criticality_class(333.15, levels["MTSR"], levels["MTT"], levels["T_D24"]) == expected


def test_decomposition_below_mtsr_is_class_5_even_when_mtt_is_higher():
    # T_D24 < MTSR < MTT: a runaway would trigger the decomposition before the boiling
    # barrier is reached (Stoessel 2008, class 5: T_D24 below both MTSR and MTT, from
    # memory). This ordering was once classed 2, the class with MTSR < T_D24.
    assert criticality_class(333.15, mtsr_k=380.0, mtt_k=410.0, t_d24_k=350.0) == 5


def test_every_ordering_of_the_three_levels_is_classified_by_the_definitions():
    # all 6 orderings: the class follows from two facts, is the MTT (boiling barrier)
    # above MTSR, and is T_D24 above MTSR / above MTT.
    for order in itertools.permutations(("MTSR", "MTT", "T_D24")):
        lv = dict(zip(order, (350.0, 380.0, 410.0), strict=True))
        m, b, d = lv["MTSR"], lv["MTT"], lv["T_D24"]
        if d < m:
            expected = 4 if b < d else 5  # decomposition reachable by the runaway
        elif m < b:
            expected = 1 if b < d else 2
        else:
            expected = 3
        assert criticality_class(333.15, m, b, d) == expected, order


def test_tmr_adiabatic_formula():
    # TMR_ad = c_p R T^2 / (q Ea) (Townsend & Tou, Thermochim. Acta 37 (1980) 1-30).
    # By hand: 1900 J/(kg K) * 8.314462618 J/(mol K) * (350 K)^2 / (1 W/kg * 100 kJ/mol)
    # = 19,351.9 s = 5.376 h.
    t = tmr_adiabatic(350.0, 1.0, 1900.0, 100e3)
    assert_allclose(t, 1900.0 * 8.314462618 * 350.0**2 / (1.0 * 100e3), rtol=1e-15)
    assert round(t / 3600.0, 3) == 5.376
    # inversely proportional to the heat-release rate; no release, no runaway
    assert_allclose(tmr_adiabatic(350.0, 4.0, 1900.0, 100e3), t / 4, rtol=1e-15)
    assert tmr_adiabatic(350.0, 0.0, 1900.0, 100e3) == float("inf")


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
