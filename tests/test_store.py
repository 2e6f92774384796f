"""The monitor's store on every backend: same results, idempotent cycles, migrations recorded."""

from __future__ import annotations

import math

import pytest

from monitor.config import load_config
from monitor.service.cycle import Monitor
from monitor.store import MIGRATIONS, Store, applied_migrations


def _cfg(plant, tmp_path, store_url):
    text = plant.config_path.read_text()
    old = f"sqlite:///{(plant.config_path.parent / 'convmon.db').resolve()}"
    assert old in text
    p = tmp_path / "c.toml"
    p.write_text(text.replace(old, store_url))
    return load_config(p)


@pytest.fixture(scope="module")
def reference(small_plant, tmp_path_factory):
    """The snapshot an SQLite store holds after one cycle over the small plant."""
    tmp = tmp_path_factory.mktemp("ref")
    mon = Monitor(_cfg(small_plant, tmp, f"sqlite:///{tmp / 'ref.db'}"))
    mon.cycle()
    snap = mon.store.snapshot()
    mon.store.close()
    return snap


def _close(a, b) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        return math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-9)
    return a == b


def test_store_contract(store_url, small_plant, tmp_path, reference):
    cfg = _cfg(small_plant, tmp_path, store_url)
    first = Monitor(cfg)
    rep = first.cycle()
    assert rep.estimates_added >= 1
    second = Monitor(cfg).cycle()  # a restart: rebuilt from store and historian
    assert second.estimates_added == 0 and second.alerts_added == 0
    store = Store(store_url)
    try:
        snap = store.snapshot()
        assert applied_migrations(store.engine) == [name for name, _ in MIGRATIONS]
        assert store.heartbeat()["cycles"] == 2
        assert store.load_watermark() == first.watermark
    finally:
        store.close()
    for table in reference:
        assert len(snap[table]) == len(reference[table]), table
        for x, y in zip(snap[table], reference[table], strict=True):
            assert all(_close(u, v) for u, v in zip(x, y, strict=True)), (table, x, y)
