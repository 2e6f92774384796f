"""Kill the monitor with SIGKILL at random points of a replay; the store must not notice.

30 seeded runs, each killed 1-3 times at random moments and restarted; the final
store (estimates, alerts, batches, archive index) must equal that of an
uninterrupted run: nothing lost, nothing doubled. Figures are printed (-s).
"""

from __future__ import annotations

import os
import time

import pytest

from tests.reliability.harness import iso_to_s, replay_run, same_snapshot

RUNS = int(os.environ.get("CONVMON_KILL_RUNS", "30"))


@pytest.fixture(scope="module")
def short_plant(tmp_path_factory):
    from tests.fixtures_plant import build_plant

    return build_plant(tmp_path_factory.mktemp("kill_plant"), days=3)


@pytest.mark.slow
def test_sigkill_restart_leaves_the_same_store(short_plant, tmp_path):
    end = iso_to_s(short_plant.truth["export_end"])
    ticks, step = 15, 7200.0  # 30 plant-hours: batches start, run and finish
    start = end - ticks * step
    t0 = time.perf_counter()
    clean, _ = replay_run(
        short_plant.db_path,
        short_plant.config_path,
        tmp_path / "clean",
        start_s=start,
        ticks=ticks,
        step_s=step,
        seed=None,
    )
    assert clean["estimates"] and clean["batches"]
    kills = 0
    for seed in range(RUNS):
        snap, stats = replay_run(
            short_plant.db_path,
            short_plant.config_path,
            tmp_path / f"run{seed}",
            start_s=start,
            ticks=ticks,
            step_s=step,
            seed=seed,
        )
        kills += stats["kills"]
        diffs = same_snapshot(clean, snap)
        assert not diffs, f"seed {seed}: {diffs[:5]}"
    print(
        f"\nkill/restart: {RUNS} runs, {kills} SIGKILLs, {ticks} cycles each; final store "
        f"equal to the uninterrupted run in all ({len(clean['estimates'])} estimates, "
        f"{len(clean['alerts'])} alerts, {len(clean['batches'])} batches); "
        f"{time.perf_counter() - t0:.0f} s"
    )
