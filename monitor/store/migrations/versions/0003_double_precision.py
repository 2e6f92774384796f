"""Times and values as DOUBLE on MySQL/MariaDB, where FLOAT is single precision.

A single-precision epoch time resolves about 128 s, so polls 30 s apart collided on
the estimates' unique (batch, at_s). SQLite REAL and PostgreSQL FLOAT are double
precision already: nothing changes there. (The named migration
``0003_double_precision``.) One ALTER per table: MariaDB copies a table for each.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01
"""

from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None

#: Every FLOAT column of revisions 0001 and 0002, by table, with its NULL-ness.
UPGRADE = (
    "ALTER TABLE `batches` MODIFY `start_s` DOUBLE NULL, MODIFY `end_s` DOUBLE NULL",
    "ALTER TABLE `estimates` MODIFY `at_s` DOUBLE NOT NULL, MODIFY `conversion` DOUBLE NULL, "
    "MODIFY `conversion_sd` DOUBLE NULL, MODIFY `activity` DOUBLE NULL, "
    "MODIFY `activity_sd` DOUBLE NULL, MODIFY `target_conversion` DOUBLE NULL, "
    "MODIFY `predicted_end_s` DOUBLE NULL, MODIFY `p10_s` DOUBLE NULL, "
    "MODIFY `p90_s` DOUBLE NULL",
    "ALTER TABLE `alerts` MODIFY `raised_at_s` DOUBLE NULL, MODIFY `cleared_at_s` DOUBLE NULL",
    "ALTER TABLE `kinetics_versions` MODIFY `first_used_s` DOUBLE NULL",
    "ALTER TABLE `archive_index` MODIFY `created_s` DOUBLE NULL",
    "ALTER TABLE `heartbeat` MODIFY `last_good_cycle_s` DOUBLE NULL, "
    "MODIFY `last_data_s` DOUBLE NULL",
)


def _on_mysql() -> bool:
    return op.get_context().dialect.name in ("mysql", "mariadb")


def upgrade() -> None:
    if _on_mysql():
        for statement in UPGRADE:
            op.execute(statement)


def downgrade() -> None:
    """Back to single precision on MySQL/MariaDB: stored times keep only ~128 s."""
    if _on_mysql():
        for statement in UPGRADE:
            op.execute(statement.replace(" DOUBLE ", " FLOAT "))
