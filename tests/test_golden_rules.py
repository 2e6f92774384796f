"""The golden alert rules (monitor.batch.alert_rules) on synthetic batches.

A synthetic recipe: second-order kinetics, a heat-up and a hold, batches whose
activity spreads lognormally (seeded), conversion assays with noise. Its golden
profile is built by the real builder; live batches are then judged by the rules
exactly as the service applies them.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from monitor.batch import alert_rules
from monitor.batch.alert_rules import GoldenInput
from monitor.batch.estimator import estimate, posterior_for
from monitor.batch.golden_profile import GoldenProfile
from monitor.batch.golden_signals import batch_past
from monitor.batch.paths import activity_path
from tests.golden_synthetic import SETTINGS, make_batch, synthetic_profile


@pytest.fixture(scope="module")
def profile() -> GoldenProfile:
    return synthetic_profile()


def judge(st, profile, at_rel_s, open_kinds=frozenset(), unit="degC"):
    at = st.start_s + at_rel_s
    post, _, _ = posterior_for(st, at, SETTINGS)
    past = batch_past(st, post, at, 120.0, activity_path(st, at, SETTINGS))
    est = estimate(st, at, SETTINGS)
    golden = GoldenInput(past, profile, frozenset(open_kinds), unit)
    conds = alert_rules.evaluate(est, running=True, now_s=at, stale_after_s=900, golden=golden)
    return {c.kind: c for c in conds}


def test_profile_is_calibrated_and_plain_data(profile):
    cal = profile.calibration
    assert cal["all"]["n"] == 14
    assert cal["all"]["n_flagged"] <= int(0.05 * 14)
    back = GoldenProfile.from_dict(json.loads(json.dumps(profile.to_dict())))
    np.testing.assert_allclose(back.behind.x_limit, profile.behind.x_limit, atol=1e-6)
    assert back.rules == profile.rules and back.batches == profile.batches


def test_a_nominal_batch_raises_nothing(profile):
    rng = np.random.default_rng(1)
    st = make_batch("N", 1.0, rng, until=4 * 3600.0)
    conds = judge(st, profile, 4 * 3600.0)
    assert not any(conds[k].active for k in alert_rules.GOLDEN_KINDS)


def test_a_slow_batch_is_behind_with_a_message_in_plant_terms(profile):
    rng = np.random.default_rng(2)
    st = make_batch("S", 0.7, rng, until=3 * 3600.0)
    c = judge(st, profile, 3 * 3600.0)
    assert c["behind_profile"].active and c["low_activity"].active
    msg = c["behind_profile"].message
    assert msg.startswith("X 0.") and "at 3 h;" in msg and "behind the median good batch" in msg
    assert "good batches" in msg and "behind since" in msg
    assert c["behind_profile"].data["lag_s"] > c["behind_profile"].data["lag_limit_s"]


def test_started_mid_batch_the_first_look_raises_and_a_rerun_agrees(profile):
    """Data time, not cycles: the first evaluation at 4 h already knows the batch has
    been behind for longer than the persistence; the same data give the same answer."""
    rng = np.random.default_rng(3)
    st = make_batch("M", 0.7, rng, until=4 * 3600.0)
    first = judge(st, profile, 4 * 3600.0)["behind_profile"]
    again = judge(st, profile, 4 * 3600.0)["behind_profile"]
    persistence = profile.rules["behind_profile"].persistence.min_duration_s
    assert first.active and first.data["since_s"] is not None
    assert 4 * 3600.0 - (first.data["since_s"] - st.start_s) >= persistence
    assert (again.active, again.message) == (first.active, first.message)


def test_a_cold_hold_is_off_profile_in_the_units_temperature_unit(profile):
    rng = np.random.default_rng(4)
    shift = (5400.0, 9000.0, -6.0)  # 6 K cold for an hour from 1 h 30 min
    st = make_batch("C", 1.0, rng, until=2.4 * 3600.0, shift=shift)
    c = judge(st, profile, 2.4 * 3600.0, unit="degF")["temperature_off_profile"]
    assert c.active
    assert c.message.startswith("temperature 147.2 °F at 2 h 24 min; good batches 158.0–158.0 °F")
    assert "off since 1 h 3" in c.message
    back = make_batch("C2", 1.0, rng, until=3.5 * 3600.0, shift=shift)
    was_open = {"temperature_off_profile"}
    assert not judge(back, profile, 3.5 * 3600.0, was_open)["temperature_off_profile"].active


def test_without_a_profile_the_rules_are_the_old_ones():
    rng = np.random.default_rng(5)
    st = make_batch("P", 1.0, rng, until=2 * 3600.0)
    est = estimate(st, 2 * 3600.0, SETTINGS)
    kinds = [c.kind for c in alert_rules.evaluate(est, running=True, now_s=7200, stale_after_s=900)]
    assert kinds == ["model_contradicted", "assay_mismatch", "target_unreachable", "stale_data"]
