"""The monitor's heartbeat: last good cycle, last data, cycle counts.

As first shipped (the named migration ``0002_heartbeat``).

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "heartbeat",
        sa.Column("name", sa.String(32), primary_key=True),
        sa.Column("last_good_cycle_s", sa.Float),
        sa.Column("last_data_s", sa.Float),
        sa.Column("cycles", sa.Integer),
        sa.Column("failed_cycles", sa.Integer),
        sa.Column("message", sa.Text),
    )


def downgrade() -> None:
    op.drop_table("heartbeat")
