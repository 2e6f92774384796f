"""Golden profiles, versioned per recipe, and per-batch figures (#12).

``golden_profiles``: one row per version of a recipe's profile, with the batches it
came from, its settings and calibration (JSON), and the whole profile record
(``doc``, JSON). ``batch_figures``: the hindsight figures of each completed batch
(the columns queried most, and the whole record in ``doc``), kept for the drift
review and the backtest. Documents may exceed 64 kB: MEDIUMTEXT on MySQL/MariaDB.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import mysql

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def _document():
    return sa.Text().with_variant(mysql.MEDIUMTEXT(), "mysql", "mariadb")


def upgrade() -> None:
    op.create_table(
        "golden_profiles",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("recipe", sa.String(64), nullable=False),
        sa.Column("version", sa.Integer, nullable=False),
        sa.Column("created_at_s", sa.Double),
        sa.Column("kinetics_version", sa.String(32)),
        sa.Column("batches", sa.Text),
        sa.Column("settings", sa.Text),
        sa.Column("calibration", sa.Text),
        sa.Column("doc", _document()),
        sa.UniqueConstraint("recipe", "version", name="uq_golden_recipe_version"),
    )
    op.create_table(
        "batch_figures",
        sa.Column("batch", sa.String(64), primary_key=True),
        sa.Column("recipe", sa.String(64)),
        sa.Column("method", sa.Integer),
        sa.Column("kinetics_version", sa.String(32)),
        sa.Column("computed_at_s", sa.Double),
        sa.Column("start_s", sa.Double),
        sa.Column("end_s", sa.Double),
        sa.Column("activity", sa.Double),
        sa.Column("activity_sd", sa.Double),
        sa.Column("time_to_target_s", sa.Double),
        sa.Column("final_conversion", sa.Double),
        sa.Column("doc", sa.Text),
    )


def downgrade() -> None:
    op.drop_table("batch_figures")
    op.drop_table("golden_profiles")
