"""Engines for the historian export: read-only, timeouts, pre-ping, retry with backoff."""

from __future__ import annotations

import logging
import sqlite3
import time
from collections.abc import Callable
from typing import TypeVar

from sqlalchemy import create_engine, event
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError, OperationalError

from ..errors import ConfigError, HistorianError

log = logging.getLogger(__name__)
T = TypeVar("T")


def make_engine(
    url: str,
    *,
    connect_timeout_s: float = 10.0,
    statement_timeout_s: float = 120.0,
    read_only: bool = True,
) -> Engine:
    """An SQLAlchemy engine for ``url``; read-only sessions where the backend has them."""
    try:
        u = make_url(url)
    except ArgumentError:
        raise ConfigError(f"not an SQLAlchemy URL: {url!r}", key="historian.url") from None
    backend = u.get_backend_name()
    kwargs: dict = {"pool_pre_ping": True}
    try:
        if backend == "sqlite":
            path = u.database
            if not path or path == ":memory:":
                raise ConfigError("an SQLite historian needs a file path", key="historian.url")
            uri = f"file:{path}?mode=ro" if read_only else f"file:{path}?mode=rwc"

            def creator():
                return sqlite3.connect(
                    uri, uri=True, timeout=connect_timeout_s, check_same_thread=False
                )

            engine = create_engine("sqlite://", creator=creator, **kwargs)
        elif backend == "postgresql":
            opts = f"-c statement_timeout={int(statement_timeout_s * 1000)}"
            if read_only:
                opts += " -c default_transaction_read_only=on"
            engine = create_engine(
                u,
                connect_args={"connect_timeout": int(connect_timeout_s), "options": opts},
                **kwargs,
            )
        elif backend in ("mysql", "mariadb"):
            engine = create_engine(
                u,
                connect_args={
                    "connect_timeout": int(connect_timeout_s),
                    "read_timeout": int(statement_timeout_s),
                    "write_timeout": int(statement_timeout_s),
                },
                **kwargs,
            )
            if read_only:

                @event.listens_for(engine, "connect")
                def _ro(dbapi_conn, _record):
                    with dbapi_conn.cursor() as cur:
                        cur.execute("SET SESSION TRANSACTION READ ONLY")
        else:
            engine = create_engine(u, **kwargs)
    except NoSuchModuleError:
        raise ConfigError(f"no SQLAlchemy dialect for {backend!r}", key="historian.url") from None
    except ModuleNotFoundError as exc:
        raise ConfigError(
            f"database driver missing for {backend}: {exc.name} "
            "(install the postgres or mariadb extra)",
            key="historian.url",
        ) from None
    return engine


def with_retry(
    fn: Callable[[], T],
    *,
    retries: int = 3,
    backoff_s: float = 0.5,
    what: str = "historian",
    sleep=time.sleep,
) -> T:
    """Call ``fn``; on a dropped or refused connection retry with exponential backoff.

    After ``retries`` retries the error becomes `HistorianError` (exit code 3).
    """
    for attempt in range(retries + 1):
        try:
            return fn()
        except (OperationalError, DBAPIError) as exc:
            transient = isinstance(exc, OperationalError) or exc.connection_invalidated
            if not transient or attempt == retries:
                msg = str(exc.orig).strip().splitlines()[0] if exc.orig else str(exc)
                raise HistorianError(f"{what} unreachable or unreadable: {msg}") from None
            delay = backoff_s * 2**attempt
            log.warning(
                "%s: %s; retrying in %.1f s (%d/%d)",
                what,
                str(exc.orig).strip().splitlines()[0] if exc.orig else exc,
                delay,
                attempt + 1,
                retries,
            )
            sleep(delay)
    raise AssertionError("unreachable")
