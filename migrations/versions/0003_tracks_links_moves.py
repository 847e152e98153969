"""Alignment across periods: tracks, per-period track assignments, links and moves.

Also adds ``memberships.confidence`` (posterior probability or bootstrap share).

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("memberships") as batch:
        batch.add_column(sa.Column("confidence", sa.Float(), nullable=True))
    op.create_table(
        "alignments",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("params", sa.Text(), nullable=False),
        sa.Column("aligned_at", sa.DateTime(), nullable=False),
    )
    op.create_table(
        "tracks",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("track", sa.Integer(), primary_key=True),
        sa.Column("name", sa.Text(), nullable=True),
        sa.Column("first_period", sa.Text(), nullable=True),
        sa.Column("last_period", sa.Text(), nullable=True),
        sa.Column("parent", sa.Integer(), nullable=True),
        sa.Column("merged_into", sa.Integer(), nullable=True),
        sa.Column("ended", sa.Text(), nullable=True),
        sa.Column("isolates", sa.Boolean(), nullable=False),
    )
    op.create_table(
        "track_positions",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("position", sa.Integer(), primary_key=True),
        sa.Column("track", sa.Integer(), nullable=False),
    )
    op.create_table(
        "track_links",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), nullable=False),
        sa.Column("from_period", sa.Text(), nullable=True),
        sa.Column("to_period", sa.Text(), nullable=True),
        sa.Column("from_track", sa.Integer(), nullable=True),
        sa.Column("to_track", sa.Integer(), nullable=True),
        sa.Column("from_position", sa.Integer(), nullable=True),
        sa.Column("to_position", sa.Integer(), nullable=True),
        sa.Column("similarity", sa.Float(), nullable=True),
        sa.Column("overlap", sa.Float(), nullable=True),
        sa.Column("role_similarity", sa.Float(), nullable=True),
        sa.Column("kind", sa.String(16), nullable=False),
    )
    op.create_index("ix_track_links_fit", "track_links", ["fit_id"])
    op.create_table(
        "moves",
        sa.Column("fit_id", sa.Integer(), sa.ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("actor_id", sa.Integer(), sa.ForeignKey("actors.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("to_period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("from_period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), nullable=False),
        sa.Column("from_track", sa.Integer(), nullable=False),
        sa.Column("to_track", sa.Integer(), nullable=False),
        sa.Column("confidence", sa.Float(), nullable=True),
    )


def downgrade() -> None:
    op.drop_table("moves")
    op.drop_index("ix_track_links_fit", table_name="track_links")
    op.drop_table("track_links")
    op.drop_table("track_positions")
    op.drop_table("tracks")
    op.drop_table("alignments")
    with op.batch_alter_table("memberships") as batch:
        batch.drop_column("confidence")
