"""The store's tables at the head revision: what the queries in `store` read and write.

The schema itself is made by the Alembic revisions in ``migrations/versions`` (frozen
DDL, one file per change); these definitions must equal what those revisions build,
which ``tests/test_store.py`` checks on every backend. A schema change is a new
revision *and* a change here, in the same commit.
"""

from __future__ import annotations

from sqlalchemy import (
    Column,
    Double,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.dialects import mysql

meta = MetaData()

batches = Table(
    "batches",
    meta,
    Column("batch", String(64), primary_key=True),
    Column("unit", String(64)),
    Column("recipe", String(64)),
    Column("start_s", Double),
    Column("end_s", Double),
    Column("state", String(16)),
)
estimates = Table(
    "estimates",
    meta,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("batch", String(64), nullable=False),
    Column("at_s", Double, nullable=False),
    Column("conversion", Double),
    Column("conversion_sd", Double),
    Column("activity", Double),
    Column("activity_sd", Double),
    Column("target_conversion", Double),
    Column("predicted_end_s", Double),
    Column("p10_s", Double),
    Column("p90_s", Double),
    Column("forecast_note", Text),
    Column("n_assays_used", Integer),
    Column("warnings", Text),
    Column("kinetics_version", String(32), nullable=False),
    Column("doc", Text),
    Column("config_version", String(32), nullable=False),
    Column("computed_s", Double),
    UniqueConstraint(
        "batch", "at_s", "kinetics_version", "config_version", name="uq_estimate_basis"
    ),
)
alerts = Table(
    "alerts",
    meta,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("batch", String(64), nullable=False),
    Column("kind", String(32)),
    Column("severity", String(16)),
    Column("state", String(16)),
    Column("raised_at_s", Double),
    Column("cleared_at_s", Double),
    Column("message", Text),
    UniqueConstraint("batch", "kind", "raised_at_s", name="uq_alert"),
)
alert_acks = Table(
    "alert_acks",
    meta,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("alert_id", Integer, ForeignKey("alerts.id"), nullable=False, index=True),
    Column("acked_by", Text, nullable=False),
    Column("acked_at_s", Double),
    Column("note", Text),
)
watermarks = Table(
    "watermarks", meta, Column("name", String(64), primary_key=True), Column("value", Text)
)
kinetics_versions = Table(
    "kinetics_versions",
    meta,
    Column("version", String(32), primary_key=True),
    Column("recipe", String(64)),
    Column("source", Text),
    Column("first_used_s", Double),
)
archive_index = Table(
    "archive_index",
    meta,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("batch", String(64)),
    Column("version", Integer),
    Column("pdf", Text),
    Column("json", Text),
    Column("sha256", String(64)),
    Column("created_s", Double),
)
heartbeat = Table(
    "heartbeat",
    meta,
    Column("name", String(32), primary_key=True),
    Column("last_good_cycle_s", Double),
    Column("last_data_s", Double),
    Column("cycles", Integer),
    Column("failed_cycles", Integer),
    Column("message", Text),
)
#: a document that may exceed 64 kB (MySQL/MariaDB TEXT)
_DOCUMENT = Text().with_variant(mysql.MEDIUMTEXT(), "mysql", "mariadb")
golden_profiles = Table(
    "golden_profiles",
    meta,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("recipe", String(64), nullable=False),
    Column("version", Integer, nullable=False),
    Column("created_at_s", Double),
    Column("kinetics_version", String(32)),
    Column("batches", Text),
    Column("settings", Text),
    Column("calibration", Text),
    Column("doc", _DOCUMENT),
    UniqueConstraint("recipe", "version", name="uq_golden_recipe_version"),
)
batch_figures = Table(
    "batch_figures",
    meta,
    Column("batch", String(64), primary_key=True),
    Column("recipe", String(64)),
    Column("method", Integer),
    Column("kinetics_version", String(32)),
    Column("computed_at_s", Double),
    Column("start_s", Double),
    Column("end_s", Double),
    Column("activity", Double),
    Column("activity_sd", Double),
    Column("time_to_target_s", Double),
    Column("final_conversion", Double),
    Column("doc", Text),
)
