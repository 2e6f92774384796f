"""Kill the monitor with SIGKILL at random points of a replay; the store must not notice.

30 seeded runs, each killed 1-3 times at random moments and restarted; the final
store must equal that of an uninterrupted run on every column of every table
(`tests.store_compare`: estimates with their P10/P90, sds, warnings and documents,
alerts, batches, watermarks, kinetics versions, heartbeat, archive index): nothing
lost, nothing doubled. The monitor's clock is the replay's plant time, so the two
runs store the same times. Figures are printed (-s).
"""

from __future__ import annotations

import os
import time

import pytest

from tests.reliability.harness import iso_to_s, replay_run
from tests.store_compare import compare_stores, read_store, row_counts

RUNS = int(os.environ.get("CONVMON_KILL_RUNS", "30"))
STALLS = frozenset({1})  # the feed stalls a tick while batches run: stale-data alerts, cleared

#: Not compared, and why. Everything else is, to 1e-9 relative for floats.
EXCLUDED = {
    "heartbeat.cycles": (
        "a kill that lands after a cycle's commit makes the restarted monitor run that "
        "tick's cycle again, which adds nothing but counts; bounded below instead"
    ),
}


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
    clean_url, _ = replay_run(
        short_plant.db_path,
        short_plant.config_path,
        tmp_path / "clean",
        start_s=start,
        ticks=ticks,
        step_s=step,
        seed=None,
        stalls=STALLS,
    )
    clean = read_store(clean_url)
    counts = row_counts(clean)
    assert counts["estimates"] and counts["batches"]
    assert any(a["cleared_at_s"] for a in clean["alerts"].values()), "no alert cleared"
    (clean_beat,) = clean["heartbeat"].values()
    assert clean_beat["cycles"] == ticks and clean_beat["failed_cycles"] == 0
    kills = 0
    for seed in range(RUNS):
        url, stats = replay_run(
            short_plant.db_path,
            short_plant.config_path,
            tmp_path / f"run{seed}",
            start_s=start,
            ticks=ticks,
            step_s=step,
            seed=seed,
            stalls=STALLS,
        )
        kills += stats["kills"]
        got = read_store(url)
        diffs = compare_stores(got, clean, exclude=EXCLUDED)
        assert not diffs, f"seed {seed}:\n" + "\n".join(diffs[:20])
        (beat,) = got["heartbeat"].values()
        assert ticks <= beat["cycles"] <= ticks + stats["kills"], (seed, beat, stats)
    n_values = sum(len(r) for rows in clean.values() for r in rows.values())
    print(
        f"\nkill/restart: {RUNS} runs, {kills} SIGKILLs, {ticks} cycles each; final store "
        f"equal to the uninterrupted run in all, every column of every table but "
        f"{', '.join(EXCLUDED)} ({', '.join(f'{n} {t}' for t, n in counts.items())} rows; "
        f"{n_values} values compared per run); {time.perf_counter() - t0:.0f} s"
    )
