"""Golden profiles and per-batch figures in the store, on every backend."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

from monitor.batch.figures import hindsight
from monitor.store import Store
from tests.golden_synthetic import SETTINGS, make_batch, synthetic_profile


@pytest.fixture(scope="module")
def profile():
    return synthetic_profile(n=8)


def test_profiles_are_versioned_per_recipe(store_url, profile):
    store = Store(store_url)
    try:
        assert store.golden_versions() == {}
        assert store.golden_profile("SYN") is None
        assert store.save_golden_profile(profile) == 1
        other = dataclasses.replace(profile, recipe="OTHER")
        assert store.save_golden_profile(other) == 1
        rebuilt = dataclasses.replace(profile, created_at_s=86400.0)
        assert store.save_golden_profile(rebuilt) == 2
        assert store.golden_versions() == {"SYN": 2, "OTHER": 1}
        latest = store.golden_profile("SYN")
        assert latest.version == 2 and latest.created_at_s == 86400.0
        first = store.golden_profile("SYN", 1)
        assert first.version == 1 and first.batches == profile.batches
        np.testing.assert_allclose(first.behind.x_limit, profile.behind.x_limit, atol=1e-6)
        assert first.rules == profile.rules
        # the whole record is kept, however long (more than MariaDB's 64 kB TEXT)
        assert len(json.dumps(profile.to_dict())) > 65_535
    finally:
        store.close()


def test_figures_are_stored_and_replaced(store_url):
    rng = np.random.default_rng(3)
    figs = [
        hindsight(make_batch(f"F{i}", a, rng), SETTINGS).figures for i, a in enumerate((0.9, 1.1))
    ]
    store = Store(store_url)
    try:
        store.save_figures(figs, now_s=100.0)
        got = store.load_figures(recipe="SYN")
        assert set(got) == {"F0", "F1"} and got["F0"] == figs[0]
        again = dataclasses.replace(figs[0], activity=0.5)
        store.save_figures([again], now_s=200.0)
        assert store.load_figures(batches=["F0"])["F0"].activity == 0.5
        assert store.load_figures(kinetics_version="elsewhere") == {}
        assert set(store.load_figures(method=figs[0].method)) == {"F0", "F1"}
    finally:
        store.close()
