"""A synthetic recipe for golden-profile tests (invented; second-order kinetics).

A heat-up and a hold, batches whose activity spreads lognormally (seeded), and
conversion assays with noise; `synthetic_profile` builds its golden profile with
the real builder.
"""

from __future__ import annotations

import numpy as np

from monitor.batch.figures import hindsight
from monitor.batch.golden_profile import GoldenProfile
from monitor.batch.kinetics import Kinetics
from monitor.batch.settings import EstimatorSettings
from monitor.batch.state import BatchState, RecipeModel
from monitor.fleet.golden import build_profile
from monitor.fleet.history import HistoryItem, RecipeHistory
from monitor.historian.model import Batch

K_REF, T_REF, C_A0 = 6e-4, 343.15, 1.5
KIN = Kinetics("power", K_REF, T_REF, 65e3, order=2.0, activity_sd=0.06)
PLAN = ((0.0, 303.15), (2400.0, 343.15))
RECIPE = RecipeModel("SYN", KIN, 0.95, "conversion", 0.01, C_A0, PLAN)
SETTINGS = EstimatorSettings(monte_carlo_draws=200)
ASSAY_EVERY_S = 2700.0
END_S = 8.5 * 3600.0


def plan_T(t, shift=None):
    T = np.interp(t, [p[0] for p in PLAN], [p[1] for p in PLAN])
    if shift is not None:
        a, b, dT = shift
        T = np.where((t >= a) & (t < b), T + dT, T)
    return T


def make_batch(name, alpha, rng, *, until=END_S, shift=None, start=0.0):
    """A batch started at ``start`` [s], data up to ``until`` after its start."""
    st = BatchState(name, "R1", RECIPE, start, C_A0, end_s=start + END_S)
    t = np.arange(0.0, until + 1.0, 10.0)
    T = plan_T(t, shift)
    st.add_temperature(start + t, T)
    ta = np.arange(ASSAY_EVERY_S, until + 1.0, ASSAY_EVERY_S)
    x = st.conversion_at(start + ta, np.array([alpha]))[0] if len(ta) else np.empty(0)
    st.add_assays(start + ta, np.clip(x + rng.normal(0, 0.01, len(ta)), 0, 1))
    return st


def synthetic_profile(n: int = 14, seed: int = 20261201) -> GoldenProfile:
    """The golden profile of ``n`` synthetic good batches, one a day."""
    rng = np.random.default_rng(seed)
    items = []
    for i, a in enumerate(np.exp(rng.normal(0.0, 0.06, n))):
        st = make_batch(f"G{i:02d}", a, rng, start=i * 86400.0)
        b = Batch(st.batch, "R1", "SYN", st.start_s, st.end_s)
        items.append(HistoryItem(b, st, hindsight(st, SETTINGS)))
    history = RecipeHistory("SYN", RECIPE, tuple(items), ())
    return build_profile(history, estimator=SETTINGS, created_at_s=0.0)
