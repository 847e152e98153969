"""Blockmodel fits: settings, per-period results, memberships and block tables.

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
        "fits",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("settings_key", sa.String(64), nullable=False),
        sa.Column("method", sa.String(32), nullable=False),
        sa.Column("criterion", sa.String(32), nullable=False),
        sa.Column("seed", sa.Integer(), nullable=False),
        sa.Column("params", sa.Text(), nullable=False),
        sa.Column("software_version", sa.String(32), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("updated_at", sa.DateTime(), nullable=False),
        sa.Column("current", sa.Boolean(), nullable=False, server_default=sa.false()),
    )
    op.create_index("ix_fits_settings_key", "fits", ["settings_key"])
    op.create_table(
        "fit_periods",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("n_positions", sa.Integer(), nullable=False),
        sa.Column("isolates_position", sa.Integer(), nullable=True),
        sa.Column("inconsistencies", sa.Float(), nullable=False),
        sa.Column("density_correlation", sa.Float(), nullable=True),
        sa.Column("perfect_fit", sa.Boolean(), nullable=False),
        sa.Column("p_value", sa.Float(), nullable=True),
        sa.Column("draws", sa.Integer(), nullable=False),
        sa.Column("diagnostics", sa.Text(), nullable=True),
        sa.Column("fitted_at", sa.DateTime(), nullable=False),
    )
    op.create_table(
        "memberships",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("actor_id", sa.Integer(), sa.ForeignKey("actors.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("isolate", sa.Boolean(), nullable=False),
    )
    op.create_table(
        "blocks",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("relation_id", sa.Integer(), sa.ForeignKey("relations.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("from_position", sa.Integer(), primary_key=True),
        sa.Column("to_position", sa.Integer(), primary_key=True),
        sa.Column("ties", sa.Integer(), nullable=False),
        sa.Column("possible", sa.Integer(), nullable=False),
        sa.Column("density", sa.Float(), nullable=False),
        sa.Column("mean_value", sa.Float(), nullable=False),
        sa.Column("max_value", sa.Float(), nullable=False),
        sa.Column("image", sa.Integer(), nullable=False),
        sa.Column("image_zero_block", sa.Integer(), nullable=False),
        sa.Column("image_one_block", sa.Integer(), nullable=False),
        sa.Column("image_density", sa.Integer(), nullable=False),
        sa.Column("image_max_value", sa.Integer(), nullable=False),
        sa.Column("image_mean_value", sa.Integer(), nullable=False),
    )


def downgrade() -> None:
    for table in ("blocks", "memberships", "fit_periods"):
        op.drop_table(table)
    op.drop_index("ix_fits_settings_key", table_name="fits")
    op.drop_table("fits")
