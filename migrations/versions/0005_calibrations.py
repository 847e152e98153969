"""Calibration checks of move confidence: one row per check run on a fit.

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


def upgrade() -> None:
    op.create_table(
        "calibrations",
        sa.Column("id", sa.Integer(), primary_key=True, autoincrement=True),
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), nullable=False),
        sa.Column("studies", sa.Integer(), nullable=False),
        sa.Column("ece", sa.Float(), nullable=True),
        sa.Column("result", sa.Text(), nullable=False),
        sa.Column("checked_at", sa.DateTime(), nullable=False),
    )
    op.create_index("ix_calibrations_fit", "calibrations", ["fit_id"])


def downgrade() -> None:
    op.drop_index("ix_calibrations_fit", table_name="calibrations")
    op.drop_table("calibrations")
