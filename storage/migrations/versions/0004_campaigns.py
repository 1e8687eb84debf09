"""Past campaigns of a graph, with their validated logs.

A campaign belongs to a graph (deleted with it) and a tenant; its log is
written once, validated against one version of the graph, and kept as JSON
rows with the validation report beside it. Learning probabilities and
backtests read these rows.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-05 01:00:00.000000
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

import storage.models.base

revision: str = '0004'
down_revision: str | None = '0003'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table('campaign',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('graph_id', sa.String(length=40), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('started_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('channel', sa.String(length=200), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('uploaded_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.Column('version', sa.Integer(), nullable=True),
    sa.Column('log', sa.JSON(), nullable=True),
    sa.Column('report', sa.JSON(), nullable=True),
    sa.ForeignKeyConstraint(['graph_id'], ['graph.id'], name=op.f('fk_campaign_graph_id_graph'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_campaign'))
    )
    with op.batch_alter_table('campaign', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_campaign_graph_id'), ['graph_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_campaign_tenant_id'), ['tenant_id'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('campaign', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_campaign_tenant_id'))
        batch_op.drop_index(batch_op.f('ix_campaign_graph_id'))
    op.drop_table('campaign')
