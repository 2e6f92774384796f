"""One poll cycle of the live monitor for 50 to 400 concurrently running batches.

A SQLite historian export of 400 units is built in a temporary folder with
``sqlite3.executemany``: 5,200 temperature rows per unit (5-s samples, 7.2 h, about
2.1 million rows in all, inserted in arrival order across the units), a charge row and
lab assays (sampled every 45 min, arriving 15 min later) for each unit's running batch,
the batches started at staggered times 1 to 6.5 h before the end, and five completed
batches per unit in the events table. For each N in 50, 100, 200, 400 the file is copied
(the events of the other units removed, their sample rows kept), a configuration with N
``[[units]]`` (one recipe, DIM-7 with ``config/kinetics/dim7.toml``, power law) is built
with `config_from_dict`, and a monitor runs:

* a warm-up cycle (the first: backfill of every batch from its start), timed apart;
* steady cycles, each after appending 10 new temperature samples per unit and a few
  assays (N/50, at least 2), timed around `Monitor.run_cycle_safely` as the scheduler
  calls it (wall and this process's CPU time), with the read / estimate / commit split
  from `CycleReport.timings`. The four monitors take turns cycle by cycle, so a change
  in the machine's other load falls on every N alike.

The table gives the median steady cycle; the aim is under 1 s for 200 batches, growing
linearly: the ratios time(400)/time(200) and time(200)/time(100), measured in the same
run, are 2.0 for linear growth. When the 200-batch cycle misses 1 s (or with
``explain=True``), cProfile shows where its time goes, and 200-batch monitors with fewer
Monte Carlo draws or a shorter forecast horizon (settings) are timed in turns with the
default one.

Run with ``python -c "from tests.benchmarks.bench_cycle import main; main()"``.
"""

from __future__ import annotations

import cProfile
import io
import json
import os
import pstats
import shutil
import sqlite3
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from monitor.config import EstimatorConfig, config_from_dict, load_kinetics
from monitor.physics.quadrature import reference_time
from monitor.physics.rate_laws import power_G_inv
from monitor.service.cycle import Monitor

REPO = Path(__file__).resolve().parents[2]
KINETICS = REPO / "config" / "kinetics" / "dim7.toml"
N_VALUES = (50, 100, 200, 400)
UNITS = max(N_VALUES)
HISTORY_ROWS = 5_200  # temperature rows per unit before the first cycle
SAMPLE_S = 5.0
NEW_PER_CYCLE = 10  # temperature samples per unit per cycle (a 50-s poll)
STEADY_CYCLES = 7
PAST_BATCHES = 5  # completed batches per unit in the events table
ASSAY_EVERY_S, ASSAY_DELAY_S = 2700.0, 900.0
C_A0 = 1.60  # [mol/L]
PLAN_C = [[0, 30.0], [50, 70.0], [240, 70.0], [270, 76.0]]  # [min, degC], the sample plant's
IDLE_C = 25.0
T_END = 1_793_620_800.0  # 2026-11-02T12:00:00Z, the end of the built history
AIM_200_S = 1.0
_DEFAULTS = {
    "monte_carlo_draws": EstimatorConfig.monte_carlo_draws,
    "horizon_h": EstimatorConfig.horizon_h,
}


def _iso(t_s: np.ndarray) -> list[str]:
    ms = np.round(np.asarray(t_s) * 1000.0).astype("int64").astype("datetime64[ms]")
    return [s + "+00:00" for s in np.datetime_as_string(ms, unit="ms").tolist()]


def _plan_c(t_rel_s: np.ndarray) -> np.ndarray:
    pts = np.asarray(PLAN_C, dtype=float)
    return np.where(t_rel_s < 0, IDLE_C, np.interp(t_rel_s / 60.0, pts[:, 0], pts[:, 1]))


class Plant:
    """The invented 400-unit plant: batch starts, activities and where each trace stands."""

    def __init__(self, seed: int = 6):
        self.rng = np.random.default_rng(seed)
        i = np.arange(UNITS)
        self.units = [f"R-{k:03d}" for k in range(UNITS)]
        self.tags = [f"U{k:03d}" for k in range(UNITS)]
        # staggered: every unit's batch started 1 to 6.5 h before the history's end
        self.start_s = T_END - 3600.0 * (1.0 + 5.5 * ((i * 7) % UNITS) / UNITS)
        self.start_s = np.round(self.start_s)
        self.phase_s = (i * 0.37) % SAMPLE_S
        self.alpha = np.exp(self.rng.normal(0.0, 0.05, UNITS))
        self.last_t_s = T_END - SAMPLE_S + self.phase_s  # advanced by the feed
        self.kin = load_kinetics(KINETICS)

    def temperature_c(self, unit: int, t_s: np.ndarray) -> np.ndarray:
        noise = self.rng.normal(0.0, 0.05, len(t_s))
        return _plan_c(t_s - self.start_s[unit]) + noise

    def concentration(self, unit: int, t_s: np.ndarray) -> np.ndarray:
        """C_A [mol/L] at sample times from the second-order law along the plan."""
        start = self.start_s[unit]
        grid = np.arange(start, max(t_s.max(), start) + 30.0, 30.0)
        theta = reference_time(
            grid, _plan_c(grid - start) + 273.15, self.kin.ea_j_per_mol, self.kin.t_ref_k
        )
        x = power_G_inv(self.alpha[unit] * self.kin.k_ref * C_A0 * np.interp(t_s, grid, theta), 2.0)
        return C_A0 * (1.0 - x) + self.rng.normal(0.0, 0.005, len(t_s))


def build_historian(path: Path, plant: Plant) -> dict:
    """Write the export; returns its row counts and build time."""
    t0 = time.perf_counter()
    tags, t, value, arrival = [], [], [], []
    for k in range(UNITS):
        tt = T_END - SAMPLE_S * np.arange(HISTORY_ROWS, 0, -1) + plant.phase_s[k]
        tags.append(np.full(len(tt), f"{plant.tags[k]}.TT", dtype=object))
        t.append(tt)
        value.append(plant.temperature_c(k, tt))
        arrival.append(tt)
        ta = np.arange(plant.start_s[k] + 1800.0, T_END - ASSAY_DELAY_S, ASSAY_EVERY_S)
        if len(ta):
            tags.append(np.full(len(ta), f"{plant.tags[k]}.ASSAY", dtype=object))
            t.append(ta)
            value.append(plant.concentration(k, ta))
            arrival.append(ta + ASSAY_DELAY_S)
        tags.append(np.array([f"{plant.tags[k]}.CA0"], dtype=object))
        t.append(np.array([plant.start_s[k] + 60.0]))
        value.append(np.array([C_A0]))
        arrival.append(np.array([plant.start_s[k] + 60.0]))
    tags, t, value, arrival = (np.concatenate(a) for a in (tags, t, value, arrival))
    order = np.argsort(arrival, kind="stable")
    tags, t, value = tags[order], t[order], np.round(value[order], 3)
    ts = _iso(t)
    if path.exists():
        path.unlink()
    con = sqlite3.connect(path)
    con.executescript(
        "PRAGMA journal_mode=OFF; PRAGMA synchronous=OFF;"
        "CREATE TABLE tag_samples (seq INTEGER PRIMARY KEY, tag TEXT NOT NULL, "
        "ts TEXT NOT NULL, value REAL, quality INTEGER NOT NULL);"
        "CREATE TABLE batch_events (seq INTEGER PRIMARY KEY, batch_id TEXT NOT NULL, "
        "unit TEXT NOT NULL, recipe TEXT NOT NULL, event TEXT NOT NULL, ts TEXT NOT NULL);"
    )
    con.executemany(
        "INSERT INTO tag_samples VALUES (?, ?, ?, ?, 0)",
        zip(range(1, len(t) + 1), tags.tolist(), ts, value.tolist(), strict=True),
    )
    events = []
    for k in range(UNITS):
        for j in range(PAST_BATCHES, 0, -1):  # 6-h batches, 2 h apart, before the history
            s = plant.start_s[k] - HISTORY_ROWS * SAMPLE_S - j * 8 * 3600.0
            events.append((s, f"B{k:03d}-{PAST_BATCHES - j}", plant.units[k], "start"))
            events.append((s + 6 * 3600.0, f"B{k:03d}-{PAST_BATCHES - j}", plant.units[k], "end"))
        events.append((plant.start_s[k], f"B{k:03d}-{PAST_BATCHES}", plant.units[k], "start"))
    events.sort()
    ev_ts = _iso(np.array([e[0] for e in events]))
    con.executemany(
        "INSERT INTO batch_events VALUES (?, ?, ?, 'DIM-7', ?, ?)",
        [(i + 1, e[1], e[2], e[3], ev_ts[i]) for i, e in enumerate(events)],
    )
    con.executescript(
        "CREATE INDEX ix_tag_samples_tag_ts ON tag_samples (tag, ts);"
        "CREATE INDEX ix_batch_events_unit_ts ON batch_events (unit, ts);"
    )
    con.commit()
    con.close()
    return {
        "rows": len(t),
        "events": len(events),
        "build_s": time.perf_counter() - t0,
        "mb": path.stat().st_size / 1e6,
    }


class Feed:
    """Appends each cycle's new rows for the first ``n`` units (in arrival order)."""

    def __init__(self, path: Path, plant: Plant, n: int):
        self.con = sqlite3.connect(path)
        # N running batches: the other units' events go; their sample rows stay (a
        # historian holds many tags the monitor does not read)
        self.con.execute(
            "DELETE FROM batch_events WHERE unit NOT IN (SELECT value FROM json_each(?))",
            (json.dumps(plant.units[:n]),),
        )
        self.con.commit()
        self.plant, self.n = plant, n
        self.last_t_s = plant.last_t_s.copy()
        self.seq = self.con.execute("SELECT MAX(seq) FROM tag_samples").fetchone()[0]
        self.cycle = 0

    def advance(self) -> float:
        """One poll interval of plant data; returns the new plant time [s]."""
        p, rows = self.plant, []
        step = SAMPLE_S * np.arange(1, NEW_PER_CYCLE + 1)
        n_assays = max(2, self.n // 50)
        with_assay = {(self.cycle * n_assays + j) % self.n for j in range(n_assays)}
        for k in range(self.n):
            tt = self.last_t_s[k] + step
            rows.extend(
                zip(
                    [f"{p.tags[k]}.TT"] * len(tt),
                    tt.tolist(),
                    np.round(p.temperature_c(k, tt), 3).tolist(),
                    strict=True,
                )
            )
            self.last_t_s[k] = tt[-1]
            if k in with_assay:
                ta = np.array([tt[-1] - ASSAY_DELAY_S])
                rows.append(
                    (
                        f"{p.tags[k]}.ASSAY",
                        float(ta[0]),
                        float(np.round(p.concentration(k, ta)[0], 4)),
                    )
                )
        rows.sort(key=lambda r: r[1])
        ts = _iso(np.array([r[1] for r in rows]))
        self.con.executemany(
            "INSERT INTO tag_samples VALUES (?, ?, ?, ?, 0)",
            [(self.seq + i + 1, r[0], ts[i], r[2]) for i, r in enumerate(rows)],
        )
        self.con.commit()
        self.seq += len(rows)
        self.cycle += 1
        return float(self.last_t_s[: self.n].max())

    def close(self):
        self.con.close()


def monitor_config(db: Path, store: Path, n: int, **estimator):
    units = [
        {
            "name": f"R-{k:03d}",
            "temperature_tag": f"U{k:03d}.TT",
            "temperature_unit": "degC",
            "temperature_limits": [-10.0, 200.0],
            "assay_tag": f"U{k:03d}.ASSAY",
            "charge_tag": f"U{k:03d}.CA0",
        }
        for k in range(n)
    ]
    data = {
        "historian": {
            "url": f"sqlite:///{db}",
            "naive_timezone": "UTC",
            "samples_columns": {
                "seq": "seq",
                "tag": "tag",
                "time": "ts",
                "value": "value",
                "quality": "quality",
            },
        },
        "store": {"url": f"sqlite:///{store}"},
        "units": units,
        "recipes": {
            "DIM-7": {
                "kinetics": str(KINETICS),
                "assay_kind": "concentration",
                "assay_sd": 0.02,
                "initial_concentration": C_A0,
                "target_conversion": 0.95,
                "temperature_plan": PLAN_C,
                "plan_unit": "degC",
                "safety": {
                    "heat_of_reaction": "-70 kJ/mol",
                    "heat_capacity": "1.85 kJ/(kg*K)",
                    "density": "920 kg/m^3",
                    "mtt": "110 degC",
                    "t_d24": "160 degC",
                },
            }
        },
    }
    if estimator:
        data["estimator"] = estimator
    return config_from_dict(data, REPO / "bench_cycle.toml")


class CycleRun:
    """One monitor on its own copy of the historian, configured for the first ``n`` units."""

    def __init__(self, base: Path, work: Path, plant: Plant, n: int, **estimator):
        self.n = n
        label = "".join(f"_{k}{v:g}" for k, v in estimator.items())  # a file per run
        self.db, store = work / f"historian_{n}{label}.db", work / f"store_{n}{label}.db"
        shutil.copyfile(base, self.db)
        store.unlink(missing_ok=True)
        self.feed = Feed(self.db, plant, n)
        self.clock = {"t": float(plant.last_t_s[:n].max())}
        cfg = monitor_config(self.db, store, n, **estimator)
        self.monitor = Monitor(cfg, clock=lambda: self.clock["t"])
        self.cycles: list[dict] = []
        t0 = time.perf_counter()
        rep = self.monitor.run_cycle_safely()
        self.warmup_s = time.perf_counter() - t0
        if rep is None or rep.running != n:
            raise RuntimeError(f"warm-up cycle for N={n}: {rep}")

    def step(self, prof: cProfile.Profile | None = None) -> None:
        """Append one poll interval of data, then one timed cycle."""
        self.clock["t"] = self.feed.advance()
        if prof:
            prof.enable()
        t0, c0 = time.perf_counter(), time.process_time()
        rep = self.monitor.run_cycle_safely()
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        if prof:
            prof.disable()
        if rep is None or rep.running != self.n or rep.estimates_added != self.n:
            raise RuntimeError(f"steady cycle for N={self.n} did not estimate every batch: {rep}")
        if prof is None:
            self.cycles.append({"wall": wall, "cpu": cpu, "rows": rep.rows_read, **rep.timings})

    def summary(self) -> dict:
        c = self.cycles
        med = lambda key: statistics.median(x[key] for x in c)  # noqa: E731
        out = {
            "n": self.n,
            "cycle_s": med("wall"),
            "best_s": min(x["wall"] for x in c),
            "cpu_s": med("cpu"),
            "rows_read": med("rows"),
            "warmup_s": self.warmup_s,
        }
        for part in ("read_s", "estimate_s", "commit_s"):
            out[part] = med(part)
        return out

    def close(self) -> None:
        self.monitor.reader.close()
        self.monitor.store.close()
        self.feed.close()
        self.db.unlink(missing_ok=True)


def _top(prof: cProfile.Profile, key: int, n: int = 14) -> list[tuple]:
    stats = pstats.Stats(prof, stream=io.StringIO()).stats
    total = max(v[3] for v in stats.values())  # the outermost cumulative time
    rows = sorted(
        ((v[key], v[1], f"{k[0].rsplit('/', 1)[-1]}:{k[1]}({k[2]})") for k, v in stats.items()),
        reverse=True,
    )[:n]
    return [(name, t / total, t, calls) for t, calls, name in rows]


def _print_table(results: list[dict]) -> None:
    print(
        f"  {'N':>4} {'cycle':>8} {'best':>8} {'CPU':>8} {'read':>8} {'estimate':>9} "
        f"{'commit':>8} {'per batch':>10} {'rows read':>10} {'warm-up':>8}"
    )
    for r in results:
        print(
            f"  {r['n']:>4} {r['cycle_s']:>7.3f}s {r['best_s']:>7.3f}s {r['cpu_s']:>7.3f}s "
            f"{r['read_s']:>7.3f}s {r['estimate_s']:>8.3f}s {r['commit_s']:>7.3f}s "
            f"{r['cycle_s'] / r['n'] * 1e3:>8.2f}ms {r['rows_read']:>10,.0f} "
            f"{r['warmup_s']:>7.1f}s"
        )


def main(n_values=N_VALUES, cycles: int = STEADY_CYCLES, *, explain: bool = False) -> dict:
    """Build the historian, run the cycles, print the table; returns the figures."""
    print(
        f"convmon poll-cycle benchmark (times measured in this run; load average "
        f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs at the start)"
    )
    plant = Plant()
    with tempfile.TemporaryDirectory(prefix="convmon-bench-cycle-") as tmp:
        work = Path(tmp)
        base = work / "historian.db"
        info = build_historian(base, plant)
        print(
            f"historian: SQLite, {info['rows']:,} sample rows ({UNITS} units x "
            f"{HISTORY_ROWS:,} temperature rows + charges and assays), {info['events']:,} "
            f"events, {info['mb']:.0f} MB, built in {info['build_s']:.1f} s"
        )
        runs = []
        try:
            for n in n_values:
                runs.append(CycleRun(base, work, plant, n))
            # the N runs take turns, so a change in the machine's other load hits all alike
            for _ in range(cycles):
                for run in runs:
                    run.step()
            results = [run.summary() for run in runs]
            print(
                f"\nsteady cycle (Monitor.run_cycle_safely): {NEW_PER_CYCLE} new temperature "
                f"samples per batch and max(2, N/50) assays per cycle; median of {cycles} "
                "cycles, the N runs interleaved; 'CPU' is this process's CPU time (less "
                "sensitive to other load), the split is wall time from CycleReport.timings"
            )
            _print_table(results)
            by_n = {r["n"]: r for r in results}
            if {100, 200, 400} <= set(by_n):
                for key, label in (("cycle_s", "wall"), ("cpu_s", "CPU")):
                    r42 = by_n[400][key] / by_n[200][key]
                    r21 = by_n[200][key] / by_n[100][key]
                    print(
                        f"  growth ({label}): time(400)/time(200) = {r42:.2f}, "
                        f"time(200)/time(100) = {r21:.2f} (2.00 is linear)"
                    )
            if 200 in by_n:
                t200 = by_n[200]["cycle_s"]
                met = t200 < AIM_200_S
                print(
                    f"  200 batches: {t200:.3f} s per cycle wall, {by_n[200]['cpu_s']:.3f} s "
                    f"CPU (aim < {AIM_200_S:.0f} s): {'met' if met else 'NOT met'}; load "
                    f"average {os.getloadavg()[0]:.1f} at the end"
                )
                if explain or not met:
                    _explain(runs[list(by_n).index(200)], base, work, plant, cycles)
        finally:
            for run in runs:
                run.close()
    return {"historian": info, "results": results}


def _explain(run: CycleRun, base: Path, work: Path, plant: Plant, cycles: int) -> None:
    """Where a 200-batch cycle's time goes, and what the estimator's settings buy."""
    prof = cProfile.Profile()
    for _ in range(cycles):
        run.step(prof)
    print(
        f"\nwhere the 200-batch cycle's time goes (cProfile over {cycles} more steady "
        "cycles; profiling slows it down)"
    )
    print("  by cumulative time (share of the cycles):")
    for name, share, t, calls in _top(prof, 3):
        print(f"    {share:6.1%} {t:7.2f} s {calls:>8} calls  {name}")
    print("  by own time:")
    for name, share, t, calls in _top(prof, 2):
        print(f"    {share:6.1%} {t:7.2f} s {calls:>8} calls  {name}")
    for setting in ({"monte_carlo_draws": 250}, {"horizon_h": 24.0}):
        lever = CycleRun(base, work, plant, 200, **setting)
        try:
            for _ in range(cycles):
                run.step()  # in turns with the default run again, for a fair ratio
                lever.step()
            a = {k: statistics.median(x[k] for x in run.cycles[-cycles:]) for k in ("wall", "cpu")}
            b = lever.summary()
        finally:
            lever.close()
        ((key, value),) = setting.items()
        print(
            f"  with [estimator] {key} = {value:g} (a setting, not the estimator's math; "
            f"default {_DEFAULTS[key]:g}): 200 batches {b['cycle_s']:.3f} s wall, "
            f"{b['cpu_s']:.3f} s CPU, against {a['wall']:.3f} s wall, {a['cpu']:.3f} s CPU "
            f"with the defaults in the same turns (ratio {b['cycle_s'] / a['wall']:.2f})"
        )


if __name__ == "__main__":
    main()
