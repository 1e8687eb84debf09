"""Initial tables: graphs and versions (arrays in chunks), jobs and results,
schedules, webhooks and deliveries, API keys, idempotency records.

The first migration of the project: every table the service starts with.

Revision ID: 0001
Revises: 
Create Date: 2026-12-01 23:32:14.898334
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op


import storage.models.base

revision: str = '0001'
down_revision: str | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table('api_key',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('prefix', sa.String(length=16), nullable=False),
    sa.Column('key_hash', sa.String(length=64), nullable=False),
    sa.Column('scopes', sa.String(length=100), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=True),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('expires_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.Column('revoked_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_api_key')),
    sa.UniqueConstraint('prefix', name=op.f('uq_api_key_prefix'))
    )
    with op.batch_alter_table('api_key', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_api_key_tenant_id'), ['tenant_id'], unique=False)

    op.create_table('graph',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('description', sa.Text(), nullable=True),
    sa.Column('directed', sa.Boolean(), nullable=False),
    sa.Column('allow_self_loops', sa.Boolean(), nullable=False),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('latest_version', sa.Integer(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_graph'))
    )
    with op.batch_alter_table('graph', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_graph_tenant_id'), ['tenant_id'], unique=False)

    op.create_table('idempotency_record',
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('key', sa.String(length=200), nullable=False),
    sa.Column('route', sa.String(length=200), nullable=False),
    sa.Column('request_hash', sa.String(length=64), nullable=False),
    sa.Column('status_code', sa.Integer(), nullable=False),
    sa.Column('body', sa.JSON(), nullable=False),
    sa.Column('location', sa.String(length=300), nullable=True),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('tenant_id', 'key', name=op.f('pk_idempotency_record'))
    )
    op.create_table('webhook',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('url', sa.String(length=2000), nullable=False),
    sa.Column('events', sa.JSON(), nullable=False),
    sa.Column('secret', sa.String(length=200), nullable=False),
    sa.Column('description', sa.String(length=500), nullable=True),
    sa.Column('active', sa.Boolean(), nullable=False),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_webhook'))
    )
    with op.batch_alter_table('webhook', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_webhook_tenant_id'), ['tenant_id'], unique=False)

    op.create_table('graph_version',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('graph_id', sa.String(length=40), nullable=False),
    sa.Column('number', sa.Integer(), nullable=False),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('nodes', sa.Integer(), nullable=False),
    sa.Column('edges', sa.Integer(), nullable=False),
    sa.Column('origin', sa.JSON(), nullable=False),
    sa.Column('summary', sa.JSON(), nullable=False),
    sa.Column('manifest', sa.JSON(), nullable=False),
    sa.ForeignKeyConstraint(['graph_id'], ['graph.id'], name=op.f('fk_graph_version_graph_id_graph'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_graph_version')),
    sa.UniqueConstraint('graph_id', 'number', name=op.f('uq_graph_version_graph_id_number'))
    )
    with op.batch_alter_table('graph_version', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_graph_version_graph_id'), ['graph_id'], unique=False)

    op.create_table('job',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('graph_id', sa.String(length=40), nullable=True),
    sa.Column('version', sa.Integer(), nullable=True),
    sa.Column('kind', sa.String(length=40), nullable=False),
    sa.Column('params', sa.JSON(), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('priority', sa.Integer(), nullable=False),
    sa.Column('attempts', sa.Integer(), nullable=False),
    sa.Column('max_attempts', sa.Integer(), nullable=False),
    sa.Column('run_after', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('worker_id', sa.String(length=100), nullable=True),
    sa.Column('lease_until', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.Column('progress', sa.Float(), nullable=False),
    sa.Column('progress_message', sa.String(length=200), nullable=True),
    sa.Column('cancel_requested', sa.Boolean(), nullable=False),
    sa.Column('error', sa.JSON(), nullable=True),
    sa.Column('idempotency_key', sa.String(length=200), nullable=True),
    sa.Column('request_hash', sa.String(length=64), nullable=True),
    sa.Column('schedule_id', sa.String(length=40), nullable=True),
    sa.Column('scheduled_for', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('started_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.Column('finished_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.ForeignKeyConstraint(['graph_id'], ['graph.id'], name=op.f('fk_job_graph_id_graph'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_job')),
    sa.UniqueConstraint('schedule_id', 'scheduled_for', name=op.f('uq_job_schedule_id_scheduled_for')),
    sa.UniqueConstraint('tenant_id', 'idempotency_key', name=op.f('uq_job_tenant_id_idempotency_key'))
    )
    with op.batch_alter_table('job', schema=None) as batch_op:
        batch_op.create_index('ix_job_claim', ['status', 'priority', 'run_after'], unique=False)
        batch_op.create_index(batch_op.f('ix_job_graph_id'), ['graph_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_job_schedule_id'), ['schedule_id'], unique=False)
        batch_op.create_index('ix_job_status_finished', ['status', 'finished_at'], unique=False)
        batch_op.create_index('ix_job_tenant_created', ['tenant_id', 'created_at'], unique=False)
        batch_op.create_index(batch_op.f('ix_job_tenant_id'), ['tenant_id'], unique=False)

    op.create_table('schedule',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('graph_id', sa.String(length=40), nullable=False),
    sa.Column('cron', sa.String(length=120), nullable=False),
    sa.Column('timezone', sa.String(length=64), nullable=False),
    sa.Column('kind', sa.String(length=40), nullable=False),
    sa.Column('params', sa.JSON(), nullable=False),
    sa.Column('version', sa.Integer(), nullable=True),
    sa.Column('priority', sa.Integer(), nullable=False),
    sa.Column('active', sa.Boolean(), nullable=False),
    sa.Column('next_run_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('last_run_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.Column('last_job_id', sa.String(length=40), nullable=True),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['graph_id'], ['graph.id'], name=op.f('fk_schedule_graph_id_graph'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_schedule'))
    )
    with op.batch_alter_table('schedule', schema=None) as batch_op:
        batch_op.create_index('ix_schedule_due', ['active', 'next_run_at'], unique=False)
        batch_op.create_index(batch_op.f('ix_schedule_graph_id'), ['graph_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_schedule_tenant_id'), ['tenant_id'], unique=False)

    op.create_table('webhook_delivery',
    sa.Column('id', sa.String(length=40), nullable=False),
    sa.Column('webhook_id', sa.String(length=40), nullable=False),
    sa.Column('tenant_id', sa.String(length=64), nullable=False),
    sa.Column('event', sa.String(length=40), nullable=False),
    sa.Column('job_id', sa.String(length=40), nullable=True),
    sa.Column('payload', sa.JSON(), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('attempts', sa.Integer(), nullable=False),
    sa.Column('next_attempt_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('last_status', sa.Integer(), nullable=True),
    sa.Column('last_error', sa.Text(), nullable=True),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('delivered_at', storage.models.base.UtcDateTime(timezone=True), nullable=True),
    sa.ForeignKeyConstraint(['webhook_id'], ['webhook.id'], name=op.f('fk_webhook_delivery_webhook_id_webhook'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_webhook_delivery'))
    )
    with op.batch_alter_table('webhook_delivery', schema=None) as batch_op:
        batch_op.create_index('ix_webhook_delivery_due', ['status', 'next_attempt_at'], unique=False)
        batch_op.create_index(batch_op.f('ix_webhook_delivery_webhook_id'), ['webhook_id'], unique=False)

    op.create_table('job_result',
    sa.Column('job_id', sa.String(length=40), nullable=False),
    sa.Column('data', sa.JSON(), nullable=False),
    sa.Column('manifest', sa.JSON(), nullable=False),
    sa.Column('etag', sa.String(length=64), nullable=False),
    sa.Column('created_at', storage.models.base.UtcDateTime(timezone=True), nullable=False),
    sa.Column('note', sa.Text(), nullable=True),
    sa.ForeignKeyConstraint(['job_id'], ['job.id'], name=op.f('fk_job_result_job_id_job'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('job_id', name=op.f('pk_job_result'))
    )
    op.create_table('version_array',
    sa.Column('version_id', sa.String(length=40), nullable=False),
    sa.Column('name', sa.String(length=64), nullable=False),
    sa.Column('seq', sa.Integer(), nullable=False),
    sa.Column('data', sa.LargeBinary(), nullable=False),
    sa.ForeignKeyConstraint(['version_id'], ['graph_version.id'], name=op.f('fk_version_array_version_id_graph_version'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('version_id', 'name', 'seq', name=op.f('pk_version_array'))
    )
    op.create_table('result_array',
    sa.Column('job_id', sa.String(length=40), nullable=False),
    sa.Column('name', sa.String(length=64), nullable=False),
    sa.Column('seq', sa.Integer(), nullable=False),
    sa.Column('data', sa.LargeBinary(), nullable=False),
    sa.ForeignKeyConstraint(['job_id'], ['job_result.job_id'], name=op.f('fk_result_array_job_id_job_result'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('job_id', 'name', 'seq', name=op.f('pk_result_array'))
    )


def downgrade() -> None:
    op.drop_table('result_array')
    op.drop_table('version_array')
    op.drop_table('job_result')
    with op.batch_alter_table('webhook_delivery', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_webhook_delivery_webhook_id'))
        batch_op.drop_index('ix_webhook_delivery_due')

    op.drop_table('webhook_delivery')
    with op.batch_alter_table('schedule', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_schedule_tenant_id'))
        batch_op.drop_index(batch_op.f('ix_schedule_graph_id'))
        batch_op.drop_index('ix_schedule_due')

    op.drop_table('schedule')
    with op.batch_alter_table('job', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_job_tenant_id'))
        batch_op.drop_index('ix_job_tenant_created')
        batch_op.drop_index('ix_job_status_finished')
        batch_op.drop_index(batch_op.f('ix_job_schedule_id'))
        batch_op.drop_index(batch_op.f('ix_job_graph_id'))
        batch_op.drop_index('ix_job_claim')

    op.drop_table('job')
    with op.batch_alter_table('graph_version', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_graph_version_graph_id'))

    op.drop_table('graph_version')
    with op.batch_alter_table('webhook', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_webhook_tenant_id'))

    op.drop_table('webhook')
    op.drop_table('idempotency_record')
    with op.batch_alter_table('graph', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_graph_tenant_id'))

    op.drop_table('graph')
    with op.batch_alter_table('api_key', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_api_key_tenant_id'))

    op.drop_table('api_key')
