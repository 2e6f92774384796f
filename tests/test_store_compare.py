"""The store comparison itself: it sees a difference in any column, and only beyond its rules."""

from __future__ import annotations

import json

import pytest
from sqlalchemy import text

from monitor.store import Store
from tests.store_compare import REL, compare_stores, read_store

T0 = 1_791_358_200.125


def _doc(at_s: float, end_s: float) -> str:
    from monitor.timefmt import iso

    return json.dumps(
        {"batch": "B-1", "at": iso(at_s), "conversion": 0.5123456789, "predicted_end": iso(end_s)}
    )


def _store(tmp_path, name: str) -> Store:
    """A store with one committed cycle: a batch, an estimate, an alert, kinetics, heartbeat."""
    store = Store(f"sqlite:///{tmp_path / name}")
    store.commit_cycle(
        watermark={"mode": "seq", "seq": 41, "recent": [39, 40, 41]},
        batch_rows=[
            {
                "batch": "B-1",
                "unit": "R-1",
                "recipe": "DIM-7",
                "start_s": T0 - 3600.5,
                "end_s": None,
                "state": "running",
            }
        ],
        estimate_rows=[
            {
                "batch": "B-1",
                "at_s": T0,
                "conversion": 0.5123456789,
                "conversion_sd": 0.01,
                "activity": 1.02,
                "activity_sd": 0.03,
                "target_conversion": 0.95,
                "predicted_end_s": T0 + 7200.25,
                "p10_s": T0 + 6600.0,
                "p90_s": T0 + 7800.0,
                "forecast_note": "",
                "n_assays_used": 2,
                "warnings": json.dumps(["assay at 06:10 is 4.25 sd from the model; not used"]),
                "kinetics_version": "v1",
                "config_version": "c1",
                "computed_s": T0 + 60.0,
                "doc": _doc(T0, T0 + 7200.25),
            }
        ],
        alert_changes=[
            {
                "op": "raise",
                "batch": "B-1",
                "kind": "assay_mismatch",
                "severity": "warning",
                "state": "open",
                "raised_at_s": T0,
                "message": "assay at 06:10 is 4.25 sd from the model; not used",
            }
        ],
        kinetics_rows=[
            {"version": "v1", "recipe": "DIM-7", "source": "k.toml", "first_used_s": T0}
        ],
        now_s=T0 + 60.0,
        last_data_s=T0,
    )
    return store


@pytest.fixture
def pair(tmp_path):
    a, b = _store(tmp_path, "a.db"), _store(tmp_path, "b.db")
    yield a, b
    a.close()
    b.close()


def _set(store: Store, sql: str, **params) -> None:
    with store.engine.begin() as conn:
        conn.execute(text(sql), params)


def test_equal_stores_agree_and_a_store_is_not_compared_with_itself(pair):
    a, b = pair
    assert compare_stores(a, b) == []
    assert set(read_store(a)) >= {"estimates", "alerts", "heartbeat", "alembic_version"}
    with pytest.raises(ValueError, match="itself"):
        compare_stores(a, Store(a.url))
    with pytest.raises(ValueError, match="reason"):
        compare_stores(a, b, exclude={"heartbeat.cycles": ""})
    with pytest.raises(ValueError, match="no such"):
        compare_stores(a, b, exclude={"heartbeat.cyclez": "a typo"})


@pytest.mark.parametrize(
    "column, factor, seen",
    [
        ("p10_s", 1 + 1e-12, False),  # float noise
        ("p10_s", 1 + 1e-8, True),  # ~18 s at a 2026 epoch time
        ("p90_s", 1 + 1e-8, True),
        ("conversion_sd", 1 + 1e-8, True),
        ("activity_sd", 1 - 1e-6, True),
        ("target_conversion", 1 + 2 * REL, True),
    ],
)
def test_each_float_column_within_the_stated_tolerance_only(pair, column, factor, seen):
    a, b = pair
    # the column name is one of this test's constants; the value is bound
    _set(b, f"UPDATE estimates SET {column} = {column} * :f", f=factor)
    diffs = compare_stores(a, b)
    assert bool(diffs) is seen, diffs
    if seen:
        assert diffs == [diffs[0]] and f".{column}:" in diffs[0]


def test_documents_are_compared_as_data(pair):
    a, b = pair
    doc = json.loads(_doc(T0, T0 + 7200.25))
    _set(
        b, "UPDATE estimates SET doc = :d", d=json.dumps({**doc, "conversion": 0.5123457})
    )  # 6e-8 relative
    assert compare_stores(a, b) and "doc.conversion" in compare_stores(a, b)[0]
    _set(b, "UPDATE estimates SET doc = :d", d=_doc(T0, T0 + 7201.0))  # the second flips
    assert compare_stores(a, b) == []
    _set(b, "UPDATE estimates SET doc = :d", d=_doc(T0, T0 + 7260.0))  # a minute later
    assert "doc.predicted_end" in compare_stores(a, b)[0]
    _set(b, "UPDATE estimates SET doc = :d", d=json.dumps({**doc, "extra": 1}))
    assert "doc.extra: only in B" in compare_stores(a, b)[0]


def test_text_with_numbers_alerts_heartbeat_watermark_and_rows(pair):
    a, b = pair
    _set(b, "UPDATE alerts SET message = 'assay at 06:10 is 4.26 sd from the model; not used'")
    assert "alerts['B-1', 'assay_mismatch'" in compare_stores(a, b)[0]
    _set(b, "UPDATE alerts SET message = 'assay at 06:10 is 4.25 sd from the model; used'")
    assert compare_stores(a, b)
    _set(b, "UPDATE alerts SET message = 'assay at 06:10 is 4.25 sd from the model; not used'")
    _set(b, "UPDATE estimates SET warnings = '[]'")
    assert "warnings" in compare_stores(a, b)[0]
    _set(
        b,
        "UPDATE estimates SET warnings = :w",
        w=read_store(a)["estimates"][("B-1", T0, "v1", "c1")]["warnings"],
    )
    assert compare_stores(a, b) == []
    _set(b, "UPDATE heartbeat SET cycles = 2")
    assert compare_stores(a, b) == ["heartbeat['monitor'].cycles: 1 != 2"]
    assert compare_stores(a, b, exclude={"heartbeat.cycles": "testing the exclusion"}) == []
    _set(b, "UPDATE watermarks SET value = :v", v='{"mode":"seq","seq":41,"recent":[39,40]}')
    assert (
        "watermarks['historian'].value.recent"
        in compare_stores(a, b, exclude={"heartbeat": "testing a table's exclusion"})[0]
    )
    _set(b, "DELETE FROM alerts")
    assert any("row only in A" in d for d in compare_stores(a, b))
    _set(b, "CREATE TABLE extra (x INTEGER PRIMARY KEY)")
    assert "table extra: only in B" in compare_stores(a, b)
