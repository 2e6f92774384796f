"""The second invented export (sample_historian/other_schema.py) read by configuration alone.

Another table layout, °F, string status codes, naive America/Chicago wall-clock
text across the 2026 spring-forward and fall-back, no seq on the events, late lab
entries. Expected instants are from the IANA tz database as shipped by Python's
``zoneinfo``; kelvin from NIST SP 811 (2008) appendix B.9: T/K = (t/°F + 459.67)/1.8.
"""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
from collections import Counter
from datetime import datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from numpy.testing import assert_allclose

from monitor.config import config_from_dict, load_config
from monitor.errors import SchemaError
from monitor.historian.reader import HistorianReader
from sample_historian.other_schema import REACTORS, generate_other
from tests.fixtures_plant import write_config

REPO = Path(__file__).resolve().parents[1]
CONFIG = REPO / "config" / "other_schema.toml"
CHICAGO = ZoneInfo("America/Chicago")
TEMPS = [REACTORS[r][0] for r in REACTORS]
ALL_POINTS = [p for r in REACTORS.values() for p in r[:3] if p]


def _config_for(db: Path, folder: Path) -> Path:
    """config/other_schema.toml pointed at ``db`` (kinetics paths made absolute)."""
    return write_config(CONFIG, db, folder / "other_schema.toml")


@pytest.fixture(scope="module")
def other(tmp_path_factory):
    folder = tmp_path_factory.mktemp("other_schema")
    db = folder / "other_schema.db"
    truth = generate_other(db)
    cfg = load_config(_config_for(db, folder))
    reader = HistorianReader(cfg)
    yield db, truth, cfg, reader
    reader.close()


def _digest(db: Path) -> str:
    con = sqlite3.connect(db)
    try:
        rows = con.execute("SELECT * FROM hist_values ORDER BY rec_no").fetchall()
        rows += con.execute("SELECT * FROM unit_procedures ORDER BY rowid").fetchall()
    finally:
        con.close()
    return hashlib.sha256(repr(rows).encode()).hexdigest()


def test_generation_is_deterministic(other, tmp_path):
    db, truth, _, _ = other
    again = generate_other(tmp_path / "again.db")
    assert _digest(tmp_path / "again.db") == _digest(db)
    assert again == truth


def test_shipped_config_is_complete():
    cfg = load_config(CONFIG)
    h = cfg.historian
    assert (h.samples_table, h.events_table) == ("hist_values", "unit_procedures")
    assert h.events_columns.seq is None and h.samples_columns.seq == "rec_no"
    assert h.naive_timezone == "America/Chicago" and h.good_quality == ("GOOD",)
    assert [u.temperature_unit for u in cfg.units] == ["degF", "degF"]
    assert set(cfg.recipes) == {r[3] for r in REACTORS.values()}
    assert all(r.kinetics.is_file() for r in cfg.recipes.values())


def test_default_layout_does_not_read_it(other):
    db, _, _, _ = other
    with pytest.raises(SchemaError) as err:
        HistorianReader(config_from_dict({"historian": {"url": f"sqlite:///{db}"}}))
    assert err.value.key == "historian.samples_table" and err.value.exit_code == 2


def test_batches_found(other):
    _, truth, _, reader = other
    batches, problems = reader.batches()
    assert problems == []
    got = [
        {
            "batch": b.batch,
            "unit": b.unit,
            "recipe": b.recipe,
            "start_s": b.start_s,
            "end_s": b.end_s,
        }
        for b in batches
    ]
    assert got == truth["batches"]
    assert [b.batch for b in batches if b.state == "running"] == ["RX1-1101-20"]


def test_batch_durations_in_real_time_across_both_changes(other):
    _, _, _, reader = other
    # wall clock 22:30 -> 05:00 on 7/8 March is 6.5 h, but one hour never happened
    spring = reader.batch("RX1-0307-22")
    assert spring.end_s - spring.start_s == 330 * 60
    # wall clock 22:30 -> 03:00 on 31 Oct/1 Nov is 4.5 h, but one hour happened twice
    fall = reader.batch("RX1-1031-22")
    assert fall.end_s - fall.start_s == 330 * 60
    assert fall.start_s == datetime(2026, 10, 31, 22, 30, tzinfo=CHICAGO).timestamp()


def test_utc_instants_across_both_transitions(other):
    _, truth, _, reader = other
    found, _ = reader.read_tags(TEMPS)
    for tag in TEMPS:
        want = np.array([t for t, _ in truth["samples_degF_or_lab"][tag]])
        assert_allclose(found[tag].t_s, want, rtol=0, atol=1e-6)
        t = set(found[tag].t_s.tolist())
        # the repeated hour: 01:30 read twice, an hour of real time apart (fold 0, then 1)
        first = datetime(2026, 11, 1, 1, 30, fold=0, tzinfo=CHICAGO).timestamp()
        second = datetime(2026, 11, 1, 1, 30, fold=1, tzinfo=CHICAGO).timestamp()
        assert second - first == 3600 and {first, second} <= t
        # the skipped hour: 01:58 CST is followed, two minutes later, by 03:00 CDT
        before = datetime(2026, 3, 8, 1, 58, tzinfo=CHICAGO).timestamp()
        after = datetime(2026, 3, 8, 3, 0, tzinfo=CHICAGO).timestamp()
        assert after - before == 120 and {before, after} <= t
        steps = np.diff(found[tag].t_s)
        assert np.all(np.isclose(steps % 120, 0) & (steps > 0) | (steps > 86400))


def test_kelvin_from_fahrenheit(other):
    _, truth, _, reader = other
    found, _ = reader.read_tags(TEMPS)
    for tag in TEMPS:
        deg_f = np.array([v for _, v in truth["samples_degF_or_lab"][tag]])
        assert_allclose(found[tag].value, (deg_f + 459.67) / 1.8, rtol=0, atol=1e-9)
        assert found[tag].value.min() > 250 and found[tag].value.max() < 360


def test_exclusions_counted(other):
    _, truth, _, reader = other
    _, quality = reader.read_tags(ALL_POINTS)
    want = Counter({tuple(k.split("|")): n for k, n in truth["excluded"].items()})
    assert quality.excluded == want
    assert {r for _, r in want} == {
        "bad_quality",
        "outside_limits",
        "not_finite",
        "duplicate",
        "nonexistent_time",
    }


def test_read_batch_gives_kelvin_assays_and_charge(other):
    _, truth, cfg, reader = other
    b = reader.batch("RX1-1031-22")
    data = reader.read_batch(b)
    tt = [t for t, _ in truth["samples_degF_or_lab"]["RX1.TEMP"] if b.start_s <= t <= b.end_s]
    assert_allclose(data.temperature.t_s, tt, rtol=0, atol=1e-6)
    lab = [
        (t, v) for t, v in truth["samples_degF_or_lab"]["RX1.LAB_CA"] if b.start_s <= t <= b.end_s
    ]
    assert_allclose(data.assays.t_s, [t for t, _ in lab])
    assert_allclose(data.assays.value, [v for _, v in lab])
    assert data.charge == pytest.approx(cfg.recipe("DIM-7").initial_concentration, rel=0.05)


def test_polls_deliver_late_assays_once(other, tmp_path):
    """Replay the export in four parts of rec_no, as a live monitor would see it arrive."""
    db, truth, cfg, _ = other
    live = tmp_path / "live.db"
    shutil.copy(db, live)
    con = sqlite3.connect(live)
    n = con.execute("SELECT max(rec_no) FROM hist_values").fetchone()[0]
    lab = [
        r[0]
        for r in con.execute(
            "SELECT rec_no FROM hist_values WHERE point_name LIKE '%LAB%' ORDER BY rec_no"
        )
    ]
    cuts = [lab[int(len(lab) * f)] - 1 for f in (0.4, 0.6, 0.8)]  # a lab entry opens each part
    rest = con.execute(
        "SELECT * FROM hist_values WHERE rec_no > ? ORDER BY rec_no", (cuts[0],)
    ).fetchall()
    con.execute("DELETE FROM hist_values WHERE rec_no > ?", (cuts[0],))
    con.commit()
    live_cfg = load_config(_config_for(live, tmp_path))
    reader = HistorianReader(live_cfg)
    try:
        polls = [reader.poll(None)]
        for lo, hi in zip(cuts, cuts[1:] + [n], strict=True):
            con.executemany(
                "INSERT INTO hist_values VALUES (?, ?, ?, ?, ?)",
                [r for r in rest if lo < r[0] <= hi],
            )
            con.commit()
            polls.append(reader.poll(polls[-1].watermark))
    finally:
        reader.close()
        con.close()
    got = Counter()
    for p in polls:
        for tag, s in p.samples.items():
            got.update((tag, float(t)) for t in s.t_s)
    want = {(p, float(t)) for p, v in truth["samples_degF_or_lab"].items() for t, _ in v}
    assert set(got) == want and set(got.values()) == {1}
    # some lab results arrived in a later poll than temperatures sampled after them
    first_max_t = max(float(s.t_s.max()) for s in polls[0].samples.values() if len(s))
    late = [
        t
        for p in polls[1:]
        for tag, s in p.samples.items()
        if "LAB" in tag
        for t in s.t_s
        if t < first_max_t
    ]
    assert late
