"""Naive local timestamps across DST changes, against the IANA tz database.

The expected instants come from the IANA tz database as shipped by Python's
``zoneinfo``: ``datetime(..., fold=0|1, tzinfo=ZoneInfo(zone)).timestamp()``,
where fold=0 is the first pass through a repeated hour (daylight time) and
fold=1 the second (standard time). The transitions used (2026):

- America/Chicago: fall-back 1 Nov 02:00 CDT -> 01:00 CST (01:00-01:59 twice);
  spring-forward 8 Mar 02:00 CST -> 03:00 CDT (02:00-02:59 does not exist).
- Europe/Berlin: fall-back 25 Oct 03:00 CEST -> 02:00 CET (02:00-02:59 twice);
  spring-forward 29 Mar 02:00 CET -> 03:00 CEST (02:00-02:59 does not exist).

With a ``seq`` column the repeated hour is resolved by insertion order; without
one those rows are left out and counted as ``ambiguous_dst``. A time in the
skipped hour is a clock error, left out and counted as ``nonexistent_time``.
"""

from __future__ import annotations

import json
from collections import Counter
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.fixtures_db import DEFAULT_SCHEMA

# zone -> (date of fall-back, repeated hour, date of spring-forward, skipped hour)
TRANSITIONS = {
    "America/Chicago": ((2026, 11, 1), 1, (2026, 3, 8), 2),
    "Europe/Berlin": ((2026, 10, 25), 2, (2026, 3, 29), 2),
}
UNITS = [
    {
        "name": "R-1",
        "temperature_tag": "R1.TT",
        "temperature_unit": "degC",
        "assay_tag": "R1.ASSAY",
    },
    {
        "name": "R-2",
        "temperature_tag": "R2.TT",
        "temperature_unit": "degF",
        "temperature_limits": [0.0, 400.0],
    },
]
NO_SEQ = {"seq": False, "tag": "tag", "time": "ts", "value": "value", "quality": "quality"}


def fall_back_walk(zone: str, step_min: int = 10):
    """The wall clock read every ``step_min`` from one hour before the repeated hour to one
    hour after its second pass: (naive local datetime, fold, expected epoch seconds)."""
    (y, m, d), hour, _, _ = TRANSITIONS[zone]
    tz = ZoneInfo(zone)
    out = []
    for h, fold in ((hour - 1, 0), (hour, 0), (hour, 1), (hour + 1, 0)):
        for minute in range(0, 60, step_min):
            local = datetime(y, m, d, h, minute)
            out.append((local, fold, local.replace(tzinfo=tz, fold=fold).timestamp()))
    return out


def spring_forward_walk(zone: str, step_min: int = 10):
    """The wall clock around the skipped hour (which it never shows)."""
    _, _, (y, m, d), hour = TRANSITIONS[zone]
    tz = ZoneInfo(zone)
    out = []
    for h in (hour - 1, hour + 1):
        for minute in range(0, 60, step_min):
            local = datetime(y, m, d, h, minute)
            out.append((local, 0, local.replace(tzinfo=tz).timestamp()))
    return out


def render(local: datetime, ts_type: str):
    return local.isoformat(" ") if ts_type == "text" else local


def rows_for(walk, tags, ts_type="text", seq0=1):
    """Rows (seq, tag, time, value, quality), tags interleaved in wall-clock order."""
    rows, seq = [], seq0
    for i, (local, _fold, _t) in enumerate(walk):
        for j, tag in enumerate(tags):
            rows.append((seq, tag, render(local, ts_type), 50.0 + i + j, 0))
            seq += 1
    return rows


@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_walks_agree_with_the_iana_rules(zone):
    """The fixtures themselves: ten-minute steps of real time, hour repeated or skipped."""
    fb = np.array([w[2] for w in fall_back_walk(zone)])
    assert_allclose(np.diff(fb), 600.0)
    sf = spring_forward_walk(zone)
    assert_allclose(np.diff([w[2] for w in sf]), 600.0)
    local_jump = sf[6][0] - sf[5][0]
    assert local_jump == timedelta(hours=1, minutes=10)


@pytest.mark.parametrize("ts_type", ["text", "datetime"])
@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_fall_back_with_seq_is_resolved(backend_url, exports, zone, ts_type):
    walk = fall_back_walk(zone)
    ex = exports(backend_url, rows_for(walk, ["R1.TT", "R2.TT"], ts_type), [], ts_type=ts_type)
    reader = ex.reader(UNITS, naive_timezone=zone)
    found, quality = reader.read_tags(["R1.TT", "R2.TT"])
    expected = [w[2] for w in walk]
    for tag in ("R1.TT", "R2.TT"):
        assert_allclose(found[tag].t_s, expected, rtol=0, atol=1e-6)
    assert not quality.excluded


@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_fall_back_without_seq_is_excluded_and_counted(backend_url, exports, zone):
    walk = fall_back_walk(zone)
    ex = exports(
        backend_url, rows_for(walk, ["R1.TT", "R2.TT"]), [], schema=DEFAULT_SCHEMA.without("seq")
    )
    reader = ex.reader(UNITS, naive_timezone=zone, samples_columns=NO_SEQ)
    found, quality = reader.read_tags(["R1.TT", "R2.TT"])
    hour = TRANSITIONS[zone][1]
    unambiguous = [w[2] for w in walk if w[0].hour != hour]
    for tag in ("R1.TT", "R2.TT"):
        assert_allclose(found[tag].t_s, unambiguous, rtol=0, atol=1e-6)
    assert quality.excluded == Counter(
        {("R1.TT", "ambiguous_dst"): 12, ("R2.TT", "ambiguous_dst"): 12}
    )


@pytest.mark.parametrize("seq", [True, False])
@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_spring_forward_and_a_time_in_the_gap(backend_url, exports, zone, seq):
    walk = spring_forward_walk(zone)
    rows = rows_for(walk, ["R1.TT"])
    _, _, (y, m, d), hour = TRANSITIONS[zone]
    rows.append((len(rows) + 1, "R1.TT", datetime(y, m, d, hour, 30).isoformat(" "), 55.0, 0))
    kw = {} if seq else {"samples_columns": NO_SEQ}
    schema = DEFAULT_SCHEMA if seq else DEFAULT_SCHEMA.without("seq")
    reader = exports(backend_url, rows, [], schema=schema).reader(UNITS, naive_timezone=zone, **kw)
    found, quality = reader.read_tags(["R1.TT"])
    assert_allclose(found["R1.TT"].t_s, [w[2] for w in walk], rtol=0, atol=1e-6)
    assert quality.excluded == Counter({("R1.TT", "nonexistent_time"): 1})


@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_batch_events_across_the_fall_back(backend_url, exports, zone):
    """Start at :40 in the first pass, end at :20 in the second: the unit's event clock is
    seen to go back. (Start :20, end :40 of the second pass would read the same as a
    20-minute batch in the first pass: nothing in the events tells them apart.)"""
    walk = fall_back_walk(zone)
    start, end = walk[10], walk[14]
    assert (start[1], end[1]) == (0, 1) and end[0] < start[0]
    events = [
        (1, "B-1", "R-1", "DIM-7", "start", render(start[0], "text")),
        (2, "B-1", "R-1", "DIM-7", "end", render(end[0], "text")),
    ]
    ex = exports(backend_url, rows_for(walk, ["R1.TT"]), events)
    reader = ex.reader(UNITS, naive_timezone=zone)
    (batch,), problems = reader.batches()
    assert problems == []
    assert (batch.start_s, batch.end_s) == (start[2], end[2])
    data = reader.read_batch(batch)
    assert_allclose(data.temperature.t_s, [w[2] for w in walk[10:15]], rtol=0, atol=1e-6)


@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_fall_back_resolved_across_fetch_chunks(backend_url, exports, zone):
    """A chunk of ``fetch_rows`` may end exactly where the wall clock goes back."""
    walk = fall_back_walk(zone, step_min=1)  # 60 rows per pass of the hour
    rows = rows_for(walk, ["R1.TT"])
    ex = exports(backend_url, rows, [])
    expected = [w[2] for w in walk]
    for fetch_rows in (100, 120, 150):  # 120: the second pass starts a chunk in seq order
        reader = ex.reader(UNITS, naive_timezone=zone, fetch_rows=fetch_rows)
        found, quality = reader.read_tags(["R1.TT"])
        assert_allclose(
            found["R1.TT"].t_s, expected, rtol=0, atol=1e-6, err_msg=f"fetch_rows={fetch_rows}"
        )
        assert not quality.excluded


@pytest.mark.parametrize("late_window_rows", [0, 5000])
@pytest.mark.parametrize("zone", list(TRANSITIONS))
def test_fall_back_resolved_across_polls(backend_url, exports, zone, late_window_rows):
    """The first pass is read in one poll, the second pass in the next ones."""
    walk = fall_back_walk(zone)
    rows = rows_for(walk, ["R1.TT", "R2.TT"])
    ex = exports(backend_url, rows[:24], [])  # up to the end of the first pass
    reader = ex.reader(UNITS, naive_timezone=zone, late_window_rows=late_window_rows)
    polls = [reader.poll(None)]
    for part in (rows[24:26], rows[26:36], rows[36:]):
        ex.append_samples(part)
        polls.append(reader.poll(json.loads(json.dumps(polls[-1].watermark))))
    got = Counter()
    for p in polls:
        for tag, s in p.samples.items():
            got.update((tag, float(t)) for t in s.t_s)
    expected = {(tag, w[2]) for w in walk for tag in ("R1.TT", "R2.TT")}
    assert set(got) == expected and set(got.values()) == {1}


@pytest.mark.parametrize(
    "suffix", ["+05:30", "-03:00", "+0530", "Z", ""], ids=["hh:mm", "neg", "hhmm", "Z", "naive"]
)
@pytest.mark.parametrize("sep, frac", [("T", ".250"), (" ", "")])
def test_uniform_text_columns_match_the_standard_library(suffix, sep, frac):
    """Columns in one format (the common case, parsed in bulk) against Python's own
    ``datetime.fromisoformat``; naive text is read in Europe/Berlin."""
    from monitor.historian.timestamps import to_epoch_seconds

    zone = ZoneInfo("Europe/Berlin")
    base = datetime(2026, 7, 1, 12, 0)
    text = [
        (base + timedelta(minutes=7 * i)).strftime(f"%Y-%m-%d{sep}%H:%M:%S") + frac + suffix
        for i in range(50)
    ]
    t, why = to_epoch_seconds(text, "Europe/Berlin")
    iso = [x.replace("Z", "+00:00") for x in text]
    if suffix == "+0530":
        iso = [x[:-2] + ":" + x[-2:] for x in iso]
    want = [
        (d if d.tzinfo else d.replace(tzinfo=zone)).timestamp()
        for d in map(datetime.fromisoformat, iso)
    ]
    assert_allclose(t, want, rtol=0, atol=1e-6)
    assert all(w is None for w in why)
