"""The historian reader's contract, run against SQLite, PostgreSQL and MariaDB.

Every test writes its own small invented export (uniquely named tables, dropped
after) and reads it through `HistorianReader` as a site would: by
configuration alone. Temperature conversions are checked against NIST SP 811
(2008), appendix B.9 / ISO 80000-5:2019: T/K = t/°C + 273.15 (exact) and
T/K = (t/°F + 459.67) / 1.8.
"""

from __future__ import annotations

import gc
import json
import logging
import math
import time
from collections import Counter
from datetime import UTC, datetime, timedelta, timezone
from urllib.parse import urlencode
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sqlalchemy import create_engine, text
from sqlalchemy import event as sa_event

from monitor.errors import BatchNotFoundError, HistorianError, SchemaError
from monitor.historian.reader import HistorianReader
from tests.fixtures_db import DEFAULT_SCHEMA, POSTGRES_URL, require_server, ts_value

T0 = datetime(2026, 3, 2, 6, 0, tzinfo=UTC).timestamp()  # a Monday, far from any DST change
UNCERTAIN, BAD = 0x40000000, 0x80000000  # OPC UA StatusCode severities (Part 4, 7.39)
UNITS = [
    {
        "name": "R-1",
        "temperature_tag": "R1.TT",
        "temperature_unit": "degC",
        "temperature_limits": [-10.0, 200.0],
        "assay_tag": "R1.ASSAY",
        "charge_tag": "R1.CA0",
    },
    {
        "name": "R-2",
        "temperature_tag": "R2.TT",
        "temperature_unit": "degF",
        "temperature_limits": [-50.0, 400.0],
        "assay_tag": "R2.ASSAY",
    },
]
ALL_TAGS = ["R1.TT", "R1.ASSAY", "R1.CA0", "R2.TT", "R2.ASSAY"]


class Rows:
    """Sample rows (seq, tag, time, value, quality) with a running seq."""

    def __init__(self, ts_type: str = "text", seq: int = 1):
        self.ts_type, self.seq, self.rows = ts_type, seq, []

    def add(self, tag: str, t_s: float, value, quality=0, seq: int | None = None):
        row = (self.seq if seq is None else seq, tag, ts_value(t_s, self.ts_type), value, quality)
        self.seq = max(self.seq, row[0]) + 1
        self.rows.append(row)
        return row

    def take(self):
        """The rows added since the last call (for appending in steps)."""
        rows, self.rows = self.rows, []
        return rows


def event(seq, batch, unit, recipe, name, t_s, ts_type="text"):
    return (seq, batch, unit, recipe, name, ts_value(t_s, ts_type))


def three_batches(ts_type="text"):
    """B-1 and B-2 complete, B-3 running; seq order is not start order."""
    return [
        event(1, "B-2", "R-2", "CPL-3", "start", T0 + 1800, ts_type),
        event(2, "B-1", "R-1", "DIM-7", "start", T0, ts_type),
        event(3, "B-1", "R-1", "DIM-7", "charge", T0 + 60, ts_type),  # neither start nor end
        event(4, "B-1", "R-1", "DIM-7", "end", T0 + 7200, ts_type),
        event(5, "B-2", "R-2", "CPL-3", "end", T0 + 9000, ts_type),
        event(6, "B-3", "R-1", "DIM-7", "start", T0 + 14400, ts_type),
    ]


def delivered(polls) -> Counter:
    """(tag, t_s) -> times delivered, over a sequence of poll results."""
    out: Counter = Counter()
    for p in polls:
        for tag, s in p.samples.items():
            out.update((tag, float(t)) for t in s.t_s)
    return out


# ------------------------------------------------------------------ batches
def test_batches_running_and_complete_sorted(backend_url, exports):
    ex = exports(backend_url, [], three_batches())
    reader = ex.reader(UNITS)
    batches, problems = reader.batches()
    assert problems == []
    assert [b.batch for b in batches] == ["B-1", "B-2", "B-3"]
    assert [b.state for b in batches] == ["complete", "complete", "running"]
    assert [(b.start_s - T0, None if b.end_s is None else b.end_s - T0) for b in batches] == [
        (0.0, 7200.0),
        (1800.0, 9000.0),
        (14400.0, None),
    ]
    assert [b.batch for b in reader.batches(unit="R-1")[0]] == ["B-1", "B-3"]
    assert [b.batch for b in reader.batches(recipe="CPL-3")[0]] == ["B-2"]
    assert reader.batch("B-2").unit == "R-2"
    with pytest.raises(BatchNotFoundError) as err:
        reader.batch("B-9")
    assert err.value.exit_code == 2


def test_empty_tables_give_no_batches_and_no_samples(backend_url, exports):
    reader = exports(backend_url, [], []).reader(UNITS)
    assert reader.batches() == ([], [])
    found, quality = reader.read_tags(ALL_TAGS, T0, T0 + 3600)
    assert all(len(found[t]) == 0 for t in ALL_TAGS)
    assert not quality.excluded
    poll = reader.poll(None)
    assert poll.rows_read == 0 and all(len(s) == 0 for s in poll.samples.values())


def test_event_problems_are_reported_not_raised(backend_url, exports):
    events = [
        event(1, "B-1", "R-1", "DIM-7", "end", T0 + 3600),  # end without a start
        event(2, "B-2", "R-1", "DIM-7", "start", T0 + 4000),
        event(3, "B-2", "R-1", "DIM-7", "start", T0 + 4100),  # two starts: the first is used
        event(4, "B-2", "R-1", "DIM-7", "end", T0 + 8000),
        event(5, "B-3", "R-2", "CPL-3", "start", T0 + 9000),
        event(6, "B-3", "R-2", "CPL-3", "end", T0 + 8500),  # end before its start: ignored
        event(7, "B-4", "R-2", "CPL-3", "start", T0 + 20000),
        event(8, "B-4", "R-2", "CPL-3", "end", T0 + 24000),
    ]
    reader = exports(backend_url, [], events).reader(UNITS)
    batches, problems = reader.batches()
    assert [(b.batch, b.start_s - T0, b.end_s and b.end_s - T0) for b in batches] == [
        ("B-2", 4000.0, 8000.0),
        ("B-3", 9000.0, None),
        ("B-4", 20000.0, 24000.0),
    ]
    by_batch = {p.batch: p.message for p in problems}
    assert set(by_batch) == {"B-1", "B-2", "B-3"}
    assert "without a start" in by_batch["B-1"]
    assert "two start events" in by_batch["B-2"]
    assert "before its start" in by_batch["B-3"]


# ------------------------------------------------------------------ read_batch and exclusions
def test_read_batch_kelvin_from_degC(backend_url, exports):
    r = Rows()
    r.add("R1.TT", T0 - 60, 55.0)  # before the start: not part of the batch
    for i, v in enumerate([0.0, 25.0, 100.0, -10.0, 73.35]):
        r.add("R1.TT", T0 + 60 * i, v)
    r.add("R1.TT", T0 + 7260, 60.0)  # after the end
    r.add("R1.CA0", T0 + 10, 1.6)
    r.add("R1.ASSAY", T0 + 1800, 0.82)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    data = reader.read_batch(reader.batch("B-1"))
    assert_allclose(data.temperature.t_s - T0, [0, 60, 120, 180, 240], rtol=0, atol=1e-6)
    assert data.temperature.value[0] == 273.15  # 0 °C = 273.15 K exactly (NIST SP 811, B.9)
    assert_allclose(
        data.temperature.value, [273.15, 298.15, 373.15, 263.15, 346.5], rtol=0, atol=1e-9
    )
    assert data.charge == pytest.approx(1.6)
    assert_allclose(data.assays.value, [0.82])
    assert not data.quality.excluded
    # until_s cuts the window short
    early = reader.read_batch(reader.batch("B-1"), until_s=T0 + 90)
    assert len(early.temperature) == 2


def test_read_batch_kelvin_from_degF(backend_url, exports):
    r = Rows()
    # NIST SP 811 (2008) B.9: T/K = (t/°F + 459.67)/1.8
    fahrenheit = [32.0, 212.0, -40.0, 98.6, 158.0]
    kelvin = [273.15, 373.15, 233.15, 310.15, 343.15]
    for i, v in enumerate(fahrenheit):
        r.add("R2.TT", T0 + 1800 + 60 * i, v)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    data = reader.read_batch(reader.batch("B-2"))
    assert_allclose(data.temperature.value, kelvin, rtol=0, atol=1e-9)
    assert data.temperature.value[0] == 273.15
    assert_allclose(
        data.temperature.value, (np.array(fahrenheit) + 459.67) / 1.8, rtol=0, atol=1e-9
    )
    assert data.charge is None  # R-2 has no charge tag


def test_quality_codes_excluded_and_counted(backend_url, exports):
    r = Rows()
    codes = [0, UNCERTAIN, 0, BAD, BAD | 0x00340000, 0]
    for i, q in enumerate(codes):
        r.add("R1.TT", T0 + 60 * i, 20.0 + i, q)
    r.add("R1.ASSAY", T0 + 600, 0.9, BAD)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    data = reader.read_batch(reader.batch("B-1"))
    assert_allclose(data.temperature.value, [293.15, 295.15, 298.15], atol=1e-9)
    assert data.quality.excluded == Counter(
        {("R1.TT", "bad_quality"): 3, ("R1.ASSAY", "bad_quality"): 1}
    )
    assert len(data.assays) == 0


def test_string_quality_codes_in_a_custom_layout(backend_url, exports):
    r = Rows()
    for i, q in enumerate(["GOOD", "BAD", "SUSPECT", "GOOD", None]):
        r.add("R1.TT", T0 + 60 * i, 30.0 + i, q)
    events = [
        (None, "B-1", "R-1", "DIM-7", "start", ts_value(T0, "text")),
        (None, "B-1", "R-1", "DIM-7", "end", ts_value(T0 + 3600, "text")),
    ]
    ex = exports(backend_url, r.rows, events, schema="custom")
    reader = ex.reader(UNITS, good_quality=["GOOD"])
    data = reader.read_batch(reader.batch("B-1"))
    assert_allclose(data.temperature.value, [303.15, 306.15], atol=1e-9)
    assert data.quality.excluded == Counter({("R1.TT", "bad_quality"): 3})


def test_non_finite_and_sentinel_values_excluded_and_counted(backend_url, exports):
    r = Rows()
    r.add("R1.TT", T0, 50.0)
    r.add("R1.TT", T0 + 60, None)  # NULL
    non_finite = 1
    if "mysql" not in backend_url:  # MariaDB's DOUBLE cannot hold NaN or infinity
        r.add("R1.TT", T0 + 120, math.inf)
        r.add("R1.TT", T0 + 180, -math.inf)
        r.add("R1.TT", T0 + 240, math.nan)  # SQLite stores NaN as NULL: still not finite
        non_finite += 3
    r.add("R1.TT", T0 + 300, -999.0)  # the classic "no reading" sentinel: outside the limits
    r.add("R1.TT", T0 + 360, 9999.0)
    r.add("R1.TT", T0 + 420, 51.0)
    r.add("R1.ASSAY", T0 + 600, None)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    data = reader.read_batch(reader.batch("B-1"))
    assert_allclose(data.temperature.value, [323.15, 324.15], atol=1e-9)
    assert np.isfinite(data.temperature.value).all()
    assert data.quality.excluded == Counter(
        {
            ("R1.TT", "not_finite"): non_finite,
            ("R1.TT", "outside_limits"): 2,
            ("R1.ASSAY", "not_finite"): 1,
        }
    )


def test_duplicated_rows_delivered_once(backend_url, exports):
    r = Rows()
    for i in range(4):
        r.add("R1.TT", T0 + 60 * i, 40.0 + i)
    r.add("R1.TT", T0 + 60, 41.0)  # re-sent by a store-and-forward buffer
    r.add("R1.TT", T0 + 120, 42.0)
    r.add("R1.TT", T0 + 120, 42.0)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    data = reader.read_batch(reader.batch("B-1"))
    assert_allclose(data.temperature.t_s - T0, [0, 60, 120, 180], atol=1e-6)
    assert data.quality.excluded == Counter({("R1.TT", "duplicate"): 3})
    poll = reader.poll(None)
    assert_allclose(poll.samples["R1.TT"].t_s - T0, [0, 60, 120, 180], atol=1e-6)


def test_rows_out_of_order_are_sorted(backend_url, exports):
    r = Rows()
    times = [300, 0, 240, 60, 180, 120]
    for t in times:
        r.add("R1.TT", T0 + t, 20.0 + t / 60)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    data = reader.read_batch(reader.batch("B-1"))
    assert_allclose(data.temperature.t_s - T0, sorted(times), atol=1e-6)
    assert_allclose(data.temperature.value, [293.15 + t / 60 for t in sorted(times)], atol=1e-9)


def test_unknown_tag_gives_empty_samples(backend_url, exports):
    r = Rows()
    r.add("R1.TT", T0, 20.0)
    reader = exports(backend_url, r.rows, three_batches()).reader(UNITS)
    found, quality = reader.read_tags(["NO.SUCH.TAG"], T0 - 3600, T0 + 3600)
    assert list(found) == ["NO.SUCH.TAG"] and len(found["NO.SUCH.TAG"]) == 0
    assert not quality.excluded


# ------------------------------------------------------------------ configuration and safety
@pytest.mark.parametrize(
    "override, key",
    [
        ({"samples_table": "no_such_table"}, "historian.samples_table"),
        ({"events_table": "no_such_table"}, "historian.events_table"),
        (
            {
                "samples_columns": {
                    "seq": "seq",
                    "tag": "tag",
                    "time": "ts",
                    "value": "reading",
                    "quality": "quality",
                }
            },
            "historian.samples_columns.value",
        ),
        (
            {
                "events_columns": {
                    "seq": "seq",
                    "batch": "batch_id",
                    "unit": "unit",
                    "recipe": "recipe",
                    "event": "event",
                    "time": "logged_at",
                }
            },
            "historian.events_columns.time",
        ),
    ],
)
def test_missing_table_or_column_is_a_schema_error(backend_url, exports, override, key):
    ex = exports(backend_url, [], three_batches())
    with pytest.raises(SchemaError) as err:
        ex.reader(UNITS, **override)
    assert err.value.exit_code == 2
    assert err.value.key == key and f"[{key}]" in str(err.value)


def test_sql_injection_through_a_tag_reads_nothing(backend_url, exports):
    r = Rows()
    for i in range(5):
        r.add("R1.TT", T0 + 60 * i, 20.0)
    ex = exports(backend_url, r.rows, three_batches())
    reader = ex.reader(UNITS)
    evil = "x' OR '1'='1"
    found, _ = reader.read_tags([evil], T0 - 3600, T0 + 3600)
    assert len(found[evil]) == 0
    poll = reader.poll(None, tags=[evil])
    assert poll.rows_read == 0
    assert ex.tables_present() and ex.count("samples") == 5 and ex.count("events") == 6


def test_sql_injection_through_a_table_name_is_a_schema_error(backend_url, exports):
    ex = exports(backend_url, [Rows().add("R1.TT", T0, 20.0)], three_batches())
    evil = f"{ex.schema.samples}; DROP TABLE {ex.schema.events}"
    with pytest.raises(SchemaError) as err:
        ex.reader(UNITS, samples_table=evil)
    assert err.value.key == "historian.samples_table"
    with pytest.raises(SchemaError):
        ex.reader(UNITS, events_table=f"{ex.schema.events}; DROP TABLE {ex.schema.samples}")
    assert ex.tables_present() and ex.count("samples") == 1 and ex.count("events") == 6


# ------------------------------------------------------------------ timestamps
def _offset_text(t_s: float, minutes: int) -> str:
    return datetime.fromtimestamp(t_s, tz=timezone(timedelta(minutes=minutes))).isoformat()


TIME_FORMS = {
    # form: (ts_type, naive_timezone, render epoch seconds -> stored value)
    "iso-offsets": ("text", "UTC", lambda t, i: _offset_text(t, (120, -300, 0, 330)[i % 4])),
    "iso-zulu": ("text", "UTC", lambda t, i: _offset_text(t, 0).replace("+00:00", "Z")),
    "naive-text-local": (
        "text",
        "Europe/Berlin",
        lambda t, i: (
            datetime.fromtimestamp(t, tz=UTC)
            .astimezone(ZoneInfo("Europe/Berlin"))
            .replace(tzinfo=None)
            .isoformat(" ")
        ),
    ),
    "datetime-naive-utc": ("datetime", "UTC", lambda t, i: ts_value(t, "datetime")),
    "datetime-naive-local": (
        "datetime",
        "America/Chicago",
        lambda t, i: (
            datetime.fromtimestamp(t, tz=UTC)
            .astimezone(ZoneInfo("America/Chicago"))
            .replace(tzinfo=None)
        ),
    ),
    "timestamptz": ("timestamptz", "UTC", lambda t, i: ts_value(t, "timestamptz")),
    "epoch": ("epoch", "UTC", lambda t, i: float(t)),
}


@pytest.mark.parametrize("form", list(TIME_FORMS))
def test_timestamp_forms_read_as_utc(backend_url, exports, form):
    ts_type, zone, render = TIME_FORMS[form]
    if ts_type == "timestamptz" and not backend_url.startswith("postgresql"):
        pytest.skip("timestamptz is a PostgreSQL type")
    rel = [-7200, -60, 0, 600, 1800, 3599, 3600, 3601, 7200, 50000]
    samples = [(i + 1, "R1.TT", render(T0 + t, i), 20.0 + i, 0) for i, t in enumerate(rel)]
    events = [
        (1, "B-1", "R-1", "DIM-7", "start", render(T0, 0)),
        (2, "B-1", "R-1", "DIM-7", "end", render(T0 + 3600, 1)),
    ]
    reader = exports(backend_url, samples, events, ts_type=ts_type).reader(
        UNITS, naive_timezone=zone
    )
    (batch,), problems = reader.batches()
    assert problems == [] and (batch.start_s, batch.end_s) == (T0, T0 + 3600)
    data = reader.read_batch(batch)
    assert_allclose(data.temperature.t_s - T0, [0, 600, 1800, 3599, 3600], rtol=0, atol=1e-3)
    found, _ = reader.read_tags(["R1.TT"])
    assert_allclose(found["R1.TT"].t_s - T0, rel, rtol=0, atol=1e-3)


def test_reader_started_on_an_empty_table_reads_offsets_written_later(backend_url, exports):
    ex = exports(backend_url, [], three_batches())
    reader = ex.reader(UNITS)  # nothing to learn the time format from yet
    ex.append_samples(
        [(i + 1, "R1.TT", _offset_text(T0 + 600 * i, -300), 20.0, 0) for i in range(7)]
    )  # a site writing local time with its offset, UTC-5
    found, _ = reader.read_tags(["R1.TT"], T0, T0 + 3600)
    assert_allclose(found["R1.TT"].t_s - T0, [0, 600, 1200, 1800, 2400, 3000, 3600])


# ------------------------------------------------------------------ incremental polls (seq)
def test_polls_deliver_every_row_exactly_once(backend_url, exports):
    r = Rows()
    ex = exports(backend_url, [], three_batches())
    reader = ex.reader(UNITS)  # started on an empty table, as a new site would
    polls, expected = [], set()
    for step in range(5):
        for i in range(12):
            t = T0 + step * 720 + i * 60
            r.add("R1.TT", t, 40.0 + i)
            r.add("R2.TT", t + 5, 150.0 + i)
            expected |= {("R1.TT", t), ("R2.TT", t + 5)}
        r.add("R1.ASSAY", T0 + step * 720 + 300, 1.0 - 0.1 * step)
        expected.add(("R1.ASSAY", T0 + step * 720 + 300))
        ex.append_samples(r.take())
        polls.append(reader.poll(polls[-1].watermark if polls else None))
    polls.append(reader.poll(polls[-1].watermark))
    got = delivered(polls)
    assert set(got) == expected and set(got.values()) == {1}
    assert polls[-1].rows_read <= reader.h.late_window_rows + 1  # only the re-read window


def test_late_assay_with_high_seq_and_old_time_is_delivered(backend_url, exports):
    r = Rows()
    for i in range(60):
        r.add("R1.TT", T0 + 60 * i, 50.0)
    ex = exports(backend_url, r.take(), three_batches())
    reader = ex.reader(UNITS)
    first = reader.poll(None)
    r.add("R1.ASSAY", T0 + 600, 0.95)  # sampled at 10 min, entered by the lab an hour later
    r.add("R1.TT", T0 + 3600, 50.0)
    ex.append_samples(r.take())
    second = reader.poll(first.watermark)
    assert_allclose(second.samples["R1.ASSAY"].t_s, [T0 + 600])
    assert_allclose(second.samples["R1.TT"].t_s, [T0 + 3600])
    assert set(delivered([first, second]).values()) == {1}


def test_restart_from_committed_watermark_delivers_exactly_the_rest(backend_url, exports):
    r = Rows()
    for i in range(30):
        r.add("R1.TT", T0 + 60 * i, 50.0)
    ex = exports(backend_url, r.take(), three_batches())
    reader = ex.reader(UNITS)
    first = reader.poll(None)
    committed = json.dumps(first.watermark)  # what the store keeps
    for i in range(30, 45):
        r.add("R1.TT", T0 + 60 * i, 51.0)
    ex.append_samples(r.take())
    reader.poll(first.watermark)  # delivered, but the process dies before the commit
    reader.close()
    for i in range(45, 50):
        r.add("R1.TT", T0 + 60 * i, 52.0)
    ex.append_samples(r.take())
    after = ex.reader(UNITS).poll(json.loads(committed))
    assert_allclose(after.samples["R1.TT"].t_s - T0, [60 * i for i in range(30, 50)])
    assert set(delivered([first, after]).values()) == {1}


def test_row_committed_late_with_a_lower_seq_is_delivered_once(backend_url, exports):
    r = Rows()
    n = 20
    for i in range(1, n + 1):
        if i != n - 3:  # seq n-3 is taken by a transaction that commits late
            r.add("R1.TT", T0 + 60 * i, 60.0, seq=i)
    ex = exports(backend_url, r.take(), three_batches())
    reader = ex.reader(UNITS)
    first = reader.poll(None)
    assert first.watermark["seq"] == n
    ex.append_samples([(n - 3, "R1.TT", ts_value(T0 + 60 * (n - 3), "text"), 60.0, 0)])
    second = reader.poll(first.watermark)
    third = reader.poll(json.loads(json.dumps(second.watermark)))
    assert_allclose(second.samples["R1.TT"].t_s, [T0 + 60 * (n - 3)])
    assert delivered([third]) == Counter()
    got = delivered([first, second, third])
    assert len(got) == n and set(got.values()) == {1}


def test_duplicate_resent_in_a_later_poll_is_delivered_once(backend_url, exports):
    r = Rows()
    for i in range(10):
        r.add("R1.TT", T0 + 60 * i, 60.0 + i)
    ex = exports(backend_url, r.take(), three_batches())
    reader = ex.reader(UNITS)
    first = reader.poll(None)
    r.add("R1.TT", T0 + 540, 69.0)  # the last row again, replayed by a collector
    r.add("R1.TT", T0 + 600, 70.0)
    ex.append_samples(r.take())
    second = reader.poll(first.watermark)
    got = delivered([first, second])
    assert len(got) == 11 and set(got.values()) == {1}


def test_initial_watermark_then_poll_reads_everything_since(backend_url, exports):
    r = Rows()
    for i in range(120):
        r.add("R1.TT", T0 + 60 * i, 50.0)
    r.add("R1.ASSAY", T0 - 86400, 0.5)  # yesterday's batch, entered today: old time, high seq
    for i in range(120, 130):
        r.add("R1.TT", T0 + 60 * i, 50.0)
    ex = exports(backend_url, r.take(), three_batches())
    reader = ex.reader(UNITS, late_window_rows=5)  # the re-read window cannot hide a miss
    since = T0 + 3600
    poll = reader.poll(reader.initial_watermark(since))
    t = poll.samples["R1.TT"].t_s
    want = T0 + 60 * np.arange(60, 130)
    assert set(want.tolist()) <= set(t.tolist())


def test_sqlite_poll_walks_the_seq_range_not_the_tags(sqlite_url, exports):
    """SQLite without statistics would take the (tag, ts) index for the poll and read every
    row of the polled tags; the plan must be a range on the seq primary key."""
    r = Rows()
    for i in range(200):
        r.add("R1.TT", T0 + 60 * i, 50.0)
    ex = exports(sqlite_url, r.rows, three_batches())
    reader = ex.reader(UNITS)
    sent = []
    sa_event.listen(
        reader.engine,
        "before_cursor_execute",
        lambda conn, cur, stmt, params, ctx, many: sent.append((stmt, params)),
    )
    reader.poll({"mode": "seq", "seq": 190, "recent": []})
    stmt, params = next(x for x in sent if "ORDER BY" in x[0])
    with ex.engine.connect() as conn:
        plan = " | ".join(
            row[3] for row in conn.exec_driver_sql("EXPLAIN QUERY PLAN " + stmt, tuple(params))
        )
    assert ("(rowid>?)" in plan or "(seq>?)" in plan) and "TEMP B-TREE" not in plan, plan


def test_reads_leave_garbage_collection_on(sqlite_url, exports):
    r = Rows()
    r.add("R1.TT", T0, 20.0)
    reader = exports(sqlite_url, r.rows, three_batches()).reader(UNITS)
    reader.read_tags(["R1.TT"])
    assert gc.isenabled()
    reader._normalise_chunk = lambda *a: 1 / 0
    with pytest.raises(ZeroDivisionError):
        reader.read_tags(["R1.TT"])
    assert gc.isenabled()


# ------------------------------------------------------------------ incremental polls (no seq)
def test_polls_without_seq_deliver_each_row_once_and_late_assays(backend_url, exports):
    ex = exports(backend_url, [], three_batches(), schema=DEFAULT_SCHEMA.without("seq"))
    reader = ex.reader(
        UNITS,
        samples_columns={
            "seq": False,
            "tag": "tag",
            "time": "ts",
            "value": "value",
            "quality": "quality",
        },
        safety_lag_s=120,
        late_window_s=3600,
    )
    r = Rows()
    polls, expected = [], set()

    def poll():
        polls.append(reader.poll(json.loads(json.dumps(polls[-1].watermark)) if polls else None))

    for step in range(4):
        for i in range(10):
            t = T0 + step * 600 + i * 60
            r.add("R1.TT", t, 40.0 + i)
            expected.add(("R1.TT", t))
        ex.append_samples(r.take())
        poll()
    t_last = T0 + 3 * 600 + 9 * 60
    r.add("R1.TT", t_last - 60 + 30, 45.0)  # late by less than the safety lag
    r.add("R1.TT", t_last + 60, 46.0)
    r.add("R1.ASSAY", t_last - 1800, 0.7)  # late assay within late_window_s
    r.add("R1.ASSAY", t_last - 7200, 0.9)  # older than late_window_s: beyond the policy
    r.add("R1.TT", t_last, 49.0)  # a repeat of a delivered row
    expected |= {("R1.TT", t_last - 30), ("R1.TT", t_last + 60), ("R1.ASSAY", t_last - 1800)}
    ex.append_samples(r.take())
    poll()
    poll()
    got = delivered(polls)
    assert set(got) == expected and set(got.values()) == {1}
    assert polls[-1].rows_read > 0  # the overlap is re-read, and not delivered again


# ------------------------------------------------------------------ connection failures
def _terminate(admin_url: str, application_name: str) -> int:
    engine = create_engine(admin_url)
    try:
        with engine.begin() as conn:
            return len(
                conn.execute(
                    text(
                        "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                        "WHERE datname = 'test' AND pid <> pg_backend_pid() "
                        "AND application_name = :app"
                    ),
                    {"app": application_name},
                ).fetchall()
            )
    finally:
        engine.dispose()


@pytest.mark.postgres
def test_postgres_connection_dropped_mid_read_is_retried(exports, caplog):
    admin = require_server(POSTGRES_URL)
    r = Rows()
    n = 3000
    for i in range(n):
        r.add("R1.TT", T0 + 10 * i, 20.0 + (i % 100) / 10)
    app = f"convmon_test_{time.monotonic_ns() % 10**9}"
    ex = exports(admin, r.rows, three_batches())
    url = f"{admin}?{urlencode({'application_name': app})}"
    reader = ex.reader(UNITS, url=url, fetch_rows=200, retries=2)
    original, killed = reader._normalise_chunk, []

    def chunk_then_drop(*args):
        out = original(*args)
        if not killed:  # after the first chunk of the first attempt: drop the connection
            killed.append(_terminate(admin, app))
        return out

    reader._normalise_chunk = chunk_then_drop
    with caplog.at_level(logging.WARNING, logger="monitor.historian.engine"):
        found, quality = reader.read_tags(["R1.TT"])
    assert killed == [1]
    assert "retrying" in caplog.text
    assert_allclose(found["R1.TT"].t_s - T0, 10.0 * np.arange(n), atol=1e-6)
    assert_allclose(found["R1.TT"].value, 293.15 + (np.arange(n) % 100) / 10, atol=1e-9)
    assert not quality.excluded


@pytest.mark.parametrize(
    "url",
    [
        "postgresql+psycopg://postgres@127.0.0.1:1/test",
        "mysql+pymysql://root@127.0.0.1:1/test",
    ],
)
def test_unreachable_historian_is_a_historian_error_after_retries(url, exports, sqlite_url):
    ex = exports(sqlite_url, [], [])
    t = time.perf_counter()
    with pytest.raises(HistorianError) as err:
        HistorianReader(ex.config(UNITS, url=url, retries=1, connect_timeout_s=1))
    assert err.value.exit_code == 3
    assert "unreachable" in str(err.value)
    assert time.perf_counter() - t < 10
