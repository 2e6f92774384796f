"""Write-back: results as calculated tags, in the narrow shape, to a database of the site's.

Per unit and estimate: ``<prefix>.<unit>.CONVERSION``, ``.CONVERSION_SD``,
``.ACTIVITY``, ``.END_P50``, ``.END_P10``, ``.END_P90`` (end times as epoch
seconds, UTC), stamped with the estimate's data time (ISO 8601, UTC).
Idempotent on (tag, ts): writing the same estimate twice changes nothing.
"""

from __future__ import annotations

from sqlalchemy import (
    BigInteger,
    Column,
    Double,
    MetaData,
    PrimaryKeyConstraint,
    String,
    Table,
    create_engine,
    inspect,
)
from sqlalchemy.dialects.mysql import insert as mysql_insert
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.exc import SQLAlchemyError

from ..config import WritebackConfig
from ..errors import SchemaError, StoreError
from ..timefmt import iso

BAD_NO_DATA = 0x809B0000  # OPC UA StatusCode Bad_NoData (OPC 10000-4 status codes; from memory)
FIELDS = {
    "CONVERSION": "conversion",
    "CONVERSION_SD": "conversion_sd",
    "ACTIVITY": "activity",
    "END_P50": "predicted_end_s",
    "END_P10": "p10_s",
    "END_P90": "p90_s",
}


class WriteBack:
    """Appends calculated-tag rows; creates its table if the site has none."""

    def __init__(self, cfg: WritebackConfig):
        self.cfg = cfg
        self.engine = create_engine(cfg.url, pool_pre_ping=True)
        meta = MetaData()
        self.table = Table(
            cfg.table,
            meta,
            Column("tag", String(128), nullable=False),
            # double precision: end times are epoch seconds
            Column("ts", String(40), nullable=False),
            Column("value", Double),
            Column("quality", BigInteger),
            PrimaryKeyConstraint("tag", "ts", name=f"pk_{cfg.table}"),
        )
        try:
            insp = inspect(self.engine)
            if insp.has_table(cfg.table):
                have = {c["name"] for c in insp.get_columns(cfg.table)}
                missing = {"tag", "ts", "value", "quality"} - have
                if missing:
                    raise SchemaError(
                        f"write-back table {cfg.table!r} lacks column(s) "
                        f"{', '.join(sorted(missing))}",
                        key="writeback.table",
                    )
            else:
                meta.create_all(self.engine)
        except SQLAlchemyError as exc:
            raise StoreError(f"write-back database unreachable: {exc}") from None

    def rows_for(self, unit: str, est_row: dict) -> list[dict]:
        ts = iso(est_row["at_s"])
        out = []
        for suffix, key in FIELDS.items():
            v = est_row.get(key)
            out.append(
                {
                    "tag": f"{self.cfg.tag_prefix}.{unit}.{suffix}",
                    "ts": ts,
                    "value": None if v is None else float(v),
                    # OPC UA: Good = 0; no value (target unreachable) = Bad_NoData
                    "quality": 0 if v is not None else BAD_NO_DATA,
                }
            )
        return out

    def write(self, items: list[tuple[str, dict]]) -> int:
        """Write ``(unit, estimate row)`` pairs; returns the rows offered."""
        rows = [r for unit, e in items for r in self.rows_for(unit, e)]
        if not rows:
            return 0
        dialect = self.engine.dialect.name
        if dialect == "sqlite":
            stmt = sqlite_insert(self.table).on_conflict_do_nothing(index_elements=["tag", "ts"])
        elif dialect == "postgresql":
            stmt = pg_insert(self.table).on_conflict_do_nothing(index_elements=["tag", "ts"])
        elif dialect in ("mysql", "mariadb"):
            stmt = mysql_insert(self.table).prefix_with("IGNORE")
        else:
            raise StoreError(f"write-back to {dialect} is not supported")
        try:
            with self.engine.begin() as conn:
                conn.execute(stmt, rows)
        except SQLAlchemyError as exc:
            raise StoreError(f"write-back failed: {exc}") from None
        return len(rows)

    def close(self) -> None:
        self.engine.dispose()
