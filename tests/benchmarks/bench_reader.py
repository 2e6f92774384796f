"""Historian reader benchmarks on a synthetic 2-million-row SQLite export.

Each figure is printed with a baseline measured in the same run:

* backfill: ``HistorianReader.read_tags`` of 10 temperature tags over the whole
  history (every row), against the raw ``sqlite3`` driver running the very statement
  the reader sent (captured, ``SELECT tag, ts, value, quality, seq ...``) and
  fetching its rows with ``fetchmany`` in chunks of ``fetch_rows``, doing nothing
  with them. The two run in turn, three times; best of each. The ratio is reader
  rows/s over raw rows/s (aim >= 0.5), by wall clock and by CPU time (the CPU figure
  is steadier on a shared machine). The reader's peak memory is the peak of memory
  allocated during one more call under ``tracemalloc`` (aim < 300 MB); the growth of
  the process RSS (psutil, sampled every 5 ms) is printed beside it;
* incremental poll: after the backfill, 10 units each get 12 new temperature
  rows and one late assay; one ``poll`` must read only those plus its re-read
  window (``late_window_rows``), not the table. Its time is set against the raw
  driver running the same statement. ``EXPLAIN QUERY PLAN`` of both statements,
  as SQLAlchemy sent them, shows which index SQLite uses.

The table is written with ``sqlite3.executemany`` in the sample plant's layout
(ISO-8601 text with offset, OPC UA quality codes, ~1 % bad rows). Run with
``python -m tests.benchmarks.bench_reader`` (or ``make bench``).
"""

from __future__ import annotations

import cProfile
import io
import os
import pstats
import sqlite3
import tempfile
import threading
import time
import tracemalloc
from pathlib import Path

import numpy as np
import psutil
from sqlalchemy import event

from monitor.config import config_from_dict
from monitor.historian.reader import HistorianReader

N_ROWS = 2_000_000
N_UNITS = 10
PERIOD_S = 5.0  # per tag [s]
T0 = 1_767_225_600.0  # 2026-01-01T00:00:00Z
BAD = 0x80000000
AIM_RATIO, AIM_PEAK_MB = 0.5, 300.0
FETCH_ROWS = 50_000
PROFILE = os.environ.get("CONVMON_BENCH_PROFILE") == "1"


def _tags(i: int) -> tuple[str, str]:
    return f"U{i:02d}.TT", f"U{i:02d}.ASSAY"


def _iso(t_s: np.ndarray) -> list[str]:
    ms = np.round(t_s * 1000).astype("int64").astype("datetime64[ms]")
    return [s + "+00:00" for s in np.datetime_as_string(ms, unit="ms").tolist()]


def write_export(path: Path, n_rows: int = N_ROWS) -> tuple[float, int]:
    """The synthetic export; returns (time of the last sample [s], rows written)."""
    con = sqlite3.connect(path)
    con.executescript(
        "PRAGMA journal_mode=OFF; PRAGMA synchronous=OFF;"
        "CREATE TABLE tag_samples (seq INTEGER PRIMARY KEY, tag TEXT NOT NULL, "
        "ts TEXT NOT NULL, value REAL, quality INTEGER NOT NULL);"
        "CREATE TABLE batch_events (seq INTEGER PRIMARY KEY, batch_id TEXT NOT NULL, "
        "unit TEXT NOT NULL, recipe TEXT NOT NULL, event TEXT NOT NULL, ts TEXT NOT NULL);"
    )
    rng = np.random.default_rng(7)
    per_tag = n_rows // N_UNITS
    chunk = 20_000  # time steps per insert batch (x N_UNITS rows)
    seq = 1
    tags = [_tags(i)[0] for i in range(N_UNITS)]
    for lo in range(0, per_tag, chunk):
        steps = np.arange(lo, min(lo + chunk, per_tag))
        t = T0 + PERIOD_S * steps
        iso = _iso(t)
        value = np.round(
            60.0
            + 10.0 * np.sin(steps / 5000.0)[:, None]
            + rng.normal(0, 0.2, (len(steps), N_UNITS)),
            3,
        )
        quality = np.where(rng.random((len(steps), N_UNITS)) < 0.01, BAD, 0)
        rows = [
            (seq + k * N_UNITS + j, tags[j], iso[k], float(value[k, j]), int(quality[k, j]))
            for k in range(len(steps))
            for j in range(N_UNITS)
        ]
        con.executemany("INSERT INTO tag_samples VALUES (?, ?, ?, ?, ?)", rows)
        seq += len(rows)
    con.execute("CREATE INDEX ix_tag_samples_tag_ts ON tag_samples (tag, ts)")
    con.executemany(
        "INSERT INTO batch_events VALUES (?, ?, ?, ?, ?, ?)",
        [
            (i + 1, f"B{i:02d}", f"U{i:02d}", "DIM-7", "start", _iso(np.array([T0]))[0])
            for i in range(N_UNITS)
        ],
    )
    con.commit()
    con.close()
    return T0 + PERIOD_S * (per_tag - 1), seq - 1


def _config(path: Path):
    units = [
        {
            "name": f"U{i:02d}",
            "temperature_tag": _tags(i)[0],
            "temperature_unit": "degC",
            "assay_tag": _tags(i)[1],
        }
        for i in range(N_UNITS)
    ]
    return config_from_dict(
        {"historian": {"url": f"sqlite:///{path}", "fetch_rows": FETCH_ROWS}, "units": units}
    )


class _PeakRss:
    """Peak resident set size while the block runs (sampled every 5 ms) [bytes]."""

    def __enter__(self):
        self.proc = psutil.Process()
        self.before = self.peak = self.proc.memory_info().rss
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._watch, daemon=True)
        self._thread.start()
        return self

    def _watch(self):
        while not self._stop.wait(0.005):
            self.peak = max(self.peak, self.proc.memory_info().rss)

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, self.proc.memory_info().rss)

    @property
    def delta_mb(self) -> float:
        return (self.peak - self.before) / 1e6


def _raw_fetch(path: Path, sql: str, params) -> tuple[int, float, float]:
    """Rows, wall and CPU seconds of the raw driver running ``sql``."""
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        t, c = time.perf_counter(), time.process_time()
        cur = con.execute(sql, params)
        n = 0
        while rows := cur.fetchmany(FETCH_ROWS):
            n += len(rows)
        return n, time.perf_counter() - t, time.process_time() - c
    finally:
        con.close()


class _Capture:
    """The SQL statements and parameters an engine sends (for EXPLAIN and the baseline)."""

    def __init__(self, engine):
        self.statements: list[tuple[str, tuple]] = []
        event.listen(engine, "before_cursor_execute", self._record)
        self.engine = engine

    def _record(self, conn, cursor, statement, parameters, context, executemany):
        self.statements.append((statement, tuple(parameters)))

    def close(self):
        event.remove(self.engine, "before_cursor_execute", self._record)


def _explain(path: Path, sql: str, params) -> list[str]:
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        return [r[3] for r in con.execute("EXPLAIN QUERY PLAN " + sql, params)]
    finally:
        con.close()


def _sample_query(cap: _Capture) -> tuple[str, tuple]:
    return next(
        s
        for s in reversed(cap.statements)
        if "FROM tag_samples" in s[0] and "count" not in s[0].lower()
    )


def bench_backfill(path: Path, t_end: float, repeats: int = 3) -> dict:
    """Reader and raw driver in turn (``repeats`` times, best of each), then one pass under
    tracemalloc for the reader's peak allocation."""
    reader = HistorianReader(_config(path))
    tags = [_tags(i)[0] for i in range(N_UNITS)]
    cap = _Capture(reader.engine)
    reader.read_tags(tags[:1], T0, T0 + 60.0)  # the statement shape, and a warm connection
    sql, params = None, None
    ours, raw, rss_mb, quality, n_raw = [], [], 0.0, None, 0
    for _ in range(repeats):
        with _PeakRss() as mem:
            t, c = time.perf_counter(), time.process_time()
            found, quality = reader.read_tags(tags, T0, t_end)
            ours.append((time.perf_counter() - t, time.process_time() - c))
        rss_mb = max(rss_mb, mem.delta_mb)
        delivered = sum(len(x) for x in found.values())
        del found
        if sql is None:
            sql, params = _sample_query(cap)
            cap.close()
        n_raw, wall, cpu = _raw_fetch(path, sql, params)
        raw.append((wall, cpu))
    tracemalloc.start()
    found, _ = reader.read_tags(tags, T0, t_end)
    traced_peak_mb = tracemalloc.get_traced_memory()[1] / 1e6
    tracemalloc.stop()
    del found
    if PROFILE:
        prof = cProfile.Profile()
        prof.enable()
        reader.read_tags(tags, T0, t_end)
        prof.disable()
        out = io.StringIO()
        pstats.Stats(prof, stream=out).sort_stats("tottime").print_stats(20)
        print(out.getvalue())
    reader.close()
    return {
        "rows": n_raw,
        "delivered": delivered,
        "reader_s": min(w for w, _ in ours),
        "reader_cpu_s": min(c for _, c in ours),
        "raw_s": min(w for w, _ in raw),
        "raw_cpu_s": min(c for _, c in raw),
        "traced_peak_mb": traced_peak_mb,
        "rss_mb": rss_mb,
        "excluded": sum(quality.excluded.values()),
        "sql": sql,
        "params": params,
    }


def bench_poll(path: Path, t_end: float, n_rows: int) -> dict:
    cfg = _config(path)
    reader = HistorianReader(cfg)
    t = time.perf_counter()
    wm = reader.initial_watermark(t_end + 1.0)  # a monitor that starts now
    wm_s = time.perf_counter() - t
    first = reader.poll(wm)  # nothing new yet: reads only the re-read window
    # the plant moves on: 12 new temperature rows per unit, and each unit's late assay
    con = sqlite3.connect(path)
    seq = n_rows + 1
    new = []
    for k in range(12):
        ts = _iso(np.array([t_end + PERIOD_S * (k + 1)]))[0]
        for i in range(N_UNITS):
            new.append((seq, _tags(i)[0], ts, 61.0, 0))
            seq += 1
    for i in range(N_UNITS):
        new.append((seq, _tags(i)[1], _iso(np.array([t_end - 3600.0]))[0], 0.8, 0))
        seq += 1
    con.executemany("INSERT INTO tag_samples VALUES (?, ?, ?, ?, ?)", new)
    con.commit()
    con.close()
    cap = _Capture(reader.engine)
    t = time.perf_counter()
    poll = reader.poll(first.watermark)
    poll_s = time.perf_counter() - t
    sql, params = _sample_query(cap)
    cap.close()
    reader.close()
    n_raw, raw_s, _ = _raw_fetch(path, sql, params)
    delivered_n = sum(len(s) for s in poll.samples.values())
    return {
        "new": len(new),
        "rows_read": poll.rows_read,
        "raw_rows": n_raw,
        "delivered": delivered_n,
        "first_rows_read": first.rows_read,
        "poll_s": poll_s,
        "raw_s": raw_s,
        "watermark_s": wm_s,
        "sql": sql,
        "params": params,
        "window": cfg.historian.late_window_rows,
    }


def main() -> None:
    print("convmon historian reader benchmarks (times measured in this run)")
    with tempfile.TemporaryDirectory(prefix="convmon-bench-") as tmp:
        path = Path(tmp) / "export.db"
        t = time.perf_counter()
        t_end, n_rows = write_export(path)
        print(
            f"\nsynthetic export: {n_rows:,} rows, {N_UNITS} tags every {PERIOD_S:g} s, "
            f"{path.stat().st_size / 1e6:.0f} MB, written in {time.perf_counter() - t:.1f} s"
        )

        b = bench_backfill(path, t_end)
        ratio = b["raw_s"] / b["reader_s"]  # = (rows/s ours) / (rows/s raw), same rows
        ratio_cpu = b["raw_cpu_s"] / b["reader_cpu_s"]
        print(
            f"\nbackfill: read_tags of {N_UNITS} tags over the whole history "
            f"({b['rows']:,} rows read; {b['delivered']:,} samples delivered, "
            f"{b['excluded']:,} excluded as bad quality); best of 3, taken in turn"
        )
        print(f"  {'path':<40}{'wall':>10}{'rows/s':>12}{'CPU':>10}{'rows/CPU-s':>12}")
        for name, wall, cpu in (
            ("ours: HistorianReader.read_tags", b["reader_s"], b["reader_cpu_s"]),
            ("baseline: raw sqlite3 fetchmany", b["raw_s"], b["raw_cpu_s"]),
        ):
            print(
                f"  {name:<40}{wall:>8.2f} s{b['rows'] / wall:>12,.0f}"
                f"{cpu:>8.2f} s{b['rows'] / cpu:>12,.0f}"
            )
        print(
            f"  ratio ours/baseline (rows/s): {ratio:.3f} wall-clock, {ratio_cpu:.3f} CPU time "
            f"(aim >= {AIM_RATIO}): {'met' if ratio >= AIM_RATIO else 'NOT met'}"
        )
        print(
            f"  peak memory of the reader: {b['traced_peak_mb']:.0f} MB allocated at peak "
            f"(tracemalloc, its own pass; aim < {AIM_PEAK_MB:.0f} MB): "
            f"{'met' if b['traced_peak_mb'] < AIM_PEAK_MB else 'NOT met'}; process RSS grew "
            f"{b['rss_mb']:.0f} MB (psutil; less when memory freed earlier is reused)"
        )
        print("  EXPLAIN QUERY PLAN:")
        for line in _explain(path, b["sql"], b["params"]):
            print(f"    {line}")

        p = bench_poll(path, t_end, n_rows)
        print(
            f"\nincremental poll over {N_UNITS} units after the backfill "
            f"({p['new']} new rows: 12 temperatures per unit and one late assay each)"
        )
        print(
            f"  rows_read: {p['rows_read']:,} of {n_rows + p['new']:,} in the table "
            f"(new rows + re-read window of late_window_rows={p['window']:,}); "
            f"delivered {p['delivered']} samples"
        )
        print(
            f"  the first poll, from initial_watermark(now), read {p['first_rows_read']:,} rows:"
            " the start is widened by the 15 h margin of text times with offsets"
        )
        print(f"  {'ours: HistorianReader.poll':<40}{p['poll_s'] * 1e3:>8.1f} ms")
        print(
            f"  {'baseline: raw sqlite3, same statement':<40}{p['raw_s'] * 1e3:>8.1f} ms "
            f"({p['raw_rows']:,} rows)"
        )
        print(f"  ratio baseline/ours (time): {p['raw_s'] / p['poll_s']:.2f}")
        print(f"  initial_watermark (once, at start): {p['watermark_s'] * 1e3:.0f} ms")
        print("  statement:", " ".join(p["sql"].split()))
        print("  EXPLAIN QUERY PLAN:")
        for line in _explain(path, p["sql"], p["params"]):
            print(f"    {line}")


if __name__ == "__main__":
    main()
