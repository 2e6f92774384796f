"""The monitor's store on every backend: same results, idempotent cycles, Alembic revisions.

Each test runs on SQLite, PostgreSQL and MariaDB (`store_url`: a fresh database per
test). Old stores are built from the frozen revisions themselves (``migrate(engine,
"0001")``), never from today's tables, and filled with plain SQL.
"""

from __future__ import annotations

from datetime import datetime

import pytest
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import Float, column, create_engine, inspect, table, text

from monitor.config import load_config
from monitor.errors import StoreError
from monitor.service.cycle import Monitor
from monitor.store import (
    MIGRATIONS,
    Store,
    applied_migrations,
    current_revision,
    migrate,
    migrations_table,
)
from monitor.store.schema import LEGACY_NAMES, alembic_config
from monitor.store.tables import meta
from tests.store_compare import compare_stores, read_store

FIRST_TABLES = {
    "batches",
    "estimates",
    "alerts",
    "watermarks",
    "kinetics_versions",
    "archive_index",
}
# exactly representable in single precision (a multiple of 128 near 1.79e9), so rows
# written while the columns are still FLOAT on MariaDB (revisions 0001-0002) read back
# exactly; 0003 makes them DOUBLE.
T0 = 1_791_358_208.0


def _cfg(plant, tmp_path, store_url):
    text_ = plant.config_path.read_text()
    old = f"sqlite:///{(plant.config_path.parent / 'convmon.db').resolve()}"
    assert old in text_
    p = tmp_path / "c.toml"
    p.write_text(text_.replace(old, store_url))
    return load_config(p)


def _clock(plant):
    """The monitor's clock: a minute after the export's last data (results repeatable)."""
    end = datetime.fromisoformat(plant.truth["export_end"]).timestamp() + 60.0
    return lambda: end


@pytest.fixture(scope="module")
def reference(small_plant, tmp_path_factory) -> str:
    """An SQLite store after one cycle over the small plant (its URL)."""
    tmp = tmp_path_factory.mktemp("ref")
    url = f"sqlite:///{tmp / 'ref.db'}"
    mon = Monitor(_cfg(small_plant, tmp, url), clock=_clock(small_plant))
    mon.cycle()
    mon.store.close()
    mon.reader.close()
    return url


def test_store_contract(store_url, small_plant, tmp_path, reference):
    cfg = _cfg(small_plant, tmp_path, store_url)
    first = Monitor(cfg, clock=_clock(small_plant))
    rep = first.cycle()
    assert rep.estimates_added >= 1
    second = Monitor(cfg, clock=_clock(small_plant)).cycle()  # a restart: store + historian
    assert second.estimates_added == 0 and second.alerts_added == 0
    store = Store(store_url)
    try:
        assert applied_migrations(store.engine) == list(MIGRATIONS)
        assert store.heartbeat()["cycles"] == 2
        assert store.load_watermark() == first.watermark
        diffs = compare_stores(
            store,
            reference,
            exclude={"heartbeat.cycles": "two cycles here, one in the reference (checked above)"},
        )
    finally:
        store.close()
        first.store.close()
    assert not diffs, "\n".join(diffs[:20])


# ------------------------------------------------------------------ revisions
def _schema_diffs(engine) -> list:
    """What differs between the store's schema and the head tables the queries use."""
    with engine.connect() as conn:
        diffs = compare_metadata(MigrationContext.configure(conn), meta)
    if engine.dialect.name == "sqlite":
        # SQLite keeps FLOAT and DOUBLE alike: REAL affinity, an 8-byte IEEE float
        # (SQLite documentation, "Datatypes In SQLite", sections 2 and 3.1)
        diffs = [
            d
            for d in diffs
            if not (
                isinstance(d, list)
                and all(op[0] == "modify_type" and isinstance(op[-2], Float) for op in d)
                and all(isinstance(op[-1], Float) for op in d)
            )
        ]
    return diffs


def test_revisions_build_the_head_schema_and_go_back(store_url):
    engine = create_engine(store_url)
    try:
        assert (
            migrate(engine) == list(MIGRATIONS) == ["0001", "0002", "0003", "0004", "0005", "0006"]
        )
        assert _schema_diffs(engine) == []
        assert migrate(engine) == []  # at head: nothing to do
        with engine.begin() as conn:
            command.downgrade(alembic_config(conn), "base")
        assert set(inspect(engine).get_table_names()) == {"alembic_version"}
    finally:
        engine.dispose()


def _fill_first_revision(engine) -> dict:
    """Rows in every table of revision 0001, with plain SQL; returns what was written."""
    rows = {
        "batches": [
            {"batch": "B-1", "unit": "R-1", "recipe": "DIM-7", "start_s": T0 - 3584.0,
             "end_s": None, "state": "running"},
            {"batch": "B-0", "unit": "R-1", "recipe": "DIM-7", "start_s": T0 - 86_400.0,
             "end_s": T0 - 40_064.0, "state": "complete"},
        ],
        "estimates": [
            {"batch": "B-1", "at_s": T0, "conversion": 0.5, "conversion_sd": 0.015625,
             "activity": 1.0, "activity_sd": 0.03125, "target_conversion": 0.9375,
             "predicted_end_s": T0 + 7168.0, "p10_s": T0 + 6528.0, "p90_s": T0 + 7808.0,
             "forecast_note": "", "n_assays_used": 2, "warnings": "[]",
             "kinetics_version": "k1", "doc": '{"batch": "B-1", "conversion": 0.5}'},
        ],
        "alerts": [
            {"batch": "B-1", "kind": "lagging", "severity": "warning",
             "state": "open", "raised_at_s": T0, "cleared_at_s": None, "acked_by": "night shift",
             "message": "behind the golden profile"},
        ],
        "watermarks": [{"name": "historian", "value": '{"mode": "seq", "seq": 41}'}],
        "kinetics_versions": [
            {"version": "k1", "recipe": "DIM-7", "source": "dim7.toml", "first_used_s": T0}
        ],
        "archive_index": [
            {"batch": "B-0", "version": 1, "pdf": "B-0_v1.pdf", "json": "B-0_v1.json",
             "sha256": "0" * 64, "created_s": T0 - 39_936.0},
        ],
    }  # fmt: skip
    with engine.begin() as conn:
        for name, table_rows in rows.items():
            # a bare INSERT: table() and column() carry names only, nothing of today's schema
            conn.execute(table(name, *map(column, table_rows[0])).insert(), table_rows)
    ids = {"estimates", "alerts", "archive_index"}  # the first row of each: id 1
    return {n: [{**r, "id": 1} if n in ids else r for r in rs] for n, rs in rows.items()}


def _at_head(written: dict) -> dict:
    """Rows of revision 0001 as the later revisions leave them: 0005 gives estimates an
    empty ``config_version`` and ``computed_s`` = ``at_s``; 0006 moves ``acked_by`` into
    ``alert_acks`` (one row per name, its time unknown)."""
    out = {n: [dict(r) for r in rows] for n, rows in written.items()}
    for e in out["estimates"]:
        e.update(config_version="", computed_s=e["at_s"])
    out["alert_acks"] = [
        {"id": i, "alert_id": a["id"], "acked_by": a["acked_by"], "acked_at_s": None, "note": None}
        for i, a in enumerate((a for a in out["alerts"] if a["acked_by"] is not None), start=1)
    ]
    for a in out["alerts"]:
        del a["acked_by"]
    return out


def _assert_kept_and_usable(url: str, written: dict) -> None:
    """The rows written at an old revision, after opening the store at head."""
    store = Store(url)
    try:
        got = read_store(store)
        for table, rows in _at_head(written).items():
            assert sorted(got[table].values(), key=repr) == sorted(rows, key=repr), table
        assert store.load_watermark() == {"mode": "seq", "seq": 41}
        assert store.running_batches() == ["B-1"]
        assert store.latest_estimates() == [{"batch": "B-1", "conversion": 0.5}]
        assert [a["kind"] for a in store.open_alerts()] == ["lagging"]
        # at head the times are double precision on every backend (0003 on MariaDB)
        fine = T0 + 30.125
        added = store.commit_cycle(
            watermark={"mode": "seq", "seq": 42},
            batch_rows=[],
            estimate_rows=[
                {k: v for k, v in written["estimates"][0].items() if k != "id"}
                | {"at_s": fine, "config_version": "", "computed_s": fine}
            ],
            alert_changes=[],
            kinetics_rows=[],
            now_s=fine,
            last_data_s=fine,
        )
        assert added["estimates"] == 1
        assert store.heartbeat()["last_data_s"] == fine
        assert sorted(k[1] for k in read_store(store)["estimates"]) == [T0, fine]
        with store.engine.connect() as conn:
            assert current_revision(conn) == MIGRATIONS[-1]
        assert _schema_diffs(store.engine) == []
    finally:
        store.close()


def test_first_revision_store_is_upgraded_with_its_rows(store_url):
    engine = create_engine(store_url)
    try:
        assert migrate(engine, "0001") == ["0001"]
        assert set(inspect(engine).get_table_names()) == FIRST_TABLES | {"alembic_version"}
        written = _fill_first_revision(engine)
    finally:
        engine.dispose()
    _assert_kept_and_usable(store_url, written)


@pytest.mark.parametrize("level", [1, 2, 3])
def test_store_made_before_alembic_is_adopted(store_url, level):
    """A store of the named-migration era: its record is read, stamped, then dropped."""
    names = list(LEGACY_NAMES)[:level]
    engine = create_engine(store_url)
    try:
        migrate(engine, LEGACY_NAMES[names[-1]])  # the DDL those migrations ran, frozen
        with engine.begin() as conn:
            conn.execute(text("DROP TABLE alembic_version"))
            migrations_table.create(conn)
            conn.execute(
                migrations_table.insert(),
                [{"name": n, "applied_at": "2026-12-01T18:00:00+00:00"} for n in names],
            )
        written = _fill_first_revision(engine)
    finally:
        engine.dispose()
    _assert_kept_and_usable(store_url, written)
    engine = create_engine(store_url)
    try:
        assert not inspect(engine).has_table("schema_migrations")
        assert applied_migrations(engine) == list(MIGRATIONS)
    finally:
        engine.dispose()


def test_unknown_revision_is_refused(store_url):
    Store(store_url).close()
    engine = create_engine(store_url)
    try:
        with engine.begin() as conn:
            conn.execute(text("UPDATE alembic_version SET version_num = '0999_from_the_future'"))
        with pytest.raises(StoreError, match="0999_from_the_future") as err:
            Store(store_url)
        assert err.value.exit_code == 3 and "newer convmon" in str(err.value)
        with engine.begin() as conn:  # an old-era record naming a migration we never shipped
            conn.execute(text("DROP TABLE alembic_version"))
            migrations_table.create(conn)
            conn.execute(
                migrations_table.insert(),
                [{"name": n, "applied_at": "x"} for n in [*LEGACY_NAMES, "0004_unheard_of"]],
            )
        with pytest.raises(StoreError, match="0004_unheard_of") as err:
            Store(store_url)
        assert err.value.exit_code == 3
    finally:
        engine.dispose()


def test_a_file_that_is_not_a_database_is_a_store_error(tmp_path):
    path = tmp_path / "notes.db"
    path.write_text("these are notes, not a database\n" * 100)
    with pytest.raises(StoreError, match="unreachable or unreadable") as err:
        Store(f"sqlite:///{path}")
    assert err.value.exit_code == 3


# ------------------------------------------------------------------ times kept exactly
# Found while timing the cycle's commit: MariaDB's FLOAT is single precision, about 128 s
# of resolution at today's epoch seconds, so a store there rounded every time it kept
# and two polls 30 s apart collided on the estimates' unique (batch, at_s).
def _estimate_row(batch: str, at_s: float, end_s: float) -> dict:
    return {
        "batch": batch,
        "at_s": at_s,
        "conversion": 0.5,
        "conversion_sd": 0.01,
        "activity": 1.02,
        "activity_sd": 0.03,
        "target_conversion": 0.95,
        "predicted_end_s": end_s,
        "p10_s": end_s - 600.5,
        "p90_s": end_s + 600.5,
        "forecast_note": "",
        "n_assays_used": 2,
        "warnings": "[]",
        "kinetics_version": "v1",
        "doc": "{}",
        "config_version": "c1",
        "computed_s": at_s,
    }


def test_store_keeps_epoch_seconds_exactly(store_url):
    t0 = 1_791_358_200.125  # 2026-10-07T06:10:00.125Z
    store = Store(store_url)
    try:
        batch = {
            "batch": "B-1",
            "unit": "R-1",
            "recipe": "DIM-7",
            "start_s": t0 - 3600.5,
            "end_s": None,
            "state": "running",
        }
        kin = {"version": "v1", "recipe": "DIM-7", "source": "test", "first_used_s": t0}
        polls = [t0 + 30.0 * i for i in range(4)]
        for at in polls:
            added = store.commit_cycle(
                watermark={"mode": "seq", "seq": int(at)},
                batch_rows=[batch],
                estimate_rows=[_estimate_row("B-1", at, at + 7200.25)],
                alert_changes=[],
                kinetics_rows=[kin],
                now_s=at,
                last_data_s=at,
            )
            assert added["estimates"] == 1
        again = store.commit_cycle(
            watermark={"mode": "seq", "seq": 0},
            batch_rows=[batch],
            estimate_rows=[_estimate_row("B-1", polls[-1], 0.0)],
            alert_changes=[],
            kinetics_rows=[kin],
            now_s=polls[-1],
            last_data_s=polls[-1],
        )
        assert again["estimates"] == 0  # found again by its exact key (batch, at_s, ...)
        dump = read_store(store)
        est = sorted(dump["estimates"].values(), key=lambda r: r["at_s"])
        assert [e["at_s"] for e in est] == polls
        assert [e["predicted_end_s"] for e in est] == [at + 7200.25 for at in polls]
        assert dump["batches"][("B-1",)]["start_s"] == t0 - 3600.5
        assert store.heartbeat()["last_data_s"] == polls[-1]
    finally:
        store.close()
