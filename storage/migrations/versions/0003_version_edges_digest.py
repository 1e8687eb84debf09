"""Versions get an edge-content digest, so equal edges share scores.

An upload that changes only node attributes (an opt-out, a new segment)
makes a version whose edges equal the previous one's; scores depend on the
edges alone, so rankings of the new version can use the earlier version's
scores. The digest (SHA-256 of node ids in order and the edge arrays) is
computed at ingest; versions stored before this migration have none and
never match. The index finds the earlier versions with a digest quickly.

Revision ID: 0003
Revises: 0002_webhook_secrets
Create Date: 2026-12-04 22:13:28.262544
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0003'
down_revision: str | None = '0002_webhook_secrets'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table('graph_version', schema=None) as batch_op:
        batch_op.add_column(sa.Column('edges_digest', sa.String(length=64), nullable=True))
        batch_op.create_index('ix_graph_version_graph_id_edges_digest', ['graph_id', 'edges_digest'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('graph_version', schema=None) as batch_op:
        batch_op.drop_index('ix_graph_version_graph_id_edges_digest')
        batch_op.drop_column('edges_digest')
