"""The first store: batches, estimates, alerts, watermarks, kinetics versions, archive index.

As first shipped (the named migration ``0001_initial``). Times and values are
``FLOAT``: double precision on SQLite and PostgreSQL, single on MySQL/MariaDB
(revision 0003 widens those).

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "batches",
        sa.Column("batch", sa.String(64), primary_key=True),
        sa.Column("unit", sa.String(64)),
        sa.Column("recipe", sa.String(64)),
        sa.Column("start_s", sa.Float),
        sa.Column("end_s", sa.Float),
        sa.Column("state", sa.String(16)),
    )
    op.create_table(
        "estimates",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("batch", sa.String(64), nullable=False),
        sa.Column("at_s", sa.Float, nullable=False),
        sa.Column("conversion", sa.Float),
        sa.Column("conversion_sd", sa.Float),
        sa.Column("activity", sa.Float),
        sa.Column("activity_sd", sa.Float),
        sa.Column("target_conversion", sa.Float),
        sa.Column("predicted_end_s", sa.Float),
        sa.Column("p10_s", sa.Float),
        sa.Column("p90_s", sa.Float),
        sa.Column("forecast_note", sa.Text),
        sa.Column("n_assays_used", sa.Integer),
        sa.Column("warnings", sa.Text),
        sa.Column("kinetics_version", sa.String(32)),
        sa.Column("doc", sa.Text),
        sa.UniqueConstraint("batch", "at_s", name="uq_estimate_batch_at"),
    )
    op.create_table(
        "alerts",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("batch", sa.String(64), nullable=False),
        sa.Column("kind", sa.String(32)),
        sa.Column("severity", sa.String(16)),
        sa.Column("state", sa.String(16)),
        sa.Column("raised_at_s", sa.Float),
        sa.Column("cleared_at_s", sa.Float),
        sa.Column("acked_by", sa.String(64)),
        sa.Column("message", sa.Text),
        sa.UniqueConstraint("batch", "kind", "raised_at_s", name="uq_alert"),
    )
    op.create_table(
        "watermarks",
        sa.Column("name", sa.String(64), primary_key=True),
        sa.Column("value", sa.Text),
    )
    op.create_table(
        "kinetics_versions",
        sa.Column("version", sa.String(32), primary_key=True),
        sa.Column("recipe", sa.String(64)),
        sa.Column("source", sa.Text),
        sa.Column("first_used_s", sa.Float),
    )
    op.create_table(
        "archive_index",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("batch", sa.String(64)),
        sa.Column("version", sa.Integer),
        sa.Column("pdf", sa.Text),
        sa.Column("json", sa.Text),
        sa.Column("sha256", sa.String(64)),
        sa.Column("created_s", sa.Float),
    )


def downgrade() -> None:
    for name in (
        "archive_index",
        "kinetics_versions",
        "watermarks",
        "alerts",
        "estimates",
        "batches",
    ):
        op.drop_table(name)
