"""Study, actors, relations, import batches, raw events, periods and ties.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "settings",
        sa.Column("key", sa.String(64), primary_key=True),
        sa.Column("value", sa.Text(), nullable=False),
    )
    op.create_table(
        "actors",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("label", sa.Text(), nullable=False, unique=True),
        sa.Column("attributes", sa.Text(), nullable=True),
        sa.Column("first_period", sa.Text(), nullable=True),
        sa.Column("last_period", sa.Text(), nullable=True),
        sa.Column("in_roster", sa.Boolean(), nullable=False, server_default=sa.false()),
    )
    op.create_table(
        "actor_aliases",
        sa.Column("alias", sa.Text(), primary_key=True),
        sa.Column("actor_id", sa.Integer(), sa.ForeignKey("actors.id", ondelete="CASCADE"), nullable=False),
    )
    op.create_index("ix_actor_aliases_actor_id", "actor_aliases", ["actor_id"])
    op.create_table(
        "relations",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("name", sa.Text(), nullable=False, unique=True),
        sa.Column("directed", sa.Boolean(), nullable=False),
    )
    op.create_table(
        "batches",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("kind", sa.String(16), nullable=False),
        sa.Column("file_name", sa.Text(), nullable=False),
        sa.Column("content_hash", sa.String(64), nullable=False),
        sa.Column("mapping", sa.Text(), nullable=False),
        sa.Column("rows_read", sa.Integer(), nullable=False),
        sa.Column("rows_loaded", sa.Integer(), nullable=False),
        sa.Column("self_ties_dropped", sa.Integer(), nullable=False),
        sa.Column("imported_at", sa.DateTime(), nullable=False),
        sa.UniqueConstraint("kind", "content_hash", name="uq_batches_kind_hash"),
    )
    op.create_table(
        "periods",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("label", sa.Text(), nullable=False, unique=True),
        sa.Column("sort_key", sa.Integer(), nullable=False),
        sa.Column("start", sa.String(10), nullable=True),
        sa.Column("end", sa.String(10), nullable=True),
    )
    op.create_table(
        "events",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("batch_id", sa.Integer(), sa.ForeignKey("batches.id", ondelete="CASCADE"), nullable=False),
        sa.Column("row", sa.Integer(), nullable=False),
        sa.Column("source_id", sa.Integer(), sa.ForeignKey("actors.id"), nullable=False),
        sa.Column("target_id", sa.Integer(), sa.ForeignKey("actors.id"), nullable=False),
        sa.Column("relation_id", sa.Integer(), sa.ForeignKey("relations.id"), nullable=False),
        sa.Column("occurred", sa.String(10), nullable=True),
        sa.Column("period_id", sa.Integer(), sa.ForeignKey("periods.id"), nullable=False),
        sa.Column("weight", sa.Float(), nullable=False),
    )
    op.create_index("ix_events_batch", "events", ["batch_id"])
    op.create_index("ix_events_period", "events", ["period_id", "relation_id"])
    op.create_table(
        "ties",
        sa.Column("period_id", sa.Integer(), sa.ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("relation_id", sa.Integer(), sa.ForeignKey("relations.id"), primary_key=True),
        sa.Column("source_id", sa.Integer(), sa.ForeignKey("actors.id"), primary_key=True),
        sa.Column("target_id", sa.Integer(), sa.ForeignKey("actors.id"), primary_key=True),
        sa.Column("value", sa.Float(), nullable=False),
        sa.Column("n_events", sa.Integer(), nullable=False),
    )


def downgrade() -> None:
    for table in ("ties", "events", "periods", "batches", "relations", "actor_aliases", "actors", "settings"):
        op.drop_table(table)
