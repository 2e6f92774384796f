"""The poll cycle on a PostgreSQL historian whose connections are cut, and on bad live rows.

A 3-day sample plant is copied into uniquely named PostgreSQL tables (SQLAlchemy Core,
dropped after) and replayed into them tick by tick by `sample_historian.replay.Replay`
(the demo's replay, here with room in ``seq`` for injected rows): each tick inserts the
rows up to the plant time in ``seq`` order, then the monitor polls. The monitor's URL
sets ``application_name=convmon_outage_<uuid>``; a separate connection ends its
backends with ``pg_terminate_backend``:

* before a query (a listener on the reader's engine fires just before the statement is
  sent), so the statement meets a dead connection and `with_retry` retries it;
* in the middle of a streamed read (after some chunks of the server-side cursor);
* before every attempt of one cycle, so the retries run out: the cycle fails, commits
  nothing, and the next cycle at the same plant time recovers;
* while the connection idles in the pool between cycles (pre-ping replaces it).

A clean monitor replays the same ticks on its own copy. The stores must agree on every
column of every table (`tests.store_compare`: keys exactly, floats within 1e-9 relative)
and each running batch must hold every good
sample the replay delivered, counted straight from the source file. A second run feeds
bad rows live (NaN, NULL, infinity, -999, bad quality codes, duplicates, the timestamp
text 'not-a-time', an unknown tag, broken events): every cycle succeeds, the exclusions
are counted exactly, and the store equals the clean one but for a -999 assay, which is
reported as an assay mismatch. (The store on MariaDB is tested in tests/test_store.py.)

Run with ``-s`` to see the figures.
"""

from __future__ import annotations

import json
import logging
import math
import re
import statistics
import time
import tomllib
import uuid
from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime

import pytest
from sqlalchemy import create_engine, event, text

from monitor.config import config_from_dict
from monitor.historian.model import Batch
from monitor.service.cycle import Monitor
from monitor.timefmt import to_datetime
from sample_historian.replay import Replay
from tests.fixtures_db import POSTGRES_URL, make_export, require_server
from tests.fixtures_plant import PLANT_CONFIG, build_plant
from tests.store_compare import REL, compare_stores, read_store, row_counts

PLANT_DAYS = 3
REPLAY_START = "2026-10-07T05:30:00+00:00"  # three batches start and end in the replay
TICK_S = 1800.0
TICKS = 24
HISTORY_S = 6 * 3600.0  # rows copied before the replay starts
SEQ_SCALE = 32  # source seq n becomes n * 32: room for injected rows between ticks
RETRIES = 2
BACKOFF_S = (0.5, 1.0)  # with_retry's default backoff for retries 1 and 2
FETCH_ROWS = 100  # small chunks: a poll streams several, so a read can be cut midway
GOOD_Q = 0
BAD_Q, UNCERTAIN_Q = 0x80000000, 0x40000000  # OPC UA status codes Bad, Uncertain
LIMITS_C = (-10.0, 200.0)  # config/sample_plant.toml temperature_limits [degC]


def _iso(t_s: float) -> str:
    return to_datetime(t_s).isoformat(timespec="milliseconds")


def _epoch(iso: str) -> float:
    return datetime.fromisoformat(iso).timestamp()


# ------------------------------------------------------------------ source counts
def _expected_counts(replay: Replay, t_s: float, unit_tags: dict) -> dict:
    """Per running batch: good distinct temperature times and assay times delivered so far.

    Counted in SQL on the replay's source, independently of the reader: quality Good, a
    value inside the unit's limits (assays: not NULL), at or after the batch start.
    """
    src, iso = replay.src, _iso(t_s)
    ends = {
        r[0]
        for r in src.execute(
            "SELECT batch_id FROM batch_events WHERE event = 'end' AND ts <= ?", (iso,)
        )
    }
    out = {}
    for bid, unit, start in src.execute(
        "SELECT batch_id, unit, ts FROM batch_events WHERE event = 'start' AND ts <= ?", (iso,)
    ):
        if bid in ends:
            continue
        tt, assay = unit_tags[unit]
        n_t = src.execute(
            "SELECT COUNT(DISTINCT ts) FROM tag_samples WHERE tag = ? AND seq <= ? AND "
            "quality = ? AND value BETWEEN ? AND ? AND ts >= ?",
            (tt, replay.seq, GOOD_Q, *LIMITS_C, start),
        ).fetchone()[0]
        n_a = src.execute(
            "SELECT COUNT(DISTINCT ts) FROM tag_samples WHERE tag = ? AND seq <= ? AND "
            "quality = ? AND value IS NOT NULL AND ts >= ?",
            (assay, replay.seq, GOOD_Q, start),
        ).fetchone()[0]
        out[bid] = (n_t, n_a)
    return out


# ------------------------------------------------------------------ terminations
class Terminator:
    """Ends every backend whose application_name is the monitor's, from its own connection."""

    def __init__(self, url: str, app: str):
        self.engine = create_engine(url, isolation_level="AUTOCOMMIT")
        self.app = app
        self.calls = 0
        self.backends = 0  # backends actually ended

    def __call__(self) -> int:
        with self.engine.connect() as conn:
            # the 5-s timeout makes pg_terminate_backend wait until the backend has gone
            n = conn.execute(
                text(
                    "SELECT count(*) FILTER (WHERE pg_terminate_backend(pid, 5000)) "
                    "FROM pg_stat_activity WHERE application_name = :app "
                    "AND pid <> pg_backend_pid()"
                ),
                {"app": self.app},
            ).scalar_one()
        self.calls += 1
        self.backends += n
        return n

    def live_backends(self) -> int:
        with self.engine.connect() as conn:
            return conn.execute(
                text("SELECT count(*) FROM pg_stat_activity WHERE application_name = :app"),
                {"app": self.app},
            ).scalar_one()

    def close(self):
        self.engine.dispose()


@dataclass
class Cut:
    """Where to end the monitor's backends during the coming cycle."""

    before: str | None = None  # just before a statement on "samples" or "events"
    nth: int | None = 1  # the n-th such statement of the cycle; None: every one
    after_chunk: int | None = None  # after this many chunks of the cycle's first stream
    seen: int = 0
    fired: int = 0

    @property
    def exhausts_retries(self) -> bool:
        return self.before is not None and self.nth is None


class Saboteur:
    """Hooks on the monitor's reader that call the `Terminator` when a `Cut` says so."""

    def __init__(self, monitor: Monitor, kill: Terminator, samples_table: str, events_table: str):
        self.kill, self.cut = kill, None
        self.tables = {"samples": samples_table, "events": events_table}
        event.listen(monitor.reader.engine, "before_cursor_execute", self._before)
        reader = monitor.reader
        normalise = reader._normalise_chunk

        def chunk_then_cut(part, *args, **kwargs):
            out = normalise(part, *args, **kwargs)
            c = self.cut
            if c is not None and c.after_chunk is not None and not c.fired:
                c.seen += 1
                if c.seen == c.after_chunk:
                    c.fired += 1
                    self.kill()
            return out

        reader._normalise_chunk = chunk_then_cut

    def _before(self, conn, cursor, statement, parameters, context, executemany):
        c = self.cut
        if c is None or c.before is None or self.tables[c.before] not in statement:
            return
        c.seen += 1
        if c.nth is None or c.seen == c.nth:
            c.fired += 1
            self.kill()


# ------------------------------------------------------------------ runs
def _config(export, app: str, store_path):
    data = tomllib.loads(PLANT_CONFIG.read_text(encoding="utf-8"))
    data["historian"] = export.historian(
        url=f"{export.url}?application_name={app}", retries=RETRIES, fetch_rows=FETCH_ROWS
    )
    data["store"] = {"url": f"sqlite:///{store_path}"}
    return config_from_dict(data, PLANT_CONFIG)


def _unit_tags(cfg) -> dict:
    return {u.name: (u.temperature_tag, u.assay_tag) for u in cfg.units}


def _held(monitor: Monitor) -> dict:
    return {b: (len(st.trace), len(st.assay_t_s)) for b, st in monitor.states.items()}


@dataclass
class Run:
    monitor: Monitor
    replay: Replay
    export: object
    cfg: object
    clock: dict
    app: str
    quality: Counter = field(default_factory=Counter)
    cycles: int = 0
    failed: int = 0
    cycle_s: list = field(default_factory=list)

    def count_quality(self):
        poll = self.monitor.reader.poll

        def counted(*args, **kwargs):
            result = poll(*args, **kwargs)
            self.quality.update(result.quality.excluded)
            return result

        self.monitor.reader.poll = counted

    def cycle(self):
        """One `run_cycle_safely`; exclusions are counted for cycles that committed."""
        t = time.perf_counter()
        counted = Counter(self.quality)
        rep = self.monitor.run_cycle_safely()
        self.cycle_s.append(time.perf_counter() - t)
        self.cycles += 1
        self.failed += rep is None
        if rep is None:
            self.quality = counted
        return rep


def _start_run(plant, pg_url, tmp_path, name: str) -> Run:
    export = make_export(pg_url)
    app = f"convmon_{name}_{uuid.uuid4().hex[:12]}"
    cfg = _config(export, app, tmp_path / f"{name}.db")
    tags = [u.temperature_tag for u in cfg.units]
    replay = Replay(plant.db_path, export, tags, seq_gap=SEQ_SCALE)
    t0 = _epoch(REPLAY_START)
    replay.start(t0, history_s=HISTORY_S)
    clock = {"t": t0}
    monitor = Monitor(cfg, clock=lambda: clock["t"])
    return Run(monitor, replay, export, cfg, clock, app)


def _finish(run: Run) -> None:
    run.monitor.reader.close()
    run.monitor.store.close()
    run.replay.close()
    run.export.drop()


@pytest.fixture(scope="module")
def pg():
    return require_server(POSTGRES_URL)


@pytest.fixture(scope="module")
def plant(tmp_path_factory):
    return build_plant(tmp_path_factory.mktemp("outage_plant"), days=PLANT_DAYS)


@pytest.fixture(scope="module")
def clean_run(pg, plant, tmp_path_factory):
    """The reference: the same ticks, nothing cut, nothing injected."""
    run = _start_run(plant, pg, tmp_path_factory.mktemp("clean"), "clean")
    run.count_quality()
    t0 = time.perf_counter()
    held = []
    try:
        for k in range(TICKS):
            run.clock["t"] = _epoch(REPLAY_START) + k * TICK_S
            run.replay.advance_to(run.clock["t"])
            assert run.cycle() is not None
            held.append(_held(run.monitor))
        rows = read_store(run.monitor.store)
    finally:
        _finish(run)
    assert rows["estimates"] and any(b["state"] == "complete" for b in rows["batches"].values())
    return {
        "rows": rows,
        "held": held,
        "quality": run.quality,
        "wall_s": time.perf_counter() - t0,
    }


# ------------------------------------------------------------------ the tests
def _cuts() -> dict:
    """Tick -> where the monitor's backends are ended during that tick's cycle."""
    return {
        2: Cut(before="samples"),  # the poll's query meets a dead connection
        3: Cut(before="samples", nth=2),  # a new batch's backfill read (after the poll)
        # mid-stream: the server-side cursor dies after 4 of the poll's chunks of 100 rows
        # (past the re-read window's rows, within the new ones)
        4: Cut(after_chunk=4),
        6: Cut(before="events"),  # the batch-events query
        8: Cut(before="samples", nth=None),  # every attempt of the poll: retries run out
        # the poll has read its rows, then every attempt of the events query fails: the rows
        # read are not committed and must be read again (the tick where TW26-0007 completes)
        16: Cut(before="events", nth=None),
    }


IDLE_CUTS = (11, 19)  # after these ticks' cycles, while the connection idles in the pool


@pytest.mark.postgres
def test_connection_terminated_mid_cycle(pg, plant, clean_run, tmp_path, caplog):
    run = _start_run(plant, pg, tmp_path, "outage")
    run.count_quality()
    cuts = _cuts()
    kill = Terminator(pg, run.app)
    sab = Saboteur(run.monitor, kill, run.export.schema.samples, run.export.schema.events)
    caplog.set_level(logging.WARNING, logger="monitor")
    t_start = time.perf_counter()
    retries_per_tick, failed_ticks, failed_s, checked_counts = {}, [], [], 0
    try:
        assert kill.live_backends() >= 1  # the monitor's backend is visible by its name
        for k in range(TICKS):
            run.clock["t"] = _epoch(REPLAY_START) + k * TICK_S
            run.replay.advance_to(run.clock["t"])
            sab.cut = cuts.get(k)
            mark = len(caplog.records)
            before = read_store(run.monitor.store)
            t_cycle = time.perf_counter()
            rep = run.cycle()
            elapsed = time.perf_counter() - t_cycle
            sab.cut = None
            retried = [
                r.getMessage() for r in caplog.records[mark:] if "retrying in" in r.getMessage()
            ]
            retries_per_tick[k] = retried
            if rep is None:
                failed_ticks.append(k)
                failed_s.append(elapsed)
                # nothing committed: results and watermark as before, the failure recorded
                after = read_store(run.monitor.store)
                assert not compare_stores(
                    before, after, rel=0.0, exclude={"heartbeat": "the failure, checked below"}
                )
                (was,), (beat,) = before["heartbeat"].values(), after["heartbeat"].values()
                assert beat["failed_cycles"] == (was["failed_cycles"] or 0) + 1
                assert beat["cycles"] == was["cycles"]
                assert any("cycle failed" in r.getMessage() for r in caplog.records[mark:])
                # with_retry slept its backoff between the attempts
                delays = [float(re.search(r"retrying in ([\d.]+) s", m).group(1)) for m in retried]
                assert delays == list(BACKOFF_S)
                assert elapsed >= sum(BACKOFF_S)
                # the next cycle, at the same plant time, recovers
                rep = run.cycle()
                assert rep is not None, f"tick {k}: the cycle after the failure failed too"
            want = clean_run["held"][k]
            got = _held(run.monitor)
            assert got == want, f"tick {k}: samples held {got} != clean run {want}"
            expected = _expected_counts(run.replay, run.clock["t"], _unit_tags(run.cfg))
            assert got == expected, f"tick {k}: samples held {got} != source {expected}"
            checked_counts += len(got)
            if k in IDLE_CUTS:
                assert kill() >= 1  # the pooled connection dies between cycles
        rows = read_store(run.monitor.store)
        beat = run.monitor.store.heartbeat()
    finally:
        sab.cut = None
        kill.close()
        _finish(run)
    wall = time.perf_counter() - t_start

    for k, c in cuts.items():
        assert c.fired >= 1, f"tick {k}: the cut never fired"
    single = [k for k, c in cuts.items() if not c.exhausts_retries]
    for k in single:  # one retry absorbed the cut: the cycle succeeded
        assert len(retries_per_tick[k]) == 1 and k not in failed_ticks, (k, retries_per_tick[k])
        assert "retrying in 0.5 s (1/2)" in retries_per_tick[k][0]
    for k in IDLE_CUTS:  # pre-ping replaced the dead pooled connection without a retry
        assert retries_per_tick[k + 1] == [] and k + 1 not in failed_ticks
    assert failed_ticks == [k for k, c in cuts.items() if c.exhausts_retries]
    assert beat["failed_cycles"] == len(failed_ticks)
    assert beat["cycles"] == TICKS
    diffs = compare_stores(
        rows,
        clean_run["rows"],
        exclude={"heartbeat.failed_cycles": "the cuts fail cycles on purpose (checked above)"},
    )
    assert not diffs, "\n".join(diffs[:20])
    n_rows = sum(row_counts(rows).values())
    # no row delivered twice or lost from a cut read: the same exclusions as the clean run
    assert run.quality == clean_run["quality"]
    delays = [
        float(re.search(r"retrying in ([\d.]+) s", m).group(1))
        for v in retries_per_tick.values()
        for m in v
    ]
    n_est = len(rows["estimates"])
    assays = sum(r["n_assays_used"] for r in rows["estimates"].values())
    where = ", ".join(
        f"{k}: {'every attempt' if c.exhausts_retries else 'once'} "
        f"{'mid-stream' if c.after_chunk else 'before ' + c.before}"
        for k, c in cuts.items()
    )
    print(
        f"\noutage run on PostgreSQL: {TICKS} ticks, {run.cycles} cycles; cuts by tick "
        f"({where}; idle in the pool after {', '.join(map(str, IDLE_CUTS))}); "
        f"{kill.calls} terminations ending {kill.backends} backends; {len(delays)} retries, "
        f"backoff {sum(delays):.1f} s in all (delays {dict(Counter(delays))}); {run.failed} "
        f"cycles failed without committing (ticks {failed_ticks}), each recovered by the "
        f"next; median cycle {statistics.median(run.cycle_s) * 1e3:.0f} ms, failed cycles "
        f"{', '.join(f'{t:.2f}' for t in failed_s)} s; "
        f"{wall:.1f} s wall (clean run {clean_run['wall_s']:.1f} s); {n_est} estimates "
        f"(sum of n_assays_used {assays}) and {n_rows} store rows equal to the clean run "
        f"within {REL:g} relative (every column of every table); samples held = source "
        f"counts for {checked_counts} batch-ticks"
    )


def _bad_rows(replay: Replay, t_s: float, k: int, running: list, unit_tags):
    """Bad rows for one tick: one of each kind on a running batch's tags, and broken events.

    Returns (samples, events, expected exclusions as a Counter of (tag, reason)).
    """
    b = running[k % len(running)]
    other = running[(k + 1) % len(running)]
    tt, assay = unit_tags[b.unit]
    src = replay.src
    cut = replay.cut(t_s)
    good = src.execute(
        "SELECT ts, value FROM tag_samples WHERE tag = ? AND seq > ? AND "
        "seq <= ? AND quality = 0 AND value IS NOT NULL ORDER BY seq LIMIT 6",
        (tt, replay.seq, cut),
    ).fetchall()
    old = src.execute(
        "SELECT ts, value FROM tag_samples WHERE tag = ? AND seq <= ? AND "
        "quality = 0 AND value IS NOT NULL ORDER BY seq DESC LIMIT 1 OFFSET 600",
        (tt, replay.seq),
    ).fetchone()
    # an assay older than the poll's re-read window (late_window_rows, in scaled seq)
    old_assay = src.execute(
        "SELECT ts, value, quality FROM tag_samples WHERE tag = ? AND "
        "seq <= ? AND quality = 0 AND value IS NOT NULL ORDER BY seq DESC "
        "LIMIT 1",
        (assay, replay.seq - 1000),
    ).fetchone()

    def between(i, after_s=0.5):  # a time not in the export: just after a good sample
        return _iso(_epoch(good[i][0]) + after_s)

    rows = [
        ((tt, between(0), math.nan, GOOD_Q), (tt, "not_finite")),
        ((tt, between(1), None, GOOD_Q), (tt, "not_finite")),
        ((tt, between(2), math.inf, GOOD_Q), (tt, "not_finite")),
        ((tt, between(3), -999.0, GOOD_Q), (tt, "outside_limits")),
        ((tt, between(4), good[4][1] + 3.0, BAD_Q), (tt, "bad_quality")),
        ((tt, between(5), good[5][1] - 3.0, UNCERTAIN_Q), (tt, "bad_quality")),
        ((tt, between(0, 0.25), good[0][1], None), (tt, "bad_quality")),
        ((tt, "not-a-time", good[1][1], GOOD_Q), (tt, "bad_timestamp")),
        ((tt, good[2][0], good[2][1], GOOD_Q), (tt, "duplicate")),  # same poll, exact copy
        ((tt, good[3][0], good[3][1] + 5.0, GOOD_Q), (tt, "duplicate")),  # same time, other value
        ((assay, between(1), math.nan, GOOD_Q), (assay, "not_finite")),
        ((assay, between(2), 0.5, BAD_Q), (assay, "bad_quality")),
        ((assay, "not-a-time", 0.5, GOOD_Q), (assay, "bad_timestamp")),
        (("R199.TT", between(3), 70.0, GOOD_Q), None),  # a tag no unit is configured for
    ]
    if old is not None:  # a copy, with another value, of a sample delivered ticks ago
        rows.append(((tt, old[0], old[1] + 5.0, GOOD_Q), None))
    if old_assay is not None:  # an exact copy of the unit's last assay row so far
        rows.append(((assay, *old_assay), None))
    samples = [r for r, _ in rows]
    want = Counter(reason for _, reason in rows if reason is not None)
    events = [
        ("TW26-X199", "R-199", b.recipe, "start", _iso(t_s - 60)),  # a unit not configured
        (f"TW26-X{k:03d}", b.unit, b.recipe, "end", _iso(t_s - 30)),  # an end, no start
        (b.batch, b.unit, b.recipe, "end", "not-a-time"),  # a running batch's unusable end
        (other.batch, other.unit, other.recipe, "start", _iso(t_s - 10)),  # a second start
    ]
    return samples, events, want


SENTINEL_TICK = 12  # a -999 assay (a "no value" sentinel) arrives on this tick


def _without_sentinel(rows: dict, batch: str, t_s: float) -> dict:
    """The store less what a -999 assay must leave: a mismatch warning and one alert.

    An assay passes no range check (its unit is the lab's), so -999 reaches the estimator,
    which reports it as an assay-mismatch finding and leaves it out (DESIGN.md: never
    silently dropped). Everything else must be as if it had never arrived. The warning
    is taken out of the estimate's ``warnings`` column and of its document alike.
    """
    out = dict(rows)
    out["estimates"], flagged = {}, 0
    for key, row in rows["estimates"].items():
        row = dict(row)
        if key[0] == batch and key[1] >= t_s:
            w = json.loads(row["warnings"])
            mine = [x for x in w if "(-999)" in x and "sd from the model; not used" in x]
            assert len(mine) == 1, f"estimate {key}: no mismatch finding for -999 in {w}"
            row["warnings"] = json.dumps([x for x in w if x not in mine])
            doc = json.loads(row["doc"])
            assert doc["warnings"] == w, f"estimate {key}: document and column disagree"
            doc["warnings"] = [x for x in w if x not in mine]
            row["doc"] = json.dumps(doc)
            flagged += 1
        out["estimates"][key] = row
    assert flagged >= 1
    raised = [
        k
        for k, a in rows["alerts"].items()
        if k[:2] == (batch, "assay_mismatch") and "(-999)" in (a["message"] or "")
    ]
    assert len(raised) == 1, f"expected one assay_mismatch alert for {batch}: {raised}"
    out["alerts"] = {k: a for k, a in rows["alerts"].items() if k != raised[0]}
    return out


@pytest.mark.postgres
def test_bad_live_rows_never_stop_the_service(pg, plant, clean_run, tmp_path, caplog):
    caplog.set_level(logging.WARNING, logger="monitor")
    run = _start_run(plant, pg, tmp_path, "badrows")
    run.count_quality()
    unit_tags = _unit_tags(run.cfg)
    injected, want, sentinel = 0, Counter(), None
    t_start = time.perf_counter()
    try:
        for k in range(TICKS):
            t = run.clock["t"] = _epoch(REPLAY_START) + k * TICK_S
            samples, events = (), ()
            if 4 <= k <= 14:  # all three batches run: bad rows arrive with the good ones
                running = sorted(
                    (
                        Batch(st.batch, st.unit, st.recipe.name, st.start_s, st.end_s)
                        for st in run.monitor.states.values()
                        if st.end_s is None
                    ),
                    key=lambda b: b.batch,
                )
                assert running, f"tick {k}: no running batch to inject into"
                samples, events, expect = _bad_rows(run.replay, t, k, running, unit_tags)
                want.update(expect)
                if k == SENTINEL_TICK:
                    sentinel = (running[0].batch, t - 300.0)
                    samples.append(
                        (unit_tags[running[0].unit][1], _iso(sentinel[1]), -999.0, GOOD_Q)
                    )
                injected += len(samples) + len(events)
            run.replay.advance_to(t, samples, events)
            rep = run.cycle()
            assert rep is not None, f"tick {k}: the cycle failed on bad rows"
            want_held = dict(clean_run["held"][k])
            if sentinel and sentinel[0] in want_held:  # the -999 assay is held, not used
                n_t, n_a = want_held[sentinel[0]]
                want_held[sentinel[0]] = (n_t, n_a + 1)
            assert _held(run.monitor) == want_held, f"tick {k}: samples held differ"
        rows = read_store(run.monitor.store)
        beat = run.monitor.store.heartbeat()
    finally:
        _finish(run)
    wall = time.perf_counter() - t_start
    assert run.failed == 0 and beat["cycles"] == TICKS and not beat["failed_cycles"]
    # the batch on a unit not in the configuration is reported once, not on every cycle
    unmonitored = [r for r in caplog.records if "TW26-X199" in r.getMessage()]
    assert len(unmonitored) == 1, f"{len(unmonitored)} warnings for one unmonitored batch"
    # every injected bad row was seen and excluded under its reason, no more, no less
    extra = Counter(run.quality)
    extra.subtract(clean_run["quality"])
    got = Counter({k: v for k, v in extra.items() if v})
    assert got == want, f"exclusions {dict(got)} != injected {dict(want)}"
    cleaned = _without_sentinel(rows, *sentinel)
    diffs = compare_stores(cleaned, clean_run["rows"])
    assert not diffs, "\n".join(diffs[:20])
    n_rows = sum(row_counts(cleaned).values())
    by_reason = Counter()
    for (_tag, reason), n in got.items():
        by_reason[reason] += n
    print(
        f"\nbad rows on PostgreSQL: {injected} bad rows and events injected over 11 ticks; "
        f"{run.cycles} cycles, all succeeded, in {wall:.1f} s; exclusions counted as "
        f"injected, per tag and reason ({dict(sorted(by_reason.items()))}); the -999 assay "
        f"of {sentinel[0]} reported as an assay mismatch (one alert); otherwise {n_rows} "
        "store rows equal to the clean run (every column of every table)"
    )
