"""The store's schema version: Alembic revisions, upgraded to head whenever a store opens.

The revisions (``migrations/versions``) are frozen DDL: each writes out the tables as
they were at that revision, never today's `tables`. The version lives in the database
(Alembic's ``alembic_version`` table). A store made before Alembic, whose table
``schema_migrations`` names the migrations applied, is stamped at the matching revision
and upgraded with its rows kept; a store at a revision this version does not know was
written by a newer convmon and is refused (`StoreError`, exit 3).
"""

from __future__ import annotations

import logging
from functools import lru_cache

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Column, MetaData, String, Table, inspect, select
from sqlalchemy.engine import Connection, Engine

from ..errors import StoreError

log = logging.getLogger(__name__)

SCRIPT_LOCATION = "monitor.store:migrations"

#: The named migrations of stores made before Alembic, in order, and their revisions.
LEGACY_NAMES = {
    "0001_initial": "0001",
    "0002_heartbeat": "0002",
    "0003_double_precision": "0003",
}

#: Where a store made before Alembic recorded its named migrations (read, then dropped).
migrations_table = Table(
    "schema_migrations",
    MetaData(),
    Column("name", String(128), primary_key=True),
    Column("applied_at", String(40)),
)


def alembic_config(connection: Connection | None = None) -> Config:
    """Alembic's configuration for the store: no ini file, the revisions in this package."""
    cfg = Config()
    cfg.set_main_option("script_location", SCRIPT_LOCATION)
    if connection is not None:
        cfg.attributes["connection"] = connection
    return cfg


@lru_cache(maxsize=1)
def _script() -> ScriptDirectory:
    return ScriptDirectory.from_config(alembic_config())


def revisions() -> tuple[str, ...]:
    """The revisions this version knows, first to head."""
    return tuple(reversed([s.revision for s in _script().walk_revisions()]))


#: The revisions of this version, first to head.
MIGRATIONS: tuple[str, ...] = revisions()


def current_revision(conn: Connection) -> str | None:
    """The revision recorded in the store (None: no Alembic version yet)."""
    return MigrationContext.configure(conn).get_current_revision()


def _refuse_unknown(revision: str) -> None:
    raise StoreError(
        f"the store is at schema revision {revision!r}, which this convmon does not know "
        f"(it knows {', '.join(revisions())}): it was written by a newer convmon; upgrade "
        "convmon"
    )


def _adopt_legacy(conn: Connection) -> str | None:
    """Stamp a pre-Alembic store at the revision its named migrations reached."""
    if not inspect(conn).has_table(migrations_table.name):
        return None
    names = sorted(r[0] for r in conn.execute(select(migrations_table.c.name)))
    unknown = [n for n in names if n not in LEGACY_NAMES]
    if unknown:
        raise StoreError(
            f"the store records migration {unknown[-1]!r}, which this convmon does not know: "
            "it was written by a newer convmon; upgrade convmon"
        )
    order = list(LEGACY_NAMES)
    if names != order[: len(names)]:
        raise StoreError(
            f"the store's migration record {names} is not a sequence of {order}; "
            "it cannot be upgraded safely"
        )
    revision = LEGACY_NAMES[names[-1]] if names else None
    if revision is not None:
        command.stamp(alembic_config(conn), revision)
        log.info("store made before Alembic (%s): stamped at revision %s", names[-1], revision)
    migrations_table.drop(conn)
    return revision


def migrate(engine: Engine, target: str = "head") -> list[str]:
    """Upgrade the store to ``target`` (default: head); returns the revisions applied.

    One transaction: adopting a pre-Alembic store, the upgrade and the version stamp
    commit together where the backend's DDL is transactional (PostgreSQL).
    """
    known = revisions()
    goal = known[-1] if target == "head" else target
    if goal not in known:
        raise ValueError(f"unknown revision {target!r}; known: {', '.join(known)}")
    with engine.begin() as conn:
        current = current_revision(conn)
        if current is None:
            current = _adopt_legacy(conn)
        elif current not in known:
            _refuse_unknown(current)
        start = 0 if current is None else known.index(current) + 1
        todo = list(known[start : known.index(goal) + 1])
        if todo:
            command.upgrade(alembic_config(conn), goal)
            log.info("store schema upgraded: %s", ", ".join(todo))
    return todo


def applied_migrations(engine: Engine) -> list[str]:
    """The revisions the store has had, first to its current one."""
    with engine.connect() as conn:
        current = current_revision(conn)
    if current is None:
        return []
    known = revisions()
    if current not in known:
        _refuse_unknown(current)
    return list(known[: known.index(current) + 1])
