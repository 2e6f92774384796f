"""The monitor's own database: estimates, alerts, watermarks, kinetics used, archive index.

SQLite by default, PostgreSQL (or MariaDB) by URL. Opening a store upgrades its schema
to head (`schema.migrate`; the tables are in `tables`); a store written by a newer
convmon is refused. One poll cycle is one transaction.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

from sqlalchemy import bindparam, create_engine, func, insert, select, update
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import DBAPIError, SQLAlchemyError

from ..errors import AlertNotFoundError, StoreError
from . import fleet
from .schema import migrate
from .tables import (
    alert_acks,
    alerts,
    batches,
    estimates,
    heartbeat,
    kinetics_versions,
    meta,
    watermarks,
)

log = logging.getLogger(__name__)


def open_store(url: str) -> Engine:
    """Open the store at ``url``, creating it or upgrading its schema to head if needed."""
    u = make_url(url)
    if u.get_backend_name() == "sqlite" and u.database and u.database != ":memory:":
        try:
            Path(u.database).parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StoreError(
                f"store {u.render_as_string()}: cannot create its folder "
                f"{Path(u.database).parent}: {exc.strerror}"
            ) from None
    engine = create_engine(u, pool_pre_ping=True)
    try:
        migrate(engine)
    except DBAPIError as exc:  # unreachable, refused, or a file that is not a database
        engine.dispose()
        why = (str(exc.orig).strip().splitlines() or [type(exc.orig).__name__])[0]
        raise StoreError(f"store {u.render_as_string()} unreachable or unreadable: {why}") from None
    except StoreError:
        engine.dispose()
        raise
    return engine


class Store:
    """Reads and the one-transaction cycle commit."""

    def __init__(self, url: str):
        self.url = url
        self.engine = open_store(url)

    def load_watermark(self, name: str = "historian") -> dict | None:
        with self.engine.connect() as conn:
            row = conn.execute(select(watermarks.c.value).where(watermarks.c.name == name)).first()
        return json.loads(row[0]) if row else None

    def commit_cycle(
        self,
        *,
        watermark: dict,
        batch_rows: list[dict],
        estimate_rows: list[dict],
        alert_changes: list[dict],
        kinetics_rows: list[dict],
        now_s: float,
        last_data_s: float | None,
    ) -> dict:
        """Results and watermark in one transaction: all of it, or none of it.

        Rows are looked up and written in sets (one SELECT per table and chunk, one
        executemany per kind), so the cost per batch stays small at hundreds of batches.
        """
        added = {"estimates": 0, "alerts": 0}
        try:
            with self.engine.begin() as conn:
                _upsert_batches(conn, batch_rows)
                added["estimates"] = _insert_new_estimates(conn, estimate_rows)
                for a in alert_changes:
                    if a["op"] == "raise":
                        row = {k: v for k, v in a.items() if k != "op"}
                        added["alerts"] += _raise_alert(conn, row)
                    else:
                        conn.execute(
                            update(alerts)
                            .where(alerts.c.id == a["id"])
                            .values(state="cleared", cleared_at_s=a["cleared_at_s"])
                        )
                _insert_new_kinetics(conn, kinetics_rows)
                value = json.dumps(watermark, separators=(",", ":"))
                if conn.execute(
                    select(watermarks.c.name).where(watermarks.c.name == "historian")
                ).first():
                    conn.execute(
                        update(watermarks)
                        .where(watermarks.c.name == "historian")
                        .values(value=value)
                    )
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
            conn.execute(
                insert(heartbeat).values(
                    name="monitor",
                    last_good_cycle_s=now_s if ok else None,
                    last_data_s=last_data_s,
                    cycles=1 if ok else 0,
                    failed_cycles=0 if ok else 1,
                    message=message,
                )
            )
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
        """Alerts whose condition still holds: open, or acknowledged but not cleared."""
        return self.list_alerts(open_only=True, batch=batch)

    def list_alerts(self, *, open_only: bool = False, batch: str | None = None) -> list[dict]:
        """Alerts in the order raised, each with ``acks``: its acknowledgements, oldest
        first (``acked_by``, ``acked_at_s``, ``note``)."""
        stmt = select(alerts)
        if open_only:
            stmt = stmt.where(alerts.c.state.in_(("open", "acked")))
        if batch:
            stmt = stmt.where(alerts.c.batch == batch)
        with self.engine.connect() as conn:
            rows = [dict(r._mapping) for r in conn.execute(stmt.order_by(alerts.c.id))]
            acks = _acks_of(conn, [r["id"] for r in rows])
        for r in rows:
            r["acks"] = acks.get(r["id"], [])
        return rows

    def ack_alert(self, alert_id: int, by: str, at_s: float, note: str | None = None) -> dict:
        """Acknowledge an alert: one more row in its history (who, when, note), never a
        replacement; a cleared alert stays cleared. Returns the alert with its ``acks``."""
        with self.engine.begin() as conn:
            row = conn.execute(select(alerts).where(alerts.c.id == alert_id)).first()
            if row is None:
                raise AlertNotFoundError(f"no alert with id {alert_id}")
            conn.execute(
                insert(alert_acks).values(
                    alert_id=alert_id, acked_by=by, acked_at_s=at_s, note=note
                )
            )
            if row.state == "open":
                conn.execute(update(alerts).where(alerts.c.id == alert_id).values(state="acked"))
            out = dict(conn.execute(select(alerts).where(alerts.c.id == alert_id)).one()._mapping)
            out["acks"] = _acks_of(conn, [alert_id]).get(alert_id, [])
            return out

    def running_batches(self) -> list[str]:
        with self.engine.connect() as conn:
            return [
                r[0]
                for r in conn.execute(select(batches.c.batch).where(batches.c.state == "running"))
            ]

    def latest_estimates(self) -> list[dict]:
        """The newest estimate of every batch still marked running: at its latest data
        time, the one computed last (a re-estimate with changed kinetics or
        configuration at the same data time replaces the earlier one here)."""
        with self.engine.connect() as conn:
            running = [
                r[0]
                for r in conn.execute(
                    select(batches.c.batch)
                    .where(batches.c.state == "running")
                    .order_by(batches.c.start_s)
                )
            ]
            out = []
            for b in running:
                row = conn.execute(
                    select(estimates.c.doc)
                    .where(estimates.c.batch == b)
                    .order_by(*_NEWEST_FIRST)
                    .limit(1)
                ).first()
                if row:
                    out.append(json.loads(row[0]))
        return out

    def row_counts(self) -> dict[str, int]:
        """Rows per table of the head schema."""
        with self.engine.connect() as conn:
            return {
                name: conn.execute(select(func.count()).select_from(table)).scalar_one()
                for name, table in meta.tables.items()
            }

    # golden profiles and per-batch figures (`monitor.store.fleet`)
    def save_golden_profile(self, profile) -> int:
        """Store a recipe's profile as its next version; returns the version number."""
        return fleet.save_golden_profile(self.engine, profile)

    def golden_versions(self) -> dict[str, int]:
        """The latest profile version of each recipe."""
        return fleet.golden_versions(self.engine)

    def golden_profile(self, recipe: str, version: int | None = None):
        """A recipe's profile (the latest unless ``version``), or None."""
        return fleet.golden_profile(self.engine, recipe, version)

    def save_figures(self, figures: list, *, now_s: float) -> None:
        """Store (or replace) completed batches' figures."""
        fleet.save_figures(self.engine, figures, now_s)

    def load_figures(self, **where) -> dict:
        """Stored figures by batch (``recipe``, ``batches``, ``kinetics_version``,
        ``method`` narrow the choice)."""
        return fleet.load_figures(self.engine, **where)

    def close(self) -> None:
        self.engine.dispose()


#: Keys per IN list: well inside every backend's limit on bound parameters.
_CHUNK = 400


def _chunks(items: list, size: int = _CHUNK):
    for i in range(0, len(items), size):
        yield items[i : i + size]


def _upsert_batches(conn, batch_rows: list[dict]) -> None:
    """Insert new batches, update those whose row changed (the last row given wins)."""
    rows = {b["batch"]: b for b in batch_rows}
    have = {}
    for part in _chunks(list(rows)):
        have.update(
            (r.batch, r._asdict())
            for r in conn.execute(select(batches).where(batches.c.batch.in_(part)))
        )
    new = [r for k, r in rows.items() if k not in have]
    changed = [
        {**{c: v for c, v in r.items() if c != "batch"}, "key": k}
        for k, r in rows.items()
        if k in have and any(have[k].get(c) != v for c, v in r.items())
    ]
    if new:
        conn.execute(insert(batches), new)
    for cols, group in _by_columns(changed).items():
        conn.execute(
            update(batches)
            .where(batches.c.batch == bindparam("key"))
            .values({c: bindparam(c) for c in cols if c != "key"}),
            group,
        )


def _by_columns(rows: list[dict]) -> dict:
    """Rows grouped by their set of keys (an executemany needs one shape)."""
    out: dict = {}
    for r in rows:
        out.setdefault(tuple(sorted(r)), []).append(r)
    return out


#: The newest estimate first: latest data time, then last computed (then last stored).
_NEWEST_FIRST = (estimates.c.at_s.desc(), estimates.c.computed_s.desc(), estimates.c.id.desc())

#: What makes an estimate itself: its data time and what it was computed with.
ESTIMATE_KEY = ("batch", "at_s", "kinetics_version", "config_version")


def _insert_new_estimates(conn, estimate_rows: list[dict]) -> int:
    """Insert the estimates whose key (`ESTIMATE_KEY`) is not stored yet; returns how many.

    An estimate already stored is not added twice (a cycle run again after a restart).
    When it is stored but another estimate of that batch and data time was computed
    after it (kinetics changed, then changed back), its ``computed_s`` moves on, so it
    is the newest computed again; otherwise it is left as it is.
    """
    key_of = lambda e: tuple(e[k] for k in ESTIMATE_KEY)  # noqa: E731
    have: dict = {}  # key -> (id, computed_s)
    latest: dict = {}  # (batch, at_s) -> the latest computed_s stored
    keys = list(dict.fromkeys(key_of(e) for e in estimate_rows))
    for part in _chunks(keys):
        stmt = select(estimates.c.id, estimates.c.computed_s, *estimates.c[ESTIMATE_KEY]).where(
            estimates.c.batch.in_(sorted({k[0] for k in part})),
            estimates.c.at_s.in_(sorted({k[1] for k in part})),
        )
        for r in conn.execute(stmt):
            have[tuple(r[2:])] = (r[0], r[1] or 0.0)
            latest[r[2], r[3]] = max(latest.get((r[2], r[3]), 0.0), r[1] or 0.0)
    new, seen, touched = [], set(), []
    for e in estimate_rows:
        key = key_of(e)
        if key in seen:
            continue
        seen.add(key)
        if key not in have:
            new.append(e)
        elif e.get("computed_s") is not None and have[key][1] < latest[key[:2]]:
            touched.append({"key_id": have[key][0], "computed_s": e["computed_s"]})
    for group in _by_columns(new).values():
        conn.execute(insert(estimates), group)
    if touched:
        conn.execute(
            update(estimates)
            .where(estimates.c.id == bindparam("key_id"))
            .values(computed_s=bindparam("computed_s")),
            touched,
        )
    return len(new)


def _raise_alert(conn, row: dict) -> int:
    """Insert a raised alert; returns 1, or 0 when it reopens the alert of that batch and
    kind raised at the same data time (the condition came back without new data, e.g.
    after the kinetics changed and changed back)."""
    same = conn.execute(
        select(alerts.c.id).where(
            alerts.c.batch == row["batch"],
            alerts.c.kind == row["kind"],
            alerts.c.raised_at_s == row["raised_at_s"],
        )
    ).first()
    if same is None:
        conn.execute(insert(alerts).values(**row))
        return 1
    conn.execute(
        update(alerts)
        .where(alerts.c.id == same[0])
        .values(state="open", cleared_at_s=None, message=row.get("message"))
    )
    return 0


def _acks_of(conn, alert_ids: list[int]) -> dict[int, list[dict]]:
    """The acknowledgements of these alerts, oldest first, by alert id."""
    out: dict = {}
    for part in _chunks(alert_ids):
        stmt = (
            select(alert_acks)
            .where(alert_acks.c.alert_id.in_(part))
            .order_by(alert_acks.c.alert_id, alert_acks.c.id)
        )
        for r in conn.execute(stmt):
            out.setdefault(r.alert_id, []).append(
                {"acked_by": r.acked_by, "acked_at_s": r.acked_at_s, "note": r.note}
            )
    return out


def _insert_new_kinetics(conn, kinetics_rows: list[dict]) -> None:
    """Record each kinetics version the first time it is used."""
    rows = {}
    for k in kinetics_rows:
        rows.setdefault(k["version"], k)
    have = set()
    for part in _chunks(list(rows)):
        have.update(
            r[0]
            for r in conn.execute(
                select(kinetics_versions.c.version).where(kinetics_versions.c.version.in_(part))
            )
        )
    new = [r for v, r in rows.items() if v not in have]
    for group in _by_columns(new).values():
        conn.execute(insert(kinetics_versions), group)
