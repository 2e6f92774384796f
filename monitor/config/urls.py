"""Database URLs in configuration: ``${VAR}`` expansion, relative SQLite paths, identity.

Errors are ValueError with a message for people (the configuration model maps
them to the key); no message repeats a URL's password.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

from sqlalchemy.engine import URL, make_url
from sqlalchemy.exc import ArgumentError

_VAR = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)\}")
_RELATIVE_SQLITE = re.compile(r"^(sqlite(?:\+\w+)?):///(?!/)(.+)$")
#: Default server ports, to tell ``host`` and ``host:5432`` apart from another server.
_DEFAULT_PORT = {"postgresql": 5432, "mysql": 3306}
#: Host names that all mean this machine (None: the client's default local socket).
_LOCAL_HOSTS = {None, "", "localhost", "127.0.0.1", "::1", "[::1]"}


def expand_env(text: str) -> str:
    """Expand ``${VAR}`` from the environment; an unset variable is a ValueError naming it."""

    def repl(m: re.Match) -> str:
        name = m.group(1)
        if name not in os.environ:
            raise ValueError(f"environment variable {name} is not set (used as ${{{name}}})")
        return os.environ[name]

    return _VAR.sub(repl, text)


def resolve_sqlite(url: str, base_dir: Path) -> str:
    """Make a relative SQLite file path absolute against ``base_dir`` (other URLs unchanged)."""
    m = _RELATIVE_SQLITE.match(url)
    if not m or m.group(2).startswith((":memory:", "file:")):
        return url
    return f"{m.group(1)}:///{(base_dir / m.group(2)).resolve()}"


def database_url(raw: str, base_dir: Path) -> str:
    """A configured URL, expanded, checked to be an SQLAlchemy URL, SQLite paths made absolute."""
    url = expand_env(raw)
    if "://" in url:
        try:
            make_url(url)
            return resolve_sqlite(url, base_dir)
        except (ArgumentError, ValueError, OSError, RuntimeError):  # also: NUL, symlink loop
            pass
    raise ValueError(f"expected an SQLAlchemy URL such as 'sqlite:///plant.db', got {raw!r}")


def _sqlite_file(url: URL) -> Path | None:
    name = url.database or ""
    if name.startswith("file:"):  # an SQLite URI filename (``?uri=true``)
        if "mode=memory" in name or url.query.get("mode") == "memory":
            return None
        name = name[len("file:") :].split("?", 1)[0]
    if name in ("", ":memory:"):
        return None  # each in-memory database is its own
    return Path(name)


def _same_file(a: Path, b: Path) -> bool:
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)  # also sees hard links
        return a.resolve() == b.resolve()  # symlinks resolved as far as they exist
    except (OSError, RuntimeError):  # RuntimeError: a symlink loop (Python < 3.13)
        return False


def _server(url: URL) -> tuple[str, str | None, int | None, str | None]:
    family = "mysql" if url.get_backend_name() in ("mysql", "mariadb") else url.get_backend_name()
    host = url.host.lower() if url.host else None
    if host in _LOCAL_HOSTS or "host" in url.query:  # a local socket counts as this machine
        host = "localhost"
    return family, host, url.port or _DEFAULT_PORT.get(family), url.database


def same_database(a: str, b: str) -> bool:
    """True when two URLs name one database: one SQLite file, or one server's database.

    SQLite files are compared after symlinks are resolved; servers by backend, host
    (``localhost``, ``127.0.0.1`` and ``::1`` are one), port (default filled in) and
    database name. Host names are not looked up, so two names of one server pass.

    Examples
    --------
    >>> same_database("postgresql+psycopg://u@127.0.0.1/plant", "postgresql://v@localhost:5432/plant")
    True
    >>> same_database("sqlite:////data/plant.db", "sqlite:////data/store.db")
    False
    """
    try:
        ua, ub = make_url(a), make_url(b)
    except (ArgumentError, ValueError):
        return False
    if ua.get_backend_name() == "sqlite" or ub.get_backend_name() == "sqlite":
        if ua.get_backend_name() != ub.get_backend_name():
            return False
        fa, fb = _sqlite_file(ua), _sqlite_file(ub)
        return fa is not None and fb is not None and _same_file(fa, fb)
    return _server(ua) == _server(ub)


def without_password(url: str) -> str:
    """The URL as it may be shown to people."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except (ArgumentError, ValueError):
        return "<unreadable URL>"
