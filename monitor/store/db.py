"""The monitor's own database: estimates, alerts, watermarks, kinetics used, archive index.

SQLite by default, PostgreSQL (or MariaDB) by URL. Schema changes are named
migrations recorded in the database: an older store is upgraded, a store
written by a newer convmon is refused. One poll cycle is one transaction.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path

from sqlalchemy import (
    Column,
    Float,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
    create_engine,
    insert,
    inspect,
    select,
    update,
)
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import OperationalError, SQLAlchemyError

from ..errors import StoreError

log = logging.getLogger(__name__)
meta = MetaData()

batches = Table("batches", meta,
                Column("batch", String(64), primary_key=True), Column("unit", String(64)),
                Column("recipe", String(64)), Column("start_s", Float), Column("end_s", Float),
                Column("state", String(16)))
estimates = Table("estimates", meta,
                  Column("id", Integer, primary_key=True, autoincrement=True),
                  Column("batch", String(64), nullable=False),
                  Column("at_s", Float, nullable=False),
                  Column("conversion", Float), Column("conversion_sd", Float),
                  Column("activity", Float), Column("activity_sd", Float),
                  Column("target_conversion", Float), Column("predicted_end_s", Float),
                  Column("p10_s", Float), Column("p90_s", Float), Column("forecast_note", Text),
                  Column("n_assays_used", Integer), Column("warnings", Text),
                  Column("kinetics_version", String(32)), Column("doc", Text),
                  UniqueConstraint("batch", "at_s", name="uq_estimate_batch_at"))
alerts = Table("alerts", meta,
               Column("id", Integer, primary_key=True, autoincrement=True),
               Column("batch", String(64), nullable=False), Column("kind", String(32)),
               Column("severity", String(16)), Column("state", String(16)),
               Column("raised_at_s", Float), Column("cleared_at_s", Float),
               Column("acked_by", String(64)), Column("message", Text),
               UniqueConstraint("batch", "kind", "raised_at_s", name="uq_alert"))
watermarks = Table("watermarks", meta, Column("name", String(64), primary_key=True),
                   Column("value", Text))
kinetics_versions = Table("kinetics_versions", meta,
                          Column("version", String(32), primary_key=True),
                          Column("recipe", String(64)), Column("source", Text),
                          Column("first_used_s", Float))
archive_index = Table("archive_index", meta,
                      Column("id", Integer, primary_key=True, autoincrement=True),
                      Column("batch", String(64)), Column("version", Integer),
                      Column("pdf", Text), Column("json", Text), Column("sha256", String(64)),
                      Column("created_s", Float))
heartbeat = Table("heartbeat", meta, Column("name", String(32), primary_key=True),
                  Column("last_good_cycle_s", Float), Column("last_data_s", Float),
                  Column("cycles", Integer), Column("failed_cycles", Integer),
                  Column("message", Text))
migrations_table = Table("schema_migrations", meta,
                         Column("name", String(128), primary_key=True),
                         Column("applied_at", String(40)))


def _m001_initial(conn) -> None:
    meta.create_all(conn, tables=[batches, estimates, alerts, watermarks, kinetics_versions,
                                  archive_index])


def _m002_heartbeat(conn) -> None:
    meta.create_all(conn, tables=[heartbeat])


#: Named migrations, applied in order and recorded; never edit one that shipped.
MIGRATIONS: list[tuple[str, Callable]] = [
    ("0001_initial", _m001_initial),
    ("0002_heartbeat", _m002_heartbeat),
]


def open_store(url: str) -> Engine:
    """Open (creating and upgrading if needed) the store at ``url``."""
    u = make_url(url)
    if u.get_backend_name() == "sqlite" and u.database and u.database != ":memory:":
        Path(u.database).parent.mkdir(parents=True, exist_ok=True)
    try:
        engine = create_engine(u, pool_pre_ping=True)
        migrate(engine)
    except OperationalError as exc:
        raise StoreError(f"store unreachable: {str(exc.orig).strip().splitlines()[0]}") from None
    return engine


def migrate(engine: Engine) -> list[str]:
    """Apply pending migrations; refuse a store written by a newer version."""
    known = [name for name, _ in MIGRATIONS]
    applied_now = []
    with engine.begin() as conn:
        migrations_table.create(conn, checkfirst=True)
        done = {r[0] for r in conn.execute(select(migrations_table.c.name))}
        unknown = sorted(done - set(known))
        if unknown:
            raise StoreError(f"the store was written by a newer convmon (migration "
                             f"{unknown[-1]!r} unknown to this version); upgrade convmon")
        for name, fn in MIGRATIONS:
            if name not in done:
                fn(conn)
                conn.execute(insert(migrations_table).values(
                    name=name, applied_at=datetime.now(UTC).isoformat(timespec="seconds")))
                applied_now.append(name)
    return applied_now


def applied_migrations(engine: Engine) -> list[str]:
    if not inspect(engine).has_table("schema_migrations"):
        return []
    with engine.connect() as conn:
        return [r[0] for r in conn.execute(select(migrations_table.c.name).order_by(
            migrations_table.c.name))]


class Store:
    """Reads and the one-transaction cycle commit."""

    def __init__(self, url: str):
        self.url = url
        self.engine = open_store(url)

    def load_watermark(self, name: str = "historian") -> dict | None:
        with self.engine.connect() as conn:
            row = conn.execute(select(watermarks.c.value).where(watermarks.c.name == name)).first()
        return json.loads(row[0]) if row else None

    def commit_cycle(self, *, watermark: dict, batch_rows: list[dict], estimate_rows: list[dict],
                     alert_changes: list[dict], kinetics_rows: list[dict], now_s: float,
                     last_data_s: float | None) -> dict:
        """Results and watermark in one transaction: all of it, or none of it."""
        added = {"estimates": 0, "alerts": 0}
        try:
            with self.engine.begin() as conn:
                for b in batch_rows:
                    if conn.execute(select(batches.c.batch).where(
                            batches.c.batch == b["batch"])).first():
                        conn.execute(update(batches).where(batches.c.batch == b["batch"])
                                     .values(**b))
                    else:
                        conn.execute(insert(batches).values(**b))
                for e in estimate_rows:
                    exists = conn.execute(select(estimates.c.id).where(
                        (estimates.c.batch == e["batch"])
                        & (estimates.c.at_s == e["at_s"]))).first()
                    if not exists:
                        conn.execute(insert(estimates).values(**e))
                        added["estimates"] += 1
                for a in alert_changes:
                    if a["op"] == "raise":
                        row = {k: v for k, v in a.items() if k != "op"}
                        conn.execute(insert(alerts).values(**row))
                        added["alerts"] += 1
                    else:
                        conn.execute(update(alerts).where(alerts.c.id == a["id"]).values(
                            state="cleared", cleared_at_s=a["cleared_at_s"]))
                for k in kinetics_rows:
                    if not conn.execute(select(kinetics_versions.c.version).where(
                            kinetics_versions.c.version == k["version"])).first():
                        conn.execute(insert(kinetics_versions).values(**k))
                value = json.dumps(watermark, separators=(",", ":"))
                if conn.execute(select(watermarks.c.name).where(
                        watermarks.c.name == "historian")).first():
                    conn.execute(update(watermarks).where(watermarks.c.name == "historian")
                                 .values(value=value))
                else:
                    conn.execute(insert(watermarks).values(name="historian", value=value))
                self._beat(conn, now_s, last_data_s, ok=True)
        except SQLAlchemyError as exc:
            raise StoreError(f"store commit failed: {exc}") from None
        return added

    def record_failure(self, now_s: float, message: str) -> None:
        try:
            with self.engine.begin() as conn:
                self._beat(conn, now_s, None, ok=False, message=message)
        except SQLAlchemyError:
            log.exception("could not record the failed cycle")

    def _beat(self, conn, now_s, last_data_s, *, ok: bool, message: str = "") -> None:
        row = conn.execute(select(heartbeat).where(heartbeat.c.name == "monitor")).first()
        if row is None:
            conn.execute(insert(heartbeat).values(
                name="monitor", last_good_cycle_s=now_s if ok else None, last_data_s=last_data_s,
                cycles=1 if ok else 0, failed_cycles=0 if ok else 1, message=message))
            return
        values = {"message": message}
        if ok:
            values.update(last_good_cycle_s=now_s, cycles=(row.cycles or 0) + 1)
            if last_data_s is not None:
                values["last_data_s"] = last_data_s
        else:
            values["failed_cycles"] = (row.failed_cycles or 0) + 1
        conn.execute(update(heartbeat).where(heartbeat.c.name == "monitor").values(**values))

    def heartbeat(self) -> dict | None:
        with self.engine.connect() as conn:
            row = conn.execute(select(heartbeat).where(heartbeat.c.name == "monitor")).first()
        return dict(row._mapping) if row else None

    def open_alerts(self, batch: str | None = None) -> list[dict]:
        stmt = select(alerts).where(alerts.c.state == "open")
        if batch:
            stmt = stmt.where(alerts.c.batch == batch)
        with self.engine.connect() as conn:
            return [dict(r._mapping) for r in conn.execute(stmt.order_by(alerts.c.id))]

    def running_batches(self) -> list[str]:
        with self.engine.connect() as conn:
            return [r[0] for r in conn.execute(select(batches.c.batch).where(
                batches.c.state == "running"))]

    def latest_estimates(self) -> list[dict]:
        """The newest estimate of every batch still marked running."""
        with self.engine.connect() as conn:
            running = [r[0] for r in conn.execute(select(batches.c.batch).where(
                batches.c.state == "running").order_by(batches.c.start_s))]
            out = []
            for b in running:
                row = conn.execute(select(estimates.c.doc).where(estimates.c.batch == b)
                                   .order_by(estimates.c.at_s.desc()).limit(1)).first()
                if row:
                    out.append(json.loads(row[0]))
        return out

    def snapshot(self) -> dict:
        """Everything a run leaves behind, for comparing runs (kill/restart tests)."""
        with self.engine.connect() as conn:
            est = [tuple(r) for r in conn.execute(select(
                estimates.c.batch, estimates.c.at_s, estimates.c.conversion,
                estimates.c.predicted_end_s).order_by(estimates.c.batch, estimates.c.at_s))]
            al = [tuple(r) for r in conn.execute(select(
                alerts.c.batch, alerts.c.kind, alerts.c.state, alerts.c.raised_at_s,
                alerts.c.cleared_at_s).order_by(alerts.c.batch, alerts.c.kind,
                                                alerts.c.raised_at_s))]
            bt = [tuple(r) for r in conn.execute(select(batches).order_by(batches.c.batch))]
            arc = [tuple(r) for r in conn.execute(select(
                archive_index.c.batch, archive_index.c.version, archive_index.c.sha256).order_by(
                archive_index.c.batch))]
        return {"estimates": est, "alerts": al, "batches": bt, "archive": arc}

    def close(self) -> None:
        self.engine.dispose()
