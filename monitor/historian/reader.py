"""The historian reader: batches from the events table, samples by tag, incremental polls.

Everything leaves here in UTC epoch seconds and SI (temperatures in kelvin).
Excluded samples are counted per tag and reason (`QualitySummary`), never used.
"""

from __future__ import annotations

import gc
import math
import sys
from collections import defaultdict
from contextlib import contextmanager
from decimal import Decimal

import numpy as np
import pandas as pd
from sqlalchemy import and_, func, select

from ..config import Config
from ..errors import BatchNotFoundError, DataQualityError
from ..units import to_kelvin
from .engine import make_engine, with_retry
from .model import Batch, BatchData, BatchProblem, PollResult, QualitySummary, TagSamples
from .schema import map_schema
from .timestamps import AMBIGUOUS, format_bound, to_epoch_seconds

DAY_S = 86_400.0


class _RowProgress:
    """A row counter on stderr while a long read streams, only when stderr is a terminal."""

    def __init__(self, label: str | None):
        self.bar = None
        if label and sys.stderr.isatty():
            from rich.console import Console
            from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

            self.bar = Progress(
                SpinnerColumn(),
                TextColumn(label),
                TextColumn("{task.completed:,.0f} rows"),
                TimeElapsedColumn(),
                console=Console(stderr=True),
                transient=True,
            )
            self.task = self.bar.add_task(label, total=None)

    def __enter__(self):
        if self.bar:
            self.bar.start()
        return self

    def advance(self, n: int) -> None:
        if self.bar:
            self.bar.advance(self.task, n)

    def __exit__(self, *exc):
        if self.bar:
            self.bar.stop()


class HistorianReader:
    """Read-only access to a plant historian export through SQLAlchemy Core."""

    def __init__(self, config: Config, *, engine=None):
        self.cfg = config
        h = self.h = config.historian
        self.engine = engine or make_engine(
            h.url, connect_timeout_s=h.connect_timeout_s, statement_timeout_s=h.statement_timeout_s
        )
        self.samples, self.events = self._retry(lambda: map_schema(self.engine, h), "schema")
        self._units_by_tag = {}
        for u in config.units:
            self._units_by_tag[u.temperature_tag] = ("temperature", u)
            if u.assay_tag:
                self._units_by_tag[u.assay_tag] = ("assay", u)
            if u.charge_tag:
                self._units_by_tag[u.charge_tag] = ("charge", u)
        self._good = set(h.good_quality) | {str(q) for q in h.good_quality}
        self._detected_style = self._retry(self._detect_time_style, "samples")

    def role_of(self, tag: str):
        """``(role, UnitConfig)`` of a configured tag (role: temperature, assay, charge)."""
        return self._units_by_tag.get(tag)

    # ------------------------------------------------------------ plumbing
    def _retry(self, fn, what):
        return with_retry(fn, retries=self.h.retries, what=f"historian ({what})")

    def _fetch(self, stmt):
        def run():
            with self.engine.connect() as conn:
                return conn.execute(stmt).fetchall()

        return self._retry(run, "query")

    def _stream(
        self, stmt, progress_label: str | None = None, *, context_below_seq: int | None = None
    ):
        """Rows in chunks of ``fetch_rows`` (server-side cursor where the driver has one).

        ``context_below_seq``: rows up to this seq were read earlier (a poll); rows of a
        repeated hour among them are read again to resolve this read's (see
        `_resolve_repeated_hour`).
        """

        def run():
            chunks, pending = [], []
            with (
                self.engine.connect() as conn,
                _cyclic_gc_paused(),
                _RowProgress(progress_label) as progress,
            ):
                result = conn.execution_options(
                    stream_results=True, yield_per=self.h.fetch_rows
                ).execute(stmt)
                for part in result.partitions(self.h.fetch_rows):
                    chunks.append(self._normalise_chunk(part, pending, len(chunks)))
                    progress.advance(len(part))
            return chunks, pending

        chunks, pending = self._retry(run, "query")
        if pending:
            self._resolve_repeated_hour(chunks, pending, context_below_seq)
        return chunks

    def _resolve_repeated_hour(self, chunks, pending, context_below_seq) -> None:
        """Times in a repeated (fall-back) hour, resolved by seq over the whole read.

        Resolution needs the rows written before the clock went back, which may sit in
        another chunk or, for a poll, in rows an earlier poll read.
        """
        tags = np.concatenate([chunks[i][0][pos] for i, pos, _ in pending])
        seq = np.concatenate([chunks[i][4][pos] for i, pos, _ in pending])
        raw = [v for _, _, values in pending for v in values]
        if context_below_seq is not None:
            s, zone = self.samples, self.h.naive_timezone
            lo = to_epoch_seconds([min(raw)], zone, seq=[0])[0][0]  # first-pass reading
            hi = to_epoch_seconds([max(raw)], zone, seq=[0])[0][0]
            rows = self._fetch(
                select(s["tag"], s["time"], s["seq"]).where(
                    s["tag"].in_(sorted(set(tags.tolist()))),
                    s["time"] >= self._bound(lo, True),
                    s["time"] <= self._bound(hi, False),
                    s["seq"] <= context_below_seq,
                )
            )
            tags = np.concatenate([tags, np.array([r[0] for r in rows], dtype=object)])
            seq = np.concatenate([seq, np.array([r[2] for r in rows], dtype=np.int64)])
            raw += [r[1] for r in rows]
        t, why = to_epoch_seconds(
            np.array(raw, dtype=object), self.h.naive_timezone, seq=seq, group=tags
        )
        k = 0
        for i, pos, _ in pending:
            chunks[i][1][pos] = t[k : k + len(pos)]
            chunks[i][5][pos] = why[k : k + len(pos)]
            k += len(pos)

    def _detect_time_style(self) -> str | None:
        col = self.samples["time"]
        row = None
        with self.engine.connect() as conn:
            row = conn.execute(select(col).where(col.is_not(None)).limit(1)).first()
        if row is None:
            return None  # an empty table: detected again when it has rows
        v = row[0]
        if isinstance(v, int | float | Decimal) and not isinstance(v, bool):
            return "epoch"
        if isinstance(v, str):
            has_off = v.endswith("Z") or (len(v) > 6 and v[-6] in "+-" and v[-3] == ":")
            sep = "T" if "T" in v else " "
            return f"text-{'aware' if has_off else 'naive'}-{sep}"
        if getattr(v, "tzinfo", None) is not None:
            return "datetime-aware"
        return "datetime-naive"

    @property
    def _time_style(self) -> str:
        if self._detected_style is None:
            self._detected_style = self._retry(self._detect_time_style, "samples")
        return self._detected_style or "text-T"

    def _bound(self, t_s: float, lower: bool):
        """Comparison value for the time column, widened so no row is missed."""
        style = self._time_style
        # text with offsets compares as UTC text only when offsets are alike: widen by 14 h
        margin = 15 * 3600.0 if style.startswith("text-aware") else 2 * 3600.0
        if style == "epoch" or style == "datetime-aware":
            margin = 1.0
        return format_bound(t_s - margin if lower else t_s + margin, style, self.h.naive_timezone)

    # ------------------------------------------------------------ batches
    def batches(self, unit: str | None = None, recipe: str | None = None):
        """Batches (sorted by start) and the problems found in the events table."""
        ev = self.events
        cols = [ev["batch"], ev["unit"], ev["recipe"], ev["event"], ev["time"]]
        order = ev["seq"] if ev["seq"] is not None else ev["time"]
        if ev["seq"] is not None:
            cols.append(ev["seq"])
        stmt = select(*cols).where(ev["event"].in_([self.h.start_event, self.h.end_event]))
        rows = self._fetch(stmt.order_by(order))
        problems: list[BatchProblem] = []
        if not rows:
            return [], problems
        seq = [r[5] for r in rows] if ev["seq"] is not None else None
        t, why = to_epoch_seconds(
            [r[4] for r in rows], self.h.naive_timezone, seq=seq, group=[r[1] for r in rows]
        )
        starts: dict = {}
        ends: dict = defaultdict(list)
        for r, ts, w in zip(rows, t, why, strict=True):
            bid = str(r[0])
            if w is not None or not math.isfinite(ts):
                problems.append(
                    BatchProblem(
                        f"batch {bid}: {r[3]} event time {r[4]!r} unusable ({w})", bid, r[1]
                    )
                )
                continue
            if r[3] == self.h.start_event:
                if bid in starts:
                    problems.append(
                        BatchProblem(f"batch {bid}: two start events; the first is used", bid, r[1])
                    )
                    continue
                starts[bid] = (str(r[1]), str(r[2]), float(ts))
            else:
                ends[bid].append(float(ts))
        out = []
        for bid, (u, rec, t0) in starts.items():
            end = None
            if ends.get(bid):
                good = [e for e in ends[bid] if e >= t0]
                if len(good) < len(ends[bid]):
                    problems.append(
                        BatchProblem(f"batch {bid}: end event before its start; ignored", bid, u)
                    )
                if len(good) > 1:
                    problems.append(
                        BatchProblem(
                            f"batch {bid}: {len(good)} end events; the first is used", bid, u
                        )
                    )
                end = min(good) if good else None
            out.append(Batch(bid, u, rec, t0, end))
        for bid in ends:
            if bid not in starts:
                problems.append(BatchProblem(f"batch {bid}: end event without a start", bid))
        out = [
            b
            for b in out
            if (unit is None or b.unit == unit) and (recipe is None or b.recipe == recipe)
        ]
        out.sort(key=lambda b: (b.start_s, b.batch))
        return out, problems

    def batch(self, batch_id: str) -> Batch:
        found = [b for b in self.batches()[0] if b.batch == batch_id]
        if not found:
            raise BatchNotFoundError(f"batch {batch_id!r} not found in the events table")
        return found[0]

    # ------------------------------------------------------------ samples
    def _sample_select(self):
        s = self.samples
        cols = [s["tag"], s["time"], s["value"]]
        cols.append(s["quality"] if s["quality"] is not None else s["tag"].label("no_q"))
        cols.append(s["seq"] if s["seq"] is not None else s["tag"].label("no_seq"))
        return select(*cols)

    def _normalise_chunk(self, rows, pending: list | None = None, index: int = 0):
        """Raw rows to arrays: tag, t_s, value, quality-ok, seq, time reason.

        With a seq column, rows in a repeated hour are left to `_resolve_repeated_hour`:
        (``index``, their positions, their raw times) go to ``pending``.
        """
        if not rows:
            e = np.empty(0)
            return (
                np.empty(0, dtype=object),
                e,
                e,
                np.empty(0, bool),
                None,
                np.empty(0, dtype=object),
            )
        n = len(rows)
        tag_col, times, value_col, quality_col, seq_col = zip(*rows, strict=True)
        # one string object per tag, not one per row (memory on long backfills)
        codes, names = pd.factorize(np.array(tag_col, dtype=object), use_na_sentinel=False)
        tags = np.asarray(names, dtype=object)[codes]
        try:
            value = np.array(value_col, dtype=float)  # None -> NaN
        except (TypeError, ValueError):
            value = np.array([_to_float(v) for v in value_col])
        if self.samples["quality"] is not None:
            ok = self._good
            good = np.fromiter(((q in ok) or (str(q) in ok) for q in quality_col), bool, n)
        else:
            good = np.ones(n, dtype=bool)
        seq = np.array(seq_col, dtype=np.int64) if self.samples["seq"] is not None else None
        t, why = to_epoch_seconds(np.array(times, dtype=object), self.h.naive_timezone)
        if seq is not None and pending is not None:
            repeated = np.flatnonzero(why == AMBIGUOUS)
            if len(repeated):
                pending.append((index, repeated, [times[i] for i in repeated]))
        return tags, t, value, good, seq, why

    def _clean(
        self, chunks, quality: QualitySummary, start_s=None, end_s=None, key_seen: set | None = None
    ) -> dict[str, TagSamples]:
        """Exclusions (counted), unit conversion, de-duplication on (tag, ts)."""
        by_tag: dict[str, list] = defaultdict(list)
        for tags, t, value, good, seq, why in chunks:
            if not len(tags):
                continue
            order = np.arange(len(tags)) if seq is None else np.argsort(seq, kind="stable")
            codes, names = pd.factorize(tags[order], use_na_sentinel=False)
            by_code = np.argsort(codes, kind="stable")  # keeps insertion order within a tag
            cuts = np.searchsorted(codes[by_code], np.arange(len(names) + 1))
            for k, tag in enumerate(names):
                m = order[by_code[cuts[k] : cuts[k + 1]]]
                by_tag[str(tag)].append((t[m], value[m], good[m], why[m]))
        out = {}
        for tag, parts in by_tag.items():
            t = np.concatenate([p[0] for p in parts])
            v = np.concatenate([p[1] for p in parts])
            g = np.concatenate([p[2] for p in parts])
            why = np.concatenate([p[3] for p in parts])
            role, unit = self._units_by_tag.get(tag, (None, None))
            keep = np.ones(len(t), dtype=bool)
            for reason in np.unique(why[why != None]):  # noqa: E711 - object array
                m = why == reason
                quality.add(tag, str(reason), int(m.sum()))
                keep &= ~m
            if start_s is not None or end_s is not None:
                inside = np.isfinite(t)
                if start_s is not None:
                    inside &= t >= start_s
                if end_s is not None:
                    inside &= t <= end_s
                keep &= inside
            bad_q = keep & ~g
            quality.add(tag, "bad_quality", int(bad_q.sum()))
            keep &= g
            nonfinite = keep & ~np.isfinite(v)
            quality.add(tag, "not_finite", int(nonfinite.sum()))
            keep &= ~nonfinite
            if role == "temperature":
                v = np.where(keep, to_kelvin(np.where(keep, v, 0.0), unit.temperature_unit), v)
                lo, hi = unit.temperature_limits_k
                out_lim = keep & ((v < lo) | (v > hi))
                quality.add(tag, "outside_limits", int(out_lim.sum()))
                keep &= ~out_lim
            t, v = t[keep], v[keep]
            # first occurrence (in insertion order) of each time wins
            order = np.argsort(t, kind="stable")
            t, v = t[order], v[order]
            first = np.concatenate([[True], np.diff(t) > 0]) if len(t) else np.zeros(0, bool)
            quality.add(tag, "duplicate", int((~first).sum()))
            if key_seen is not None and len(t):
                fresh = np.array([(tag, float(x)) not in key_seen for x in t], dtype=bool)
                quality.add(tag, "already_delivered", int((first & ~fresh).sum()))
                first &= fresh
            out[tag] = TagSamples(tag, t[first], v[first])
        return out

    def read_tags(
        self,
        tags,
        start_s: float | None = None,
        end_s: float | None = None,
        *,
        progress_label: str | None = None,
    ):
        """Good samples of ``tags`` within [start_s, end_s] (streamed; bounded memory)."""
        s = self.samples
        stmt = self._sample_select().where(s["tag"].in_(list(tags)))
        if start_s is not None:
            stmt = stmt.where(s["time"] >= self._bound(start_s, True))
        if end_s is not None:
            stmt = stmt.where(s["time"] <= self._bound(end_s, False))
        quality = QualitySummary()
        chunks = self._stream(stmt, progress_label)
        found = self._clean(chunks, quality, start_s, end_s)
        return {tag: found.get(tag, TagSamples.empty(tag)) for tag in tags}, quality

    def sample_counts(self, batches: list[Batch]) -> dict[str, tuple[int, int]]:
        """Good temperature and assay samples per batch within its window."""
        if not batches:
            return {}
        now = max((b.end_s or b.start_s) for b in batches) + 365 * DAY_S
        counts = {b.batch: [0, 0] for b in batches}
        by_unit = defaultdict(list)
        for b in batches:
            by_unit[b.unit].append(b)
        for unit_name, bs in by_unit.items():
            u = self.cfg.unit(unit_name)
            if u is None:
                continue
            tags = [u.temperature_tag] + ([u.assay_tag] if u.assay_tag else [])
            lo = min(b.start_s for b in bs)
            hi = max((b.end_s or now) for b in bs)
            found, _ = self.read_tags(tags, lo, hi, progress_label=f"reading {unit_name}")
            for i, tag in enumerate(tags):
                ts = found[tag].t_s
                for b in bs:
                    a = np.searchsorted(ts, b.start_s, "left")
                    z = np.searchsorted(ts, b.end_s if b.end_s is not None else now, "right")
                    counts[b.batch][i] = int(z - a)
        return {k: (v[0], v[1]) for k, v in counts.items()}

    def read_batch(self, batch: Batch, until_s: float | None = None) -> BatchData:
        """Temperature [K], assays and charge of one batch, up to ``until_s``."""
        u = self.cfg.unit(batch.unit)
        if u is None:
            raise DataQualityError(
                f"batch {batch.batch}: unit {batch.unit!r} is not in the configuration ([[units]])"
            )
        end = batch.end_s if until_s is None else until_s
        if batch.end_s is not None and end is not None:
            end = min(end, batch.end_s)
        tags = [t for t in (u.temperature_tag, u.assay_tag, u.charge_tag) if t]
        found, quality = self.read_tags(tags, batch.start_s, end)
        charge = None
        if u.charge_tag and len(found[u.charge_tag]):
            charge = float(found[u.charge_tag].value[0])
        assays = found[u.assay_tag] if u.assay_tag else TagSamples.empty("")
        return BatchData(batch, found[u.temperature_tag], assays, charge, quality)

    # ------------------------------------------------------------ incremental
    def initial_watermark(self, since_s: float) -> dict:
        """A watermark that starts reading at ``since_s``."""
        if self.samples["seq"] is not None:
            s = self.samples
            # just below the first row at or after since_s: a late row (old time, high
            # seq) must not move the start past rows of the period asked for
            first = self._fetch(
                select(func.min(s["seq"])).where(s["time"] >= self._bound(since_s, True))
            )[0][0]
            if first is not None:
                last = int(first) - 1
            else:  # nothing since then yet: start after the newest row
                newest = self._fetch(select(func.max(s["seq"])))[0][0]
                last = -1 if newest is None else int(newest)
            return {"mode": "seq", "seq": last, "recent": []}
        return {"mode": "time", "t_s": since_s, "keys": []}

    def poll(self, watermark: dict | None, tags: list[str] | None = None) -> PollResult:
        """Rows that arrived since ``watermark`` (``None``: from the beginning).

        With a ``seq`` column: keyset on ``seq`` plus a re-read of the last
        ``late_window_rows`` sequence numbers to catch rows that committed late
        with a lower ``seq``; delivered numbers in that window are kept in the
        watermark so a re-read delivers nothing twice. Without ``seq``: keyset on
        time with an overlap of ``safety_lag_s`` (``late_window_s`` for assays),
        de-duplicated against the keys kept in the watermark.
        """
        tags = list(tags or self._units_by_tag)
        if self.samples["seq"] is not None:
            return self._poll_seq(watermark or {"mode": "seq", "seq": -1, "recent": []}, tags)
        return self._poll_time(watermark or {"mode": "time", "t_s": None, "keys": []}, tags)

    def _poll_seq(self, wm: dict, tags) -> PollResult:
        s = self.samples
        window = self.h.late_window_rows
        last = int(wm.get("seq", -1))
        floor = max(last - window, -1)
        recent = set(wm.get("recent", []))
        tag = s["tag"]
        if self.engine.dialect.name == "sqlite" and self._seq_leads_an_index():
            # without statistics SQLite's planner takes the (tag, time) index for the IN
            # list and walks every row of those tags; an expression keeps it on seq
            tag = tag.concat("")
        stmt = self._sample_select().where(and_(tag.in_(tags), s["seq"] > floor))
        quality = QualitySummary()
        chunks = self._stream(stmt.order_by(s["seq"]), context_below_seq=floor)
        kept, again = [], []
        rows_read = 0
        new_max = last
        delivered = set()
        for chunk in chunks:
            seq = chunk[4]
            rows_read += len(seq)
            fresh = np.array([q not in recent for q in seq.tolist()], dtype=bool)
            if len(seq):
                new_max = max(new_max, int(seq.max()))
            delivered.update(seq[fresh].tolist())
            kept.append(tuple(a[fresh] for a in chunk))
            again.append(tuple(a[~fresh] for a in chunk))
        # a row re-sent within the re-read window repeats a sample delivered before
        seen = {
            (tag, float(x))
            for tag, x_s in self._clean(again, QualitySummary()).items()
            for x in x_s.t_s
        }
        samples = self._clean(kept, quality, key_seen=seen or None)
        keep_from = new_max - window
        recent = sorted(q for q in recent | delivered if q > keep_from)
        return PollResult(
            samples, {"mode": "seq", "seq": new_max, "recent": recent}, quality, rows_read
        )

    def _poll_time(self, wm: dict, tags) -> PollResult:
        s = self.samples
        lag = self.h.safety_lag_s
        t_last = wm.get("t_s")
        slow_tags = [t for t in tags if self._units_by_tag.get(t, ("x",))[0] != "temperature"]
        fast_tags = [t for t in tags if t not in slow_tags]
        seen = {(k[0], float(k[1])) for k in wm.get("keys", [])}
        quality = QualitySummary()
        chunks = []
        for group, overlap in ((fast_tags, lag), (slow_tags, self.h.late_window_s)):
            if not group:
                continue
            stmt = self._sample_select().where(s["tag"].in_(group))
            if t_last is not None:
                stmt = stmt.where(s["time"] >= self._bound(t_last - overlap, True))
            chunks.extend(self._stream(stmt))
        start = None if t_last is None else t_last - max(lag, self.h.late_window_s)
        samples = self._clean(chunks, quality, start, None, key_seen=seen)
        rows_read = sum(len(c[0]) for c in chunks)
        t_max = max([t_last or -math.inf] + [float(x.t_s[-1]) for x in samples.values() if len(x)])
        t_max = None if t_max == -math.inf else t_max
        horizon = (t_max or 0) - max(lag, self.h.late_window_s)
        keys = [[k[0], k[1]] for k in seen if k[1] >= horizon]
        for tag, x in samples.items():
            keys.extend([tag, float(t)] for t in x.t_s if t >= horizon)
        return PollResult(samples, {"mode": "time", "t_s": t_max, "keys": keys}, quality, rows_read)

    def _seq_leads_an_index(self) -> bool:
        """Whether rows can be found by a range of seq (its primary key or an index)."""
        seq, table = self.samples["seq"], self.samples.table
        if seq.primary_key and len(table.primary_key.columns) == 1:
            return True
        return any(list(ix.columns)[:1] == [seq] for ix in table.indexes)

    def close(self) -> None:
        self.engine.dispose()


@contextmanager
def _cyclic_gc_paused():
    """Cyclic garbage collection off while rows stream in: the rows hold no cycles, and
    collector passes over them took about half the time of a long backfill (measured,
    tests/benchmarks/bench_reader.py)."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _to_float(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


__all__ = ["HistorianReader"]
