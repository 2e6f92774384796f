"""Bands and limits of the golden profile (monitor.fleet.bands) against numpy.

The reference for every band is ``numpy.quantile`` (linear method, Hyndman &
Fan 1996 definition 7) on the same values, a general-purpose library.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose

from monitor.batch.figures import Trajectory
from monitor.fleet import bands

values = arrays(
    float,
    st.tuples(st.integers(1, 12), st.integers(1, 20)),
    elements=st.floats(-1e3, 1e3, allow_nan=False) | st.just(np.nan),
)
levels = st.lists(st.floats(0.0, 1.0), min_size=1, max_size=5)


@given(values, levels, st.integers(1, 4))
@settings(max_examples=300, deadline=None)
def test_quantiles_equal_numpy_on_each_column(v, qs, min_count):
    got = bands.quantiles(v, qs, min_count)
    for j in range(v.shape[1]):
        col = v[:, j][np.isfinite(v[:, j])]
        if len(col) < min_count:
            assert np.all(np.isnan(got[:, j]))
        else:
            assert_allclose(got[:, j], np.quantile(col, qs), rtol=1e-12, atol=1e-9)


@given(
    st.floats(0.0, 10.0),
    st.floats(0.0, 5.0),
    st.floats(0.0, 5.0),
    st.floats(0.1, 4.0),
    st.floats(0.0, 4.0),
)
def test_a_fence_widens_with_k_and_keeps_its_margin(med, below, above, k, margin):
    """The quantile moved outward by k interquartile ranges, never closer to the median
    than the margin; k = 0 takes the quantile itself."""
    q1, q3 = med - below, med + above
    q_lo, q_hi = q1 - 1.0, q3 + 1.0
    low = bands.limit(med, q_lo, q1, q3, k, margin, "low")
    assert low == pytest.approx(min(q_lo - k * (q3 - q1), med - margin))
    assert bands.limit(med, q_lo, q1, q3, k + 1.0, margin, "low") <= low + 1e-12
    high = bands.limit(med, q_hi, q1, q3, k, margin, "high")
    assert high == pytest.approx(max(q_hi + k * (q3 - q1), med + margin))
    assert bands.limit(med, q3, q1, q3, 0.0, margin, "high") == max(q3, med + margin)


def _traj(rate: float, n: int = 200, step: float = 60.0) -> Trajectory:
    t = np.arange(n) * step
    x = 1.0 - np.exp(-rate * t)
    return Trajectory("B", step, t[-1], t, x, np.zeros(n), np.full(n, 340.0))


def test_time_to_reach_x_inverts_the_trajectory():
    """First-order X = 1 - exp(-k t): the time to reach X is -ln(1 - X)/k (closed form),
    up to the linear interpolation on the 60-s grid."""
    k = 3e-4
    tr = _traj(k)
    x = np.array([0.1, 0.5, 0.9, 0.99])
    got = tr.time_to(x)
    assert_allclose(got[:3], -np.log1p(-x[:3]) / k, rtol=2e-3)
    assert np.isnan(got[3])  # not reached within the trajectory


def test_behind_limits_are_numpy_quantiles_of_the_batches():
    rng = np.random.default_rng(7)
    trajs = [_traj(k) for k in 3e-4 * np.exp(rng.normal(0, 0.08, 15))]
    X = bands.stack(trajs, 200, "conversion")
    x_levels = np.arange(0.05, 0.95, 0.05)
    t_to_x = bands.times_to(trajs, x_levels)
    lim = bands.behind_limits(
        X, t_to_x, x_levels, 60.0, p=0.1, fence=1.5, display_p=0.05,
        margin_x=0.0, margin_lag_s=0.0, min_count=3,
    )  # fmt: skip
    assert_allclose(lim.x_median, np.quantile(X, 0.5, axis=0))
    assert_allclose(lim.x_band_lo, np.quantile(X, 0.05, axis=0))
    q, q1, q3 = np.quantile(X, [0.1, 0.25, 0.75], axis=0)
    assert_allclose(lim.x_limit, q - 1.5 * (q3 - q1))
    t_med = np.quantile(t_to_x, 0.5, axis=0)
    assert_allclose(lim.t_median, t_med)
    t_q, t1, t3 = np.quantile(t_to_x, [0.9, 0.25, 0.75], axis=0)
    assert_allclose(lim.lag_limit_s, t_q + 1.5 * (t3 - t1) - t_med)


def test_temperature_band_holds_its_last_value_past_the_batches():
    T = np.full((4, 10), np.nan)
    T[:, :6] = 340.0 + np.arange(4)[:, None] * 0.1
    lim = bands.temperature_limits(
        T, 60.0, p=0.0, fence=0.0, display_p=0.05, margin_k=1.0, min_count=3
    )
    assert_allclose(lim.median[6:], lim.median[5])
    assert_allclose(lim.limit_lo, lim.median - 1.0)  # the margin, wider than the band
