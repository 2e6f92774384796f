"""Acknowledgements as a history: who, when and a note, one row each (#10).

``alert_acks`` holds every acknowledgement of an alert; a second one adds a row and
never replaces the first. The single ``alerts.acked_by`` name it replaces is moved
into the history (its time was never recorded: NULL) and dropped, so the names live
in one place; the latest is what ``acked_by`` shows.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02
"""

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "alert_acks",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("alert_id", sa.Integer, sa.ForeignKey("alerts.id"), nullable=False),
        sa.Column("acked_by", sa.Text, nullable=False),
        sa.Column("acked_at_s", sa.Double),
        sa.Column("note", sa.Text),
    )
    op.create_index("ix_alert_acks_alert_id", "alert_acks", ["alert_id"])
    op.execute(
        "INSERT INTO alert_acks (alert_id, acked_by) "
        "SELECT id, acked_by FROM alerts WHERE acked_by IS NOT NULL"
    )
    with op.batch_alter_table("alerts") as b:
        b.drop_column("acked_by")


def downgrade() -> None:
    """Back to one name per alert: the latest acknowledgement's (times and notes are lost)."""
    with op.batch_alter_table("alerts") as b:
        b.add_column(sa.Column("acked_by", sa.String(64)))
    op.execute(
        "UPDATE alerts SET acked_by = (SELECT SUBSTR(k.acked_by, 1, 64) FROM alert_acks k "
        "WHERE k.alert_id = alerts.id ORDER BY k.id DESC LIMIT 1)"
    )
    op.drop_table("alert_acks")
