"""Aggregated events and import tallies.

``events.n_events``: how many events of the file one stored row stands for (1
for a row read from a file; the count of a pair's events in a period for a
folder import aggregated before storing).  ``batches.duplicates`` and
``batches.rows_rejected``: rows of the file that repeat another row or an
event already in the study, and bad rows skipped with ``--errors report``.

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
    with op.batch_alter_table("events") as batch:
        batch.add_column(sa.Column("n_events", sa.Integer(), nullable=False, server_default="1"))
    with op.batch_alter_table("batches") as batch:
        batch.add_column(sa.Column("duplicates", sa.Integer(), nullable=False, server_default="0"))
        batch.add_column(sa.Column("rows_rejected", sa.Integer(), nullable=False, server_default="0"))


def downgrade() -> None:
    with op.batch_alter_table("batches") as batch:
        batch.drop_column("rows_rejected")
        batch.drop_column("duplicates")
    with op.batch_alter_table("events") as batch:
        batch.drop_column("n_events")
