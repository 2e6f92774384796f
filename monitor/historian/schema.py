"""The configured tables and columns, checked against the reflected schema.

Identifiers from configuration are only ever used after they were found in
the database's own catalogue; values are always bound parameters.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import MetaData, Table
from sqlalchemy.engine import Engine
from sqlalchemy.exc import NoSuchTableError

from ..config import HistorianConfig
from ..errors import SchemaError


@dataclass(frozen=True)
class MappedTable:
    table: Table
    columns: dict  # role -> Column (None when the site has no such column)

    def __getitem__(self, role):
        return self.columns[role]


def _reflect(engine: Engine, name: str, key: str) -> Table:
    schema = None
    if "." in name:
        schema, name = name.split(".", 1)
    try:
        return Table(name, MetaData(), autoload_with=engine, schema=schema)
    except NoSuchTableError:
        raise SchemaError(f"table {name!r} not found in the historian database", key=key) from None


def _map(engine, table_name: str, key: str, columns: dict) -> MappedTable:
    table = _reflect(engine, table_name, key)
    actual = {c.name.lower(): c for c in table.columns}
    mapped = {}
    for role, col in columns.items():
        if col is None:
            mapped[role] = None
            continue
        found = table.columns.get(col) if col in table.columns else actual.get(col.lower())
        if found is None:
            raise SchemaError(
                f"column {col!r} not found in table {table_name!r} (has: "
                f"{', '.join(c.name for c in table.columns)})",
                key=f"{key.rsplit('_', 1)[0]}_columns.{role}",
            )
        mapped[role] = found
    return MappedTable(table, mapped)


def map_schema(engine: Engine, h: HistorianConfig) -> tuple[MappedTable, MappedTable]:
    """Reflect and check the samples and events tables named in ``h``."""
    sc, ec = h.samples_columns, h.events_columns
    samples = _map(
        engine,
        h.samples_table,
        "historian.samples_table",
        {"seq": sc.seq, "tag": sc.tag, "time": sc.time, "value": sc.value, "quality": sc.quality},
    )
    events = _map(
        engine,
        h.events_table,
        "historian.events_table",
        {
            "seq": ec.seq,
            "batch": ec.batch,
            "unit": ec.unit,
            "recipe": ec.recipe,
            "event": ec.event,
            "time": ec.time,
        },
    )
    return samples, events
