"""The monitor's own database: results, alerts, watermarks, the archive ledger."""

from .store import (
    MIGRATIONS,
    Store,
    alerts,
    applied_migrations,
    archive_index,
    batches,
    estimates,
    heartbeat,
    kinetics_versions,
    migrate,
    migrations_table,
    open_store,
    watermarks,
)

__all__ = [
    "MIGRATIONS",
    "Store",
    "alerts",
    "applied_migrations",
    "archive_index",
    "batches",
    "estimates",
    "heartbeat",
    "kinetics_versions",
    "migrate",
    "migrations_table",
    "open_store",
    "watermarks",
]
