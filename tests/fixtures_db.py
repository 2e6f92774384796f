"""Historian backends for the contract suite: SQLite, PostgreSQL and MariaDB.

``sqlite_url`` is a file in the test's temporary folder; ``postgres_url`` and
``mariadb_url`` are the local servers (database ``test``). When a server does
not answer, its tests are skipped with the reason, or fail when ``CI=true``
(a CI run must not pass by skipping). ``backend_url`` runs a test on all three.

`make_export` writes a narrow-schema export (samples and events tables, with an
index on (tag, time)) under table names unique to the call, with SQLAlchemy Core
and bound parameters only; the ``exports`` fixture drops what a test made.
"""

from __future__ import annotations

import os
import uuid
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime

import pytest
from sqlalchemy import (
    BigInteger,
    Column,
    DateTime,
    Double,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    create_engine,
    func,
    inspect,
    select,
    text,
)
from sqlalchemy.dialects import mysql
from sqlalchemy.engine import Engine

from monitor.config import Config, config_from_dict
from monitor.historian.reader import HistorianReader

POSTGRES_URL = os.environ.get(
    "CONVMON_TEST_POSTGRES", "postgresql+psycopg://postgres@127.0.0.1:5432/test"
)
MARIADB_URL = os.environ.get("CONVMON_TEST_MARIADB", "mysql+pymysql://root@127.0.0.1:3306/test")
TS_TYPES = ("text", "datetime", "timestamptz", "epoch")

_reachable: dict[str, str | None] = {}  # url -> None (answers) or why not
_writers: dict[str, Engine] = {}  # url -> the engine that writes exports there (one per run)


def _writer(url: str) -> Engine:
    if url not in _writers:
        _writers[url] = create_engine(url)
    return _writers[url]


def pytest_sessionfinish(session, exitstatus):
    for engine in _writers.values():
        engine.dispose()


def _probe(url: str) -> str | None:
    if url not in _reachable:
        engine = create_engine(url, connect_args={"connect_timeout": 3})
        try:
            with engine.connect() as conn:
                conn.execute(text("SELECT 1"))
            _reachable[url] = None
        except Exception as exc:  # noqa: BLE001 - any failure means "not usable here"
            _reachable[url] = f"{type(exc).__name__}: {str(exc).splitlines()[0]}"
        finally:
            engine.dispose()
    return _reachable[url]


def require_server(url: str) -> str:
    """``url`` if its server answers; else skip (or fail when ``CI=true``)."""
    why = _probe(url)
    if why is not None:
        reason = f"historian backend {url} unreachable: {why}"
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(reason)
        pytest.skip(reason)
    return url


@pytest.fixture
def sqlite_url(tmp_path) -> str:
    return f"sqlite:///{tmp_path / 'historian.db'}"


@pytest.fixture
def postgres_url() -> str:
    return require_server(POSTGRES_URL)


@pytest.fixture
def mariadb_url() -> str:
    return require_server(MARIADB_URL)


@pytest.fixture(
    params=[
        pytest.param("sqlite", id="sqlite"),
        pytest.param("postgres", id="postgres", marks=pytest.mark.postgres),
        pytest.param("mariadb", id="mariadb", marks=pytest.mark.mariadb),
    ]
)
def backend_url(request) -> str:
    return request.getfixturevalue(f"{request.param}_url")


# ------------------------------------------------------------------ schema
@dataclass(frozen=True)
class Schema:
    """Table and column names of one export layout (``None``: the site has no such column)."""

    samples: str
    samples_columns: dict
    events: str
    events_columns: dict
    quality_type: str = "int"  # "int" | "str"

    def without(self, *roles: str) -> Schema:
        """The same layout without the samples columns ``roles`` (e.g. ``"seq"``)."""
        return replace(
            self,
            samples_columns={
                r: (None if r in roles else c) for r, c in self.samples_columns.items()
            },
        )


DEFAULT_SCHEMA = Schema(
    "tag_samples",
    {"seq": "seq", "tag": "tag", "time": "ts", "value": "value", "quality": "quality"},
    "batch_events",
    {
        "seq": "seq",
        "batch": "batch_id",
        "unit": "unit",
        "recipe": "recipe",
        "event": "event",
        "time": "ts",
    },
)
CUSTOM_SCHEMA = Schema(
    "plant_readings",
    {"seq": "entry_no", "tag": "signal", "time": "stamp", "value": "val", "quality": "qual"},
    "batch_log",
    {
        "seq": None,
        "batch": "lot",
        "unit": "vessel",
        "recipe": "product",
        "event": "step",
        "time": "logged",
    },
    quality_type="str",
)
SAMPLE_ROLES = ("seq", "tag", "time", "value", "quality")
EVENT_ROLES = ("seq", "batch", "unit", "recipe", "event", "time")


def _time_type(ts_type: str, backend: str):
    if ts_type == "text":
        return String(40)
    if ts_type == "epoch":
        return Double()
    if ts_type == "datetime":
        return DateTime().with_variant(mysql.DATETIME(fsp=6), "mysql", "mariadb")
    if ts_type == "timestamptz":
        if backend != "postgresql":
            raise ValueError("timestamptz is a PostgreSQL type")
        return DateTime(timezone=True)
    raise ValueError(f"ts_type must be one of {TS_TYPES}, got {ts_type!r}")


def ts_value(t_s: float, ts_type: str):
    """Epoch seconds [s] as the value a column of ``ts_type`` stores (UTC)."""
    dt = datetime.fromtimestamp(t_s, tz=UTC)
    if ts_type == "text":
        return dt.isoformat(timespec="milliseconds")
    if ts_type == "epoch":
        return float(t_s)
    if ts_type == "datetime":
        return dt.replace(tzinfo=None)
    return dt


@dataclass
class Export:
    """Tables written for one test, and the means to grow, inspect and drop them."""

    url: str
    schema: Schema  # with the unique table names
    ts_type: str
    engine: Engine
    samples: Table
    events: Table
    readers: list = field(default_factory=list)
    dropped: bool = False

    @property
    def backend(self) -> str:
        return self.engine.dialect.name

    def append_samples(self, rows) -> None:
        """Insert rows given as (seq, tag, time, value, quality); absent columns are skipped."""
        self._insert(self.samples, SAMPLE_ROLES, self.schema.samples_columns, rows)

    def append_events(self, rows) -> None:
        """Insert rows given as (seq, batch, unit, recipe, event, time)."""
        self._insert(self.events, EVENT_ROLES, self.schema.events_columns, rows)

    def _insert(self, table: Table, roles, columns: dict, rows) -> None:
        rows = list(rows)
        if not rows:
            return
        names = [(i, columns[r]) for i, r in enumerate(roles) if columns[r] is not None]
        with self.engine.begin() as conn:
            conn.execute(table.insert(), [{c: row[i] for i, c in names} for row in rows])

    def count(self, which: str = "samples") -> int:
        table = self.samples if which == "samples" else self.events
        with self.engine.connect() as conn:
            return conn.execute(select(func.count()).select_from(table)).scalar_one()

    def tables_present(self) -> bool:
        names = set(inspect(self.engine).get_table_names())
        return {self.schema.samples, self.schema.events} <= names

    def historian(self, **overrides) -> dict:
        """The ``[historian]`` table that reads this export."""
        sc, ec = self.schema.samples_columns, self.schema.events_columns
        h = {
            "url": self.url,
            "samples_table": self.schema.samples,
            "samples_columns": {r: (c if c is not None else False) for r, c in sc.items()},
            "good_quality": [0] if self.schema.quality_type == "int" else ["GOOD"],
            "naive_timezone": "UTC",
            "events_table": self.schema.events,
            "events_columns": {r: (c if c is not None else False) for r, c in ec.items()},
            "connect_timeout_s": 5,
            "retries": 1,
        }
        h.update(overrides)
        return h

    def config(self, units: list[dict], **historian_overrides) -> Config:
        return config_from_dict(
            {"historian": self.historian(**historian_overrides), "units": units}
        )

    def reader(self, units: list[dict], **historian_overrides) -> HistorianReader:
        """A `HistorianReader` on this export (closed by `drop`)."""
        reader = HistorianReader(self.config(units, **historian_overrides))
        self.readers.append(reader)
        return reader

    def drop(self) -> None:
        if self.dropped:
            return
        for reader in self.readers:
            reader.close()
        with self.engine.begin() as conn:
            if self.backend == "postgresql":
                conn.execute(text("SET LOCAL lock_timeout = '10s'"))
            self.samples.metadata.drop_all(conn, checkfirst=True)
        if self.backend == "sqlite":  # a file of this test only
            _writers.pop(self.url, None)
            self.engine.dispose()
        self.dropped = True


def make_export(
    url: str,
    samples_rows=(),
    events_rows=(),
    *,
    schema: str | Schema = "default",
    ts_type: str = "text",
) -> Export:
    """Create uniquely named samples and events tables at ``url`` and insert the rows.

    ``samples_rows`` are (seq, tag, time, value, quality) and ``events_rows``
    (seq, batch, unit, recipe, event, time) in the role order, whatever the
    layout's column names; the time values must suit ``ts_type`` (see `ts_value`).
    """
    base = (
        {"default": DEFAULT_SCHEMA, "custom": CUSTOM_SCHEMA}.get(schema)
        if isinstance(schema, str)
        else schema
    )
    if not isinstance(base, Schema):
        raise ValueError(f"schema must be 'default', 'custom' or a Schema, got {schema!r}")
    suffix = uuid.uuid4().hex[:12]
    names = replace(base, samples=f"{base.samples}_{suffix}", events=f"{base.events}_{suffix}")
    engine = _writer(url)
    backend = engine.dialect.name
    time_type = _time_type(ts_type, backend)
    sc, ec = names.samples_columns, names.events_columns
    md = MetaData()
    quality_type = BigInteger() if names.quality_type == "int" else String(16)
    cols = [
        Column(sc["seq"], BigInteger, primary_key=True, autoincrement=False) if sc["seq"] else None,
        Column(sc["tag"], String(100), nullable=False),
        Column(sc["time"], time_type, nullable=False),
        Column(sc["value"], Double),
        Column(sc["quality"], quality_type) if sc["quality"] else None,
    ]
    samples = Table(names.samples, md, *[c for c in cols if c is not None])
    Index(f"ix_{names.samples}_tag_time", samples.c[sc["tag"]], samples.c[sc["time"]])
    ecols = [
        Column(ec["seq"], Integer, primary_key=True, autoincrement=False) if ec["seq"] else None,
        Column(ec["batch"], String(40), nullable=False),
        Column(ec["unit"], String(40), nullable=False),
        Column(ec["recipe"], String(40), nullable=False),
        Column(ec["event"], String(20), nullable=False),
        Column(ec["time"], time_type, nullable=False),
    ]
    events = Table(names.events, md, *[c for c in ecols if c is not None])
    md.create_all(engine)
    export = Export(url, names, ts_type, engine, samples, events)
    try:
        export.append_samples(samples_rows)
        export.append_events(events_rows)
    except Exception:
        export.drop()
        raise
    return export


@pytest.fixture
def exports():
    """``exports(url, samples_rows, events_rows, **kw)`` → `Export`; all dropped after the test."""
    made: list[Export] = []

    def make(url, samples_rows=(), events_rows=(), **kw) -> Export:
        export = make_export(url, samples_rows, events_rows, **kw)
        made.append(export)
        return export

    yield make
    for export in made:
        export.drop()


@pytest.fixture(
    params=[
        pytest.param("sqlite", id="sqlite"),
        pytest.param("postgres", id="postgres", marks=pytest.mark.postgres),
        pytest.param("mariadb", id="mariadb", marks=pytest.mark.mariadb),
    ]
)
def store_url(request, tmp_path):
    """A fresh, empty database for the monitor's store on each backend (dropped after)."""
    import uuid

    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'store.db'}"
        return
    server = require_server(POSTGRES_URL if request.param == "postgres" else MARIADB_URL)
    name = f"convmon_store_{uuid.uuid4().hex[:12]}"  # made here, not outside input
    admin = create_engine(server, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f"CREATE DATABASE {name}"))
    try:
        yield make_url(server).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            if request.param == "postgres":
                conn.execute(text(f"DROP DATABASE {name} WITH (FORCE)"))
            else:
                conn.execute(text(f"DROP DATABASE {name}"))
        admin.dispose()
