"""Hindsight figures of a completed batch (monitor.batch.figures) on synthetic batches.

The reference is the closed form of a second-order batch at constant
temperature, ``X/(1 - X) = alpha k C_A0 t`` (the integrated second-order rate
law in conversion; Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999,
eq. 3.16 with C_A = C_A0 (1 - X); from memory).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from monitor.batch.figures import (
    BatchFigures,
    excluded_by_reason,
    hindsight,
    hold_windows,
    mean_hold_temperature,
)
from monitor.batch.kinetics import Kinetics
from monitor.batch.settings import EstimatorSettings
from monitor.batch.state import BatchState, RecipeModel

K_REF, T_REF, C_A0, ALPHA = 8e-4, 343.15, 1.8, 0.9  # L/(mol s), K, mol/L, -
KIN = Kinetics("power", K_REF, T_REF, 65e3, order=2.0, activity_sd=0.1)
END_S = 4.5 * 3600.0
ASSAY_T = np.arange(1800.0, END_S, 1800.0)


def x_true(t_s):
    u = ALPHA * K_REF * C_A0 * np.asarray(t_s)
    return u / (1.0 + u)


def state_for(kind="conversion", *, residuals=None, plan=((0.0, T_REF),), charge=True):
    recipe = RecipeModel(
        "AX", KIN, 0.95, kind, 0.002 if kind == "conversion" else 0.004, C_A0, plan
    )
    st = BatchState("B1", "R1", recipe, 0.0, C_A0, end_s=END_S, charge_from_tag=charge)
    t = np.arange(0.0, END_S + 1.0, 10.0)
    st.add_temperature(t, np.full(len(t), T_REF))
    x = x_true(ASSAY_T) + (0.0 if residuals is None else residuals)
    st.add_assays(ASSAY_T, x if kind == "conversion" else C_A0 * (1.0 - x))
    return st


def test_activity_time_to_target_and_final_conversion_match_the_closed_form():
    h = hindsight(state_for(), EstimatorSettings())
    f = h.figures
    t_star = 0.95 / 0.05 / (ALPHA * K_REF * C_A0)  # X/(1-X) = 19
    assert f.activity == pytest.approx(ALPHA, rel=2e-3)
    assert f.time_to_target_s == pytest.approx(t_star, rel=2e-3)
    # t* is proportional to 1/alpha: the same relative spread
    rel = f.time_to_target_sd_s / f.time_to_target_s
    assert rel == pytest.approx(f.activity_sd / f.activity, rel=0.1)
    assert f.final_conversion == pytest.approx(x_true(END_S), abs=5e-4)
    assert f.last_assay_conversion == pytest.approx(x_true(ASSAY_T[-1]), abs=1e-12)
    assert f.n_assays == f.n_assays_used == len(ASSAY_T)
    assert f.problems == ()
    # the trajectory is the model on the grid; past the end it is extrapolated
    tr = h.trajectory
    assert_allclose(tr.conversion, x_true(tr.t_rel_s), atol=1e-3)
    assert np.all(np.isnan(tr.temperature_k[tr.t_rel_s > END_S]))
    assert tr.time_to([0.95])[0] == pytest.approx(t_star, rel=2e-3)


def test_a_concentration_assay_is_converted_with_the_charge():
    h = hindsight(state_for("concentration"), EstimatorSettings())
    assert h.figures.last_assay_conversion == pytest.approx(x_true(ASSAY_T[-1]), abs=1e-9)
    assert h.figures.activity == pytest.approx(ALPHA, rel=5e-3)


def test_assay_rmse_is_the_scatter_about_the_model():
    """Alternating residuals of 0.003 leave the activity in place: RMSE 0.003."""
    r = 0.003 * (-1.0) ** np.arange(len(ASSAY_T))
    f = hindsight(state_for(residuals=r), EstimatorSettings()).figures
    assert f.assay_rmse == pytest.approx(0.003, rel=0.1)


def test_mean_hold_temperature_weights_the_plan_holds_by_time():
    plan = ((0.0, 300.0), (600.0, 340.0), (1200.0, 340.0), (1500.0, 350.0))
    assert hold_windows(plan, 0.0, END_S) == [(600.0, 1200.0), (1500.0, END_S)]
    st = state_for(plan=plan)
    t = np.arange(0.0, END_S + 1.0, 10.0)
    fresh = BatchState("B2", "R1", st.recipe, 0.0, C_A0, end_s=END_S)
    fresh.add_temperature(t, np.interp(t, [p[0] for p in plan], [p[1] for p in plan]))
    expected = (600.0 * 340.0 + (END_S - 1500.0) * 350.0) / (600.0 + END_S - 1500.0)
    assert mean_hold_temperature(fresh) == pytest.approx(expected, rel=1e-9)


def test_data_problems_and_exclusions_are_recorded():
    r = np.zeros(len(ASSAY_T))
    r[3] = 0.2  # one assay far off: left out and reported
    st = state_for(residuals=r, charge=False)
    h = hindsight(
        st,
        EstimatorSettings(),
        excluded=excluded_by_reason(
            [
                {"tag": "T", "reason": "bad_quality", "count": 3},
                {"tag": "A", "reason": "bad_quality", "count": 1},
                {"tag": "T", "reason": "out_of_limits", "count": 2},
            ]
        ),
        event_problems=("two start events; the first is used",),
    )
    f = h.figures
    assert f.excluded == {"bad_quality": 4, "out_of_limits": 2}
    assert f.problem_kinds() == {"assay_mismatch", "no_charge", "events"}
    assert f.n_assays_used == len(ASSAY_T) - 1


def test_figures_survive_json():
    f = hindsight(state_for(), EstimatorSettings()).figures
    back = BatchFigures.from_dict(json.loads(json.dumps(f.to_dict())))
    assert back == f


def test_a_running_batch_has_no_hindsight():
    st = state_for()
    st.end_s = None
    with pytest.raises(ValueError, match="completed batch"):
        hindsight(st, EstimatorSettings())
