"""Persistence and hysteresis of alert conditions (monitor.batch.episodes).

Properties checked with hypothesis on random series, and a plain sequential
state machine written out here as the reference for the vectorised scan.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.batch.episodes import Persistence, Runs, scan

STEP = 60.0


def reference_states(t, up, down, per: Persistence, clear: Persistence):
    """The state machine, one point at a time (the definition, not the vectorised code)."""
    on, out = False, []
    run_up = run_down = None  # index where the current run began
    for i in range(len(t)):
        run_up = (run_up if run_up is not None else i) if up[i] else None
        d = down[i] and not up[i]
        run_down = (run_down if run_down is not None else i) if d else None
        if not on and run_up is not None:
            on = i - run_up + 1 >= per.min_count and t[i] - t[run_up] >= per.min_duration_s
        elif on and run_down is not None:
            done = i - run_down + 1 >= clear.min_count
            on = not (done and t[i] - t[run_down] >= clear.min_duration_s)
        out.append(on)
    return np.array(out, bool)


signals = st.lists(st.floats(-3.0, 3.0, allow_nan=False), min_size=1, max_size=200)
persistences = st.builds(Persistence, st.sampled_from([0.0, 60.0, 300.0, 900.0]), st.integers(1, 4))


@given(signals, persistences, persistences, st.floats(0.0, 1.0))
@settings(max_examples=300, deadline=None)
def test_scan_matches_the_state_machine(values, per, clear, h):
    v = np.array(values)
    t = np.arange(len(v)) * STEP
    s = scan(t, v > 0, v < -h, per, clear)
    np.testing.assert_array_equal(s.on, reference_states(t, v > 0, v < -h, per, clear))


@given(signals, persistences, st.floats(0.05, 1.0))
@settings(max_examples=300, deadline=None)
def test_a_value_hovering_at_the_limit_raises_at_most_once(values, per, h):
    """Never below ``limit - h`` after the first raise: one episode, never cleared."""
    v = np.clip(np.array(values), -0.999 * h, None)  # hovers around the limit 0
    t = np.arange(len(v)) * STEP
    s = scan(t, v > 0, v < -h, per)
    assert len(s.raised_at_s) <= 1
    assert s.cleared_at_s == ()


@given(signals, persistences, st.floats(0.0, 1.0))
@settings(max_examples=300, deadline=None)
def test_each_episode_is_earned(values, per, h):
    """Raises and clears alternate; each raise follows a run of the raise condition at
    least as long as the persistence, each clear a run of the clear condition."""
    v = np.array(values)
    t = np.arange(len(v)) * STEP
    s = scan(t, v > 0, v < -h, per)
    events = sorted([(x, "r") for x in s.raised_at_s] + [(x, "c") for x in s.cleared_at_s])
    kinds = [k for _, k in events]
    assert all(a != b for a, b in zip(kinds, kinds[1:], strict=False))
    if kinds:
        assert kinds[0] == "r"
    for at, kind in events:
        i = int(round(at / STEP))
        cond = v > 0 if kind == "r" else v < -h
        j = i
        while j > 0 and cond[j - 1]:
            j -= 1
        assert cond[i]
        assert i - j + 1 >= per.min_count and t[i] - t[j] >= per.min_duration_s


@given(signals, persistences, st.integers(1, 199))
@settings(max_examples=200, deadline=None)
def test_the_scan_is_causal(values, per, cut):
    """The state at a point depends only on the data up to it: a monitor started later,
    or re-running the same data, sees the same past."""
    v = np.array(values)
    t = np.arange(len(v)) * STEP
    whole = scan(t, v > 0, v < -0.2, per)
    k = min(cut, len(v))
    part = scan(t[:k], v[:k] > 0, v[:k] < -0.2, per)
    np.testing.assert_array_equal(part.on, whole.on[:k])


@given(st.lists(signals, min_size=1, max_size=5), persistences)
@settings(max_examples=100, deadline=None)
def test_rows_are_independent_series(rows, per):
    n = min(len(r) for r in rows)
    v = np.array([r[:n] for r in rows])
    t = np.arange(n) * STEP
    on = Runs(t, v > 0, v < -0.3).states(per)[0]
    for row, got in zip(v, on, strict=True):
        np.testing.assert_array_equal(got, scan(t, row > 0, row < -0.3, per).on)


def test_started_mid_batch_it_raises_on_the_first_look():
    """Behind for 40 min of data time when the monitor first looks: raised at once, and
    the episode is dated from when the condition began."""
    t = np.arange(0, 121) * STEP  # two hours of data
    up = t >= 80 * STEP
    s = scan(t, up, ~up, Persistence(1800.0))
    assert s.active(was_open=False)
    assert s.since_s == 80 * STEP
    assert s.raised_at_s == (110 * STEP,)


def test_an_open_alert_needs_the_clear_condition_to_close():
    """Between the two thresholds an open alert stays open (hysteresis across
    evaluations), even when a new posterior means the scan no longer raises it."""
    t = np.arange(0, 30) * STEP
    middle = np.zeros(30, bool)
    s = scan(t, middle, middle, Persistence(300.0))
    assert not s.active(was_open=False)
    assert s.active(was_open=True)
    cleared = scan(t, middle, np.ones(30, bool), Persistence(300.0))
    assert not cleared.active(was_open=True)
