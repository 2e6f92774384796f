"""The batch estimator on synthetic batches made by an independent path.

Truth comes from scipy's solve_ivp of the batch ODE written out here,
``dX/dt = alpha k_ref exp[-(Ea/R)(1/T - 1/T_ref)] C_A0 (1 - X)^2``, with a chosen true
activity (and Ea), and seeded Gaussian assay noise; the estimator sees only the
temperature trace, the assays and the kinetics file.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp, trapezoid

from monitor.batch.estimator import estimate, posterior_for
from monitor.batch.findings import Kind, of_kind
from monitor.batch.kinetics import Kinetics
from monitor.batch.posterior import log_prior
from monitor.batch.settings import EstimatorSettings
from monitor.batch.state import BatchState, RecipeModel, prior_sd
from monitor.physics.quadrature import reference_time

R = 8.314462618  # J/(mol K), CODATA 2018 (exact)
K_REF, T_REF, EA, SD_EA = 4e-4, 343.15, 65e3, 2000.0  # L/(mol s), K, J/mol, J/mol
C_A0 = 1.8  # mol/L
PLAN = ((0.0, 313.15), (2700.0, 343.15))  # heat up over 45 min, then hold
KIN = Kinetics(
    "power",
    k_ref=K_REF,
    t_ref_k=T_REF,
    ea_j_per_mol=EA,
    order=2.0,
    activity_sd=0.1,
    stderr_ea_j_per_mol=SD_EA,
)
RECIPE = RecipeModel("AX", KIN, 0.95, "concentration", 0.02, C_A0, PLAN)
ASSAY_T = np.array([3600.0, 7200.0, 10800.0])
AT_S = 10800.0  # estimate at 3 h


def plan_T(t):
    return np.interp(t, [p[0] for p in PLAN], [p[1] for p in PLAN])


def truth(alpha, ea=EA, target=0.95, order=2.0):
    """The true X(t) and time to target along the plan, by solve_ivp (RK45, rtol 1e-10)."""

    def f(t, x):
        k = K_REF * np.exp(-(ea / R) * (1.0 / plan_T(t) - 1.0 / T_REF))
        return alpha * k * C_A0 ** (order - 1) * (1.0 - x) ** order

    def hit(t, x):
        return x[0] - target

    hit.terminal = True
    sol = solve_ivp(
        f,
        (0.0, 72 * 3600.0),
        [0.0],
        rtol=1e-10,
        atol=1e-13,
        dense_output=True,
        events=hit,
        max_step=600.0,
    )
    t_end = sol.t_events[0][0] if len(sol.t_events[0]) else None
    return sol.sol, t_end


def make_state(recipe=RECIPE, *, until=AT_S, drop=None, c_a0=C_A0):
    state = BatchState("B1", "R1", recipe, 0.0, c_a0)
    t = np.arange(0.0, until + 1, 5.0)
    if drop is not None:
        t = t[(t < drop[0]) | (t > drop[1])]
    state.add_temperature(t, plan_T(t))
    return state


def noisy_assays(sol, rng, sd=0.02, times=ASSAY_T):
    return C_A0 * (1.0 - sol(times)[0]) + rng.normal(0.0, sd, len(times))


# ---------------------------------------------------------------------------
# Calibration over seeded batches


def test_estimate_is_calibrated_over_seeded_batches():
    # 30 batches whose true activity and Ea are drawn from the kinetics file's stated
    # uncertainty (ln alpha ~ N(0, 0.1^2), Ea ~ N(65, 2^2) kJ/mol): conversion now within
    # 3 sd of truth (at most one of 30 outside, P = 0.997 each), and P10-P90 of the end
    # time containing the truth in about 80% of batches (asserted between 60% and 95%).
    rng = np.random.default_rng(20240601)
    n, outside, covered = 30, 0, 0
    for _ in range(n):
        alpha = float(np.exp(rng.normal(0.0, KIN.activity_sd)))
        ea = float(rng.normal(EA, SD_EA))
        sol, t_end = truth(alpha, ea)
        state = make_state()
        state.add_assays(ASSAY_T, noisy_assays(sol, rng))
        est = estimate(state, AT_S)
        assert est.n_assays_used == 3 and est.warnings == []
        assert est.predicted_end_p10_s <= est.predicted_end_s <= est.predicted_end_p90_s
        outside += abs(est.conversion - sol(AT_S)[0]) > 3.0 * est.conversion_sd
        covered += est.predicted_end_p10_s <= t_end <= est.predicted_end_p90_s
    assert outside <= 1
    assert 0.60 <= covered / n <= 0.95, covered


def test_assays_pull_the_estimate_towards_the_truth():
    # a slow batch (alpha = 0.8, 2 prior sd low): with assays the conversion error is
    # a fraction of the error of the kinetics alone
    rng = np.random.default_rng(7)
    sol, _ = truth(0.8)
    bare = estimate(make_state(), AT_S)
    state = make_state()
    state.add_assays(ASSAY_T, noisy_assays(sol, rng))
    est = estimate(state, AT_S)
    x_true = sol(AT_S)[0]
    assert abs(est.conversion - x_true) < 0.25 * abs(bare.conversion - x_true)
    assert abs(est.activity - 0.8) < 3 * est.activity_sd


# ---------------------------------------------------------------------------
# Assays: outliers, none, late arrival, the mole-balance identity


def test_outlier_assay_is_a_mismatch_finding_and_is_not_used():
    rng = np.random.default_rng(11)
    sol, _ = truth(0.95)
    y = noisy_assays(sol, rng)
    y_bad = y.copy()
    y_bad[1] += 10 * RECIPE.assay_sd  # 10 sigma
    with_outlier = make_state()
    with_outlier.add_assays(ASSAY_T, y_bad)
    without = make_state()
    without.add_assays(ASSAY_T[[0, 2]], y[[0, 2]])
    est = estimate(with_outlier, AT_S)
    ref = estimate(without, AT_S)
    assert est.n_assays_used == 2
    assert est.mismatched_assays == [7200.0]
    (mismatch,) = of_kind(est.findings, Kind.ASSAY_MISMATCH)
    assert mismatch.data["sample_s"] == 7200.0 and mismatch.data["z"] > 4.0
    assert "1970-01-01T02:00:00" in mismatch.message  # names the sample time
    # not used: the answer is that of the batch without it
    assert_allclose(est.conversion, ref.conversion, rtol=1e-12)
    assert_allclose(est.predicted_end_s, ref.predicted_end_s, rtol=1e-12)


def test_no_assays_gives_a_warning_and_the_prior():
    state = make_state()
    est = estimate(state, AT_S)
    assert est.n_assays_used == 0
    assert of_kind(est.findings, Kind.NO_ASSAYS)
    # the activity is the prior's: the mean of alpha = exp(phi) under the prior density
    # of phi (monitor.batch.posterior.log_prior, on the support the estimator uses),
    # integrated here by the trapezoidal rule on a fine grid
    s = prior_sd(KIN)
    support = posterior_for(state, AT_S, EstimatorSettings())[0].phi
    phi = np.linspace(support[0], support[-1], 20001)
    dens = np.exp(log_prior(phi, s))
    assert_allclose(
        est.activity, trapezoid(np.exp(phi) * dens, phi) / trapezoid(dens, phi), rtol=1e-3
    )
    # E[X] and sd[X] over the prior of ln alpha and of Ea ~ N(Ea, se^2): phi on the same
    # fine grid, Ea by Gauss-Hermite with Theta re-integrated at each node (the estimator
    # instead expands ln Theta in Ea)
    t = np.arange(0.0, AT_S + 1, 5.0)
    z, w_ea = np.polynomial.hermite_e.hermegauss(24)
    w_ea = w_ea / w_ea.sum()
    theta = np.array([reference_time(t, plan_T(t), EA + SD_EA * zi, T_REF)[-1] for zi in z])
    X = KIN.law.G_inv(np.exp(phi)[:, None] * K_REF * C_A0 * theta[None, :])
    w_phi = dens / trapezoid(dens, phi)

    def expect(f):
        return trapezoid(w_phi * (f @ w_ea), phi)

    mean = expect(X)
    sd = np.sqrt(expect((X - mean) ** 2))
    n_draws = EstimatorSettings().monte_carlo_draws
    assert abs(est.conversion - mean) < 4 * sd / np.sqrt(n_draws)
    assert_allclose(est.conversion_sd, sd, rtol=0.1)


def test_late_assay_is_applied_at_its_sample_time():
    # lab results arrive late and out of order: the same assays give the same answer
    rng = np.random.default_rng(5)
    sol, _ = truth(1.05)
    y = noisy_assays(sol, rng)
    in_order = make_state()
    in_order.add_assays(ASSAY_T, y)
    late = make_state()
    late.add_assays(ASSAY_T[[2]], y[[2]])
    late.add_assays(ASSAY_T[[0, 1]], y[[0, 1]])
    a, b = estimate(in_order, AT_S), estimate(late, AT_S)
    assert_allclose(a.conversion, b.conversion, rtol=1e-14)
    # an assay sampled after the estimate time is not used for that estimate
    late.add_assays([AT_S + 600.0], [0.1])
    assert estimate(late, AT_S).n_assays_used == 3


@pytest.mark.parametrize("kind,value", [("concentration", 0.4), ("conversion", 0.8)])
def test_mole_balance_identity(kind, value):
    # 100 mol of A charged to 50 L, 20 mol left: X = (N_A0 - N_A)/N_A0 = 0.8, and at
    # constant volume C_A = C_A0 (1 - X) = 0.4 mol/L (common practice). A very precise
    # assay of either kind must give X = 0.8 at its sample time.
    n_a0, n_a, volume_l = 100.0, 20.0, 50.0
    c_a0 = n_a0 / volume_l
    assert_allclose(c_a0 * (1.0 - (n_a0 - n_a) / n_a0), n_a / volume_l, rtol=1e-15)
    kin = dataclasses.replace(KIN, activity_sd=0.5, stderr_ea_j_per_mol=0.0)
    recipe = dataclasses.replace(RECIPE, kinetics=kin, assay_kind=kind, assay_sd=1e-4)
    state = make_state(recipe, c_a0=c_a0)
    t_a = 2 * 3600.0
    state.add_assays([t_a], [value])
    est = estimate(state, t_a)
    assert abs(est.conversion - 0.8) < 5e-4
    # and the model's own assay prediction obeys the same identity
    phi = np.array([np.log(est.activity)])
    x = state.conversion_at(np.array([t_a]), est.activity)
    pred = state.predict_assays(phi, np.array([t_a]))[0]
    expected = c_a0 * (1.0 - x) if kind == "concentration" else x
    assert_allclose(pred, expected, rtol=1e-12)


# ---------------------------------------------------------------------------
# Forecasts that cannot be made


def test_target_above_the_co_reactant_limit_gives_no_time():
    # Theta_B = 0.9 with b = 1: conversion of A cannot pass 0.9 (stoichiometry)
    kin = dataclasses.replace(KIN, rate_law="bimolecular", order=1.0, theta_b=0.9)
    est = estimate(make_state(dataclasses.replace(RECIPE, kinetics=kin)), AT_S)
    assert (est.predicted_end_s, est.predicted_end_p10_s, est.predicted_end_p90_s) == (
        None,
        None,
        None,
    )
    assert "co-reactant" in est.forecast_note and "0.9" in est.forecast_note
    assert 0.0 < est.conversion < 0.9


def test_a_plan_that_ends_cold_gives_no_time():
    cold = PLAN + ((AT_S + 300.0, 343.15), (AT_S + 900.0, 250.0))  # crash-cool after 3 h
    est = estimate(make_state(dataclasses.replace(RECIPE, temperature_plan=cold)), AT_S)
    assert est.predicted_end_s is None and est.predicted_end_p90_s is None
    assert "not reached" in est.forecast_note and "temperature plan" in est.forecast_note
    # the control: the recipe's own plan (held hot) does give a time
    hot = estimate(make_state(), AT_S)
    assert hot.predicted_end_s is not None and hot.forecast_note == ""


def test_forecast_without_plan_holds_the_last_temperature():
    _, t_end = truth(1.0)  # the plan holds 343.15 K after 45 min, as would the last value
    no_plan = dataclasses.replace(RECIPE, temperature_plan=())
    a = estimate(make_state(no_plan), AT_S, EstimatorSettings(monte_carlo_draws=2000))
    assert abs(a.predicted_end_s - t_end) < 0.02 * t_end  # prior median alpha = 1


# ---------------------------------------------------------------------------
# Gaps in the temperature trace


def test_a_gap_longer_than_max_gap_warns_and_widens_the_uncertainty():
    rng = np.random.default_rng(3)
    sol, _ = truth(0.9)
    y = noisy_assays(sol, rng)
    full, gappy = make_state(), make_state(drop=(5000.0, 7000.0))  # 33 min gap in the hold
    for s in (full, gappy):
        s.add_assays(ASSAY_T, y)
    settings = EstimatorSettings(max_gap_s=300.0)
    a, b = estimate(full, AT_S, settings), estimate(gappy, AT_S, settings)
    assert not of_kind(a.findings, Kind.TEMPERATURE_GAP)
    gap_findings = of_kind(b.findings, Kind.TEMPERATURE_GAP)
    assert len(gap_findings) == 1 and gap_findings[0].data["gaps"] == 1
    assert b.conversion_sd > a.conversion_sd * 1.05
    # the same samples with a longer allowed gap: no warning and no widening
    relaxed = BatchState("B1", "R1", RECIPE, 0.0, C_A0, max_gap_s=3600.0)
    t = gappy.trace.t_s[: len(gappy.trace)]
    relaxed.add_temperature(t, plan_T(t))
    relaxed.add_assays(ASSAY_T, y)
    c = estimate(relaxed, AT_S, EstimatorSettings(max_gap_s=3600.0))
    assert not of_kind(c.findings, Kind.TEMPERATURE_GAP)
    assert_allclose(c.conversion_sd, a.conversion_sd, rtol=0.02)


def test_stale_temperature_is_a_warning():
    est = estimate(make_state(until=AT_S - 1200.0), AT_S)
    assert of_kind(est.findings, Kind.TEMPERATURE_STALE)


def test_no_temperature_before_the_estimate_time_is_an_error():
    state = BatchState("B1", "R1", RECIPE, 0.0, C_A0)
    with pytest.raises(ValueError, match="no temperature samples"):
        estimate(state, AT_S)


# ---------------------------------------------------------------------------
# Regression pin of one complete estimate


def test_estimate_regression():
    rng = np.random.default_rng(42)
    sol, _ = truth(0.9)
    state = make_state()
    state.add_assays(ASSAY_T, noisy_assays(sol, rng))
    est = estimate(state, AT_S)
    got = [
        est.conversion,
        est.conversion_sd,
        est.activity,
        est.predicted_end_s,
        est.predicted_end_p10_s,
        est.predicted_end_p90_s,
    ]
    assert_allclose(got, REGRESSION, rtol=1e-9)  # regression


# conversion, conversion_sd, activity, P50, P10, P90 end [s]; seeded, 1,000 draws; from
# the code at commit fbcf202 (Student-t prior on ln alpha)
REGRESSION = [
    0.8582258828549092,
    0.004105820599403178,
    0.9117031376577862,
    30546.524293864757,
    29311.62810383893,
    31832.356685707873,
]  # regression


# ---------------------------------------------------------------------------
# A model every assay contradicts (issue #10: never a confident wrong number)


def test_a_model_every_assay_contradicts_says_so_and_raises_a_critical_alert():
    from monitor.batch import alert_rules

    rng = np.random.default_rng(5)
    sol, _ = truth(1.0)
    y = noisy_assays(sol, rng)
    wrong = dataclasses.replace(KIN, ea_j_per_mol=-68e3)  # a sign error in the kinetics file
    bad = make_state(dataclasses.replace(RECIPE, kinetics=wrong))
    bad.add_assays(ASSAY_T[:1], y[:1])  # the first assay: the prior alone is far off
    est = estimate(bad, 3600.0)
    assert est.model_contradicted and est.n_assays_used == 0
    assert est.findings[0].kind == Kind.MODEL_CONTRADICTED  # it leads
    conds = {
        c.kind: c
        for c in alert_rules.evaluate(est, running=True, now_s=3600.0, stale_after_s=900.0)
    }
    assert conds["model_contradicted"].active
    assert str(conds["model_contradicted"].severity) == "critical"
    raised = alert_rules.alert_changes("B1", list(conds.values()), {}, est.at_s)
    assert "model_contradicted" in {c["kind"] for c in raised if c["op"] == "raise"}
    # the right kinetics: the same assay agrees, and the open alert is cleared
    good = make_state()
    good.add_assays(ASSAY_T[:1], y[:1])
    fixed = estimate(good, 3600.0)
    assert not fixed.model_contradicted and fixed.n_assays_used == 1
    conds = alert_rules.evaluate(fixed, running=True, now_s=3600.0, stale_after_s=900.0)
    changes = alert_rules.alert_changes("B1", conds, {"model_contradicted": 7}, fixed.at_s)
    assert {"op": "clear", "id": 7, "cleared_at_s": 3600.0} in changes


def test_one_mismatched_assay_among_agreeing_ones_is_not_a_contradiction():
    rng = np.random.default_rng(11)
    sol, _ = truth(0.95)
    y = noisy_assays(sol, rng)
    y[1] += 10 * RECIPE.assay_sd
    state = make_state()
    state.add_assays(ASSAY_T, y)
    est = estimate(state, AT_S)
    assert est.n_assays_used == 2 and not est.model_contradicted
