"""Soak: replay 31 plant-days at full speed through the real poll cycle.

Resident memory after the first plant-day must grow by less than 10 % by the
end, and every batch that completes in the export must complete in the store
with a final estimate. Figures are printed (-s).
"""

from __future__ import annotations

import gc
import time

import psutil
import pytest

from monitor.config import load_config
from monitor.service.cycle import Monitor
from sample_historian.replay import Replay
from tests.reliability.harness import iso_to_s, write_config
from tests.store_compare import read_store


@pytest.mark.slow
def test_soak_thirty_plant_days(tmp_path):
    from tests.fixtures_plant import build_plant

    plant = build_plant(tmp_path / "plant", days=31)
    cfg_path = write_config(
        plant.config_path, tmp_path / "live.db", tmp_path / "store.db", tmp_path / "c.toml"
    )
    cfg = load_config(cfg_path)
    start = iso_to_s(plant.truth["history_start"])
    end = iso_to_s(plant.truth["export_end"])
    step = 3 * 3600.0
    replay = Replay(plant.db_path, tmp_path / "live.db", [u.temperature_tag for u in cfg.units])
    replay.start(start)
    monitor = Monitor(cfg, clock=lambda: clock)
    proc = psutil.Process()
    rss_day1 = None
    t0 = time.perf_counter()
    cycles = failed = 0
    clock = start
    while clock < end + step:
        clock += step
        replay.advance_to(clock)
        if monitor.run_cycle_safely() is None:
            failed += 1
        cycles += 1
        if rss_day1 is None and clock - start >= 86_400.0:
            gc.collect()
            rss_day1 = proc.memory_info().rss
    replay.close()
    gc.collect()
    rss_end = proc.memory_info().rss
    growth = rss_end / rss_day1 - 1.0
    dump = read_store(monitor.store)
    stored = {b["batch"]: b for b in dump["batches"].values()}
    estimated = {e["batch"] for e in dump["estimates"].values()}
    complete = [b for b in plant.truth["batches"] if b["state"] == "complete"]
    missing = [
        b["batch"]
        for b in complete
        if b["batch"] not in stored
        or stored[b["batch"]]["state"] != "complete"
        or b["batch"] not in estimated
    ]
    days = (end - start) / 86_400.0
    print(
        f"\nsoak: {days:.1f} plant-days in {cycles} cycles ({failed} failed) in "
        f"{time.perf_counter() - t0:.0f} s; RSS after day 1 {rss_day1 / 2**20:.0f} MB, at the "
        f"end {rss_end / 2**20:.0f} MB ({growth:+.1%}); {len(complete) - len(missing)}/"
        f"{len(complete)} batches complete with a final estimate"
    )
    assert days >= 30
    assert failed == 0
    assert not missing, missing
    assert growth < 0.10
