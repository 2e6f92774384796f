"""One monitor per store, enforced by the store (issue #10, item 6).

Two configuration files in different folders name one store; while ``convmon run``
runs with the first, the second is refused (exit 3, one line naming the store, never
its password) on SQLite, PostgreSQL and MariaDB. Under the old lock (a file beside the
*configuration*, in its folder's ``var/``) the second run started: these tests failed.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from monitor.errors import LockError
from monitor.service.lock import (
    MysqlNamedLock,
    PostgresAdvisoryLock,
    SqliteFileLock,
    mysql_lock_name,
    store_lock,
)
from tests.cli_runner import convmon
from tests.fixtures_db import MARIADB_URL, POSTGRES_URL, require_server
from tests.test_cli import one_error_line
from tests.tiny_site import write_export, write_site

#: Accepted by the test server's trust authentication, so it may stand in a URL.
PASSWORD = "not-a-real-secret"


def _with_password(url: str) -> str:
    u = make_url(url)
    if u.get_backend_name() != "postgresql":
        return url  # MariaDB's root has an empty password: a wrong one would be refused
    return u.set(password=PASSWORD).render_as_string(hide_password=False)


def _two_sites(tmp_path, store_url):
    export = write_export(tmp_path / "plant.db", ["B-1", "B-2"])
    first = write_site(tmp_path / "site-a", [], store_url=store_url, historian=export)
    second = write_site(tmp_path / "site-b", [], store_url=store_url, historian=export)
    return first, second


def _wait_for_a_cycle(config, proc) -> None:
    deadline = time.time() + 90
    while time.time() < deadline:
        assert proc.poll() is None, proc.stderr.read()
        r = convmon("status", "--json", "--config", config)
        if r.exit_code == 0 and json.loads(r.stdout)["heartbeat"]["cycles"] >= 1:
            return
        time.sleep(0.5)
    raise AssertionError("the first monitor ran no cycle in 90 s")


def test_a_second_run_on_the_same_store_from_another_folder_is_refused(store_url, tmp_path):
    url = _with_password(store_url)
    first, second = _two_sites(tmp_path, url)
    assert first.parent != second.parent
    proc = subprocess.Popen(
        [sys.executable, "-m", "monitor", "run", "--config", str(first)],
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1"},
    )
    try:
        _wait_for_a_cycle(first, proc)
        for args in (("run", "--once"), ("run",)):
            r = convmon(*args, "--config", second)
            assert r.exit_code == 3, r.stderr
            line = one_error_line(r)
            assert "another convmon run already uses the store" in line
            assert make_url(url).render_as_string(hide_password=True) in line
            assert PASSWORD not in r.stderr
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=30) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
    r = convmon("run", "--once", "--config", second)  # released: now it may run
    assert r.exit_code == 0, r.stderr


def test_a_real_second_process_is_refused_with_one_line(tmp_path):
    """The console's view: exit 3 and one stderr line, from a process of its own."""
    first, second = _two_sites(tmp_path, f"sqlite:///{tmp_path / 'shared' / 'store.db'}")
    with store_lock(f"sqlite:///{tmp_path / 'shared' / 'store.db'}"):
        r = subprocess.run(
            [sys.executable, "-m", "monitor", "run", "--once", "--config", str(second)],
            capture_output=True,
            text=True,
        )
    assert r.returncode == 3 and r.stdout == ""
    assert r.stderr.count("\n") == 1 and r.stderr.startswith("convmon: error: another convmon")
    assert "Traceback" not in r.stderr


def test_the_sqlite_lock_file_sits_beside_the_store_even_through_a_symlink(tmp_path):
    real = tmp_path / "data" / "store.db"
    real.parent.mkdir()
    link = tmp_path / "link.db"
    link.symlink_to(real)
    a, b = store_lock(f"sqlite:///{real}"), store_lock(f"sqlite:///{link}")
    assert isinstance(a, SqliteFileLock) and a.path == b.path == real.with_name("store.db.lock")
    with a, pytest.raises(LockError, match="lock file"):
        b.acquire()
    with b:  # released with the first
        pass


def _backend(name: str) -> str:
    return require_server(POSTGRES_URL if name == "postgres" else MARIADB_URL)


@pytest.mark.parametrize(
    "backend",
    [
        pytest.param("postgres", marks=pytest.mark.postgres),
        pytest.param("mariadb", marks=pytest.mark.mariadb),
    ],
)
def test_a_lock_lost_with_its_connection_is_noticed(backend):
    """The server ends the lock's session (a restart, a killed backend): `check` takes the
    lock again when it is free, and refuses when another monitor took it meanwhile."""
    url = _backend(backend)
    lock = store_lock(url)
    assert isinstance(lock, PostgresAdvisoryLock | MysqlNamedLock)
    admin = create_engine(url, isolation_level="AUTOCOMMIT")

    def kill_lock_session() -> None:
        with lock._conn.connection.dbapi_connection.cursor() as cur:
            who = "pg_backend_pid()" if backend == "postgres" else "CONNECTION_ID()"
            cur.execute(f"SELECT {who}")
            session = cur.fetchone()[0]
        with admin.connect() as conn:
            if backend == "postgres":
                conn.execute(text("SELECT pg_terminate_backend(:p)"), {"p": session})
            else:
                conn.execute(text(f"KILL {int(session)}"))

    try:
        lock.acquire()
        kill_lock_session()
        lock.check()  # lost, free again: taken again
        with pytest.raises(LockError):
            store_lock(url).acquire()
        kill_lock_session()
        other = store_lock(url)
        other.acquire()  # another monitor takes the free lock first
        try:
            with pytest.raises(LockError, match="another convmon run"):
                lock.check()
        finally:
            other.release()
    finally:
        lock.release()
        admin.dispose()


def test_mariadb_lock_names_carry_the_database_and_fit():
    assert mysql_lock_name("convmon.store", "plant_a") != mysql_lock_name("convmon.store", "b")
    long = mysql_lock_name("convmon.store", "x" * 100)
    assert len(long) <= 64 and long != mysql_lock_name("convmon.store", "x" * 99)
