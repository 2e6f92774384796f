"""Estimates keyed by what they were computed with, and when they were computed (#10).

A change of a recipe's kinetics file or configuration re-estimates its running
batches at the same data time; the old key (batch, at_s) had no room for that
second estimate. The key becomes (batch, at_s, kinetics_version, config_version):
``config_version`` is a short hash of the configuration an estimate was computed
with (the recipe's table, the unit's, ``[estimator]``); ``computed_s`` is the poll
cycle's clock when it was (last) computed, so the newest computed estimate of a
batch can be told among several at one data time. Rows kept from before get
``config_version`` '' (unknown), ``kinetics_version`` '' where it was NULL, and
``computed_s`` = their ``at_s`` (the closest record there is).

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None

_KEY = ["batch", "at_s", "kinetics_version", "config_version"]


def upgrade() -> None:
    with op.batch_alter_table("estimates") as b:
        b.add_column(sa.Column("config_version", sa.String(32), nullable=True))
        b.add_column(sa.Column("computed_s", sa.Double, nullable=True))
    op.execute("UPDATE estimates SET config_version = '', computed_s = at_s")
    op.execute("UPDATE estimates SET kinetics_version = '' WHERE kinetics_version IS NULL")
    with op.batch_alter_table("estimates") as b:
        b.alter_column("kinetics_version", existing_type=sa.String(32), nullable=False)
        b.alter_column("config_version", existing_type=sa.String(32), nullable=False)
        b.drop_constraint("uq_estimate_batch_at", type_="unique")
        b.create_unique_constraint("uq_estimate_basis", _KEY)


def downgrade() -> None:
    """Back to one estimate per (batch, at_s): the newest computed of each is kept."""
    op.execute(
        "DELETE FROM estimates WHERE id NOT IN (SELECT id FROM (SELECT e.id FROM estimates e "
        "WHERE NOT EXISTS (SELECT 1 FROM estimates n WHERE n.batch = e.batch "
        "AND n.at_s = e.at_s AND (n.computed_s > e.computed_s "
        "OR (n.computed_s = e.computed_s AND n.id > e.id)))) AS keep)"
    )
    with op.batch_alter_table("estimates") as b:
        b.drop_constraint("uq_estimate_basis", type_="unique")
        b.create_unique_constraint("uq_estimate_batch_at", ["batch", "at_s"])
        b.alter_column("kinetics_version", existing_type=sa.String(32), nullable=True)
        b.drop_column("computed_s")
        b.drop_column("config_version")
