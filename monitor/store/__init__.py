"""The monitor's own database: results, alerts, watermarks, the archive ledger.

`tables` holds the head schema the queries use, `schema` the Alembic revisions'
runner (upgrade at open, adoption of pre-Alembic stores), `store` the `Store` class.
"""

from .schema import (
    MIGRATIONS,
    applied_migrations,
    current_revision,
    migrate,
    migrations_table,
)
from .store import Store, open_store
from .tables import (
    alert_acks,
    alerts,
    archive_index,
    batch_figures,
    batches,
    estimates,
    golden_profiles,
    heartbeat,
    kinetics_versions,
    watermarks,
)

__all__ = [
    "MIGRATIONS",
    "Store",
    "alert_acks",
    "alerts",
    "applied_migrations",
    "archive_index",
    "batch_figures",
    "batches",
    "current_revision",
    "estimates",
    "golden_profiles",
    "heartbeat",
    "kinetics_versions",
    "migrate",
    "migrations_table",
    "open_store",
    "watermarks",
]
