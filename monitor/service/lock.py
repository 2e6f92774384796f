"""One monitor per store, enforced by the store itself.

The lock lives where the store lives, so two configuration files in different folders
that name one store still exclude each other:

* PostgreSQL: a session advisory lock (``pg_try_advisory_lock``) on a key derived from
  a fixed name; advisory locks are scoped to one database, so each store has its own.
* MariaDB / MySQL: ``GET_LOCK(name, 0)``; lock names are server-wide, so the name
  carries the store's database.
* SQLite: a lock file beside the store file (``store.db.lock``, the `filelock` library).

Each is held for the life of ``convmon run`` (or one ``run --once``) on a connection (or
file descriptor) of its own, and released when it closes — also when the process dies.
A lock is one small interface (`StoreLock`: acquire, check, release), one class per
backend, so a backend can later hold several names on its connection (per-unit leases).
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
from pathlib import Path

import filelock
from sqlalchemy import create_engine, text
from sqlalchemy.engine import Connection, make_url
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.pool import NullPool

from ..errors import LockError, StoreError

log = logging.getLogger(__name__)

#: The name every monitor of a store locks (a per-unit lease would lock its own name).
STORE_LOCK_NAME = "convmon.store"
#: MariaDB's longest lock name [characters].
_MYSQL_NAME_MAX = 64


def _shown(url: str) -> str:
    """The store's URL as people may see it (never a password)."""
    return make_url(url).render_as_string(hide_password=True)


def _refused(url: str, how: str) -> LockError:
    return LockError(
        f"another convmon run already uses the store {_shown(url)} ({how}); only one monitor "
        "may write a store: stop the other one first"
    )


class StoreLock:
    """The lock of one store: ``with store_lock(url): ...`` or acquire / check / release."""

    def __init__(self, url: str):
        self.url = url

    def acquire(self) -> None:
        """Take the lock now or raise `LockError` (exit 3); never waits."""
        raise NotImplementedError

    def check(self) -> None:
        """Still held? A lost lock is taken again if free, else `LockError`."""
        raise NotImplementedError

    def release(self) -> None:
        raise NotImplementedError

    def __enter__(self) -> StoreLock:
        self.acquire()
        return self

    def __exit__(self, *exc) -> None:
        self.release()


class SqliteFileLock(StoreLock):
    """A lock file beside the SQLite store file (``<store>.lock``)."""

    def __init__(self, url: str, path: Path):
        super().__init__(url)
        self.path = Path(f"{path}.lock")
        self._lock = filelock.FileLock(self.path, timeout=0, thread_local=False)

    def acquire(self) -> None:
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._lock.acquire()
        except filelock.Timeout:
            raise _refused(self.url, f"lock file {self.path}") from None
        except OSError as exc:
            raise StoreError(
                f"store {_shown(self.url)}: cannot create its lock file {self.path}: {exc.strerror}"
            ) from None

    def check(self) -> None:
        if not self._lock.is_locked or not self.path.exists():
            log.warning("lock file %s was removed; taking it again", self.path)
            self.release()
            self._lock = filelock.FileLock(self.path, timeout=0, thread_local=False)
            self.acquire()

    def release(self) -> None:
        if self._lock.is_locked:
            self._lock.release(force=True)


class _SessionLock(StoreLock):
    """A lock held by a database session: a connection kept open for the lock alone."""

    what = "session lock"

    def __init__(self, url: str, name: str = STORE_LOCK_NAME):
        super().__init__(url)
        self.name = name
        self._engine = None
        self._conn: Connection | None = None

    def _try(self, conn: Connection) -> bool:
        raise NotImplementedError

    def acquire(self) -> None:
        self._engine = create_engine(self.url, poolclass=NullPool, isolation_level="AUTOCOMMIT")
        try:
            self._conn = self._engine.connect()
            got = self._try(self._conn)
        except SQLAlchemyError as exc:
            self.release()
            why = (str(getattr(exc, "orig", exc)).strip().splitlines() or ["error"])[0]
            raise StoreError(f"store {_shown(self.url)} unreachable for its lock: {why}") from None
        if not got:
            self.release()
            raise _refused(self.url, f"{self.what} {self.name!r}")

    def check(self) -> None:
        try:
            self._conn.execute(text("SELECT 1"))
            return
        except (SQLAlchemyError, AttributeError):  # the session (and its lock) is gone
            log.warning("the store lock's connection was lost; taking the lock again")
        self.release()
        self.acquire()

    def release(self) -> None:
        if self._conn is not None:
            with contextlib.suppress(SQLAlchemyError):
                self._conn.close()  # the session ends: the server releases its locks
            self._conn = None
        if self._engine is not None:
            self._engine.dispose()
            self._engine = None


def advisory_key(name: str) -> int:
    """A PostgreSQL advisory lock key (signed 64-bit) for ``name``.

    >>> advisory_key("convmon.store") == advisory_key("convmon.store")
    True
    """
    return int.from_bytes(hashlib.sha256(name.encode()).digest()[:8], "big", signed=True)


class PostgresAdvisoryLock(_SessionLock):
    """``pg_try_advisory_lock`` on a key derived from the name (per database)."""

    what = "PostgreSQL advisory lock"

    def _try(self, conn: Connection) -> bool:
        stmt = text("SELECT pg_try_advisory_lock(:key)")
        return bool(conn.execute(stmt, {"key": advisory_key(self.name)}).scalar_one())


def mysql_lock_name(name: str, database: str | None) -> str:
    """A server-wide ``GET_LOCK`` name for ``name`` in ``database`` (at most 64 characters)."""
    full = f"{name}.{database or ''}"
    if len(full) <= _MYSQL_NAME_MAX:
        return full
    return f"{name}.{hashlib.sha256(full.encode()).hexdigest()[:32]}"


class MysqlNamedLock(_SessionLock):
    """``GET_LOCK(name, 0)``, the name carrying the store's database (lock names are
    server-wide on MariaDB and MySQL)."""

    what = "MariaDB lock"

    def __init__(self, url: str, name: str = STORE_LOCK_NAME):
        super().__init__(url, mysql_lock_name(name, make_url(url).database))

    def _try(self, conn: Connection) -> bool:
        return conn.execute(text("SELECT GET_LOCK(:name, 0)"), {"name": self.name}).scalar() == 1


class NoLock(StoreLock):
    """An in-memory SQLite store: private to its process, nothing to share."""

    def acquire(self) -> None:
        pass

    def check(self) -> None:
        pass

    def release(self) -> None:
        pass


def store_lock(url: str) -> StoreLock:
    """The lock of the store at ``url``, by its backend."""
    u = make_url(url)
    backend = u.get_backend_name()
    if backend == "sqlite":
        name = u.database or ""
        if name in ("", ":memory:") or "mode=memory" in name:
            return NoLock(url)
        if name.startswith("file:"):  # an SQLite URI filename
            name = name[len("file:") :].split("?", 1)[0]
        return SqliteFileLock(url, Path(name).resolve())  # symlinks: one lock per real file
    if backend == "postgresql":
        return PostgresAdvisoryLock(url)
    if backend in ("mysql", "mariadb"):
        return MysqlNamedLock(url)
    raise StoreError(
        f"no one-instance lock for a {backend} store: use SQLite, PostgreSQL or MariaDB"
    )
