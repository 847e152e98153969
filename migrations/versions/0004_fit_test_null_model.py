"""Fit test against a null model: ``fit_periods.null_model``; noise-aware image ``blocks.image_above_background``.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("fit_periods") as batch:
        batch.add_column(sa.Column("null_model", sa.String(16), nullable=True))
    with op.batch_alter_table("blocks") as batch:
        batch.add_column(sa.Column("image_above_background", sa.Integer(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("blocks") as batch:
        batch.drop_column("image_above_background")
    with op.batch_alter_table("fit_periods") as batch:
        batch.drop_column("null_model")
