"""monitoring: each meter's tariff, day summaries for the checks, alerts, check runs, digests

Rows of meter_tariff, monitor_day and alert belong to their meter (ON DELETE CASCADE).

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-02 10:10:01.777114
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0007'
down_revision = '0006'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('monitor_run',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('as_of', sa.DateTime(timezone=True), nullable=False),
    sa.Column('started_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('seconds', sa.Float(), nullable=False),
    sa.Column('trigger', sa.String(length=16), nullable=False),
    sa.Column('meters', sa.Integer(), nullable=False),
    sa.Column('raised', sa.Integer(), nullable=False),
    sa.Column('updated', sa.Integer(), nullable=False),
    sa.Column('resolved', sa.Integer(), nullable=False),
    sa.Column('batch_watermark', sa.Integer(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_monitor_run'))
    )
    op.create_table('notification',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('sent_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('channel', sa.String(length=16), nullable=False),
    sa.Column('alerts', sa.Integer(), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('error', sa.Text(), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_notification'))
    )
    op.create_table('alert',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=32), nullable=False),
    sa.Column('cause', sa.String(length=100), nullable=False),
    sa.Column('since', sa.DateTime(timezone=True), nullable=True),
    sa.Column('severity', sa.String(length=16), nullable=False),
    sa.Column('money_per_month', sa.Float(), nullable=True),
    sa.Column('currency', sa.String(length=8), nullable=True),
    sa.Column('message', sa.Text(), nullable=False),
    sa.Column('figures', sa.Text(), nullable=False),
    sa.Column('state', sa.String(length=16), nullable=False),
    sa.Column('raised_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('as_of', sa.DateTime(timezone=True), nullable=False),
    sa.Column('seen_at', sa.DateTime(timezone=True), nullable=True),
    sa.Column('resolved_at', sa.DateTime(timezone=True), nullable=True),
    sa.Column('notified', sa.Boolean(), nullable=False),
    sa.Column('resolved_notified', sa.Boolean(), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_alert_meter_id_meter'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_alert'))
    )
    with op.batch_alter_table('alert', schema=None) as batch_op:
        batch_op.create_index('ix_alert_meter_kind', ['meter_id', 'kind', 'state'], unique=False)
        batch_op.create_index('ix_alert_state', ['state'], unique=False)

    op.create_table('meter_tariff',
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('source_name', sa.String(length=200), nullable=False),
    sa.Column('source_path', sa.Text(), nullable=True),
    sa.Column('toml', sa.Text(), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False),
    sa.Column('billing_day', sa.SmallInteger(), nullable=True),
    sa.Column('set_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_meter_tariff_meter_id_meter'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('meter_id', name=op.f('pk_meter_tariff'))
    )
    op.create_table('monitor_day',
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('day', sa.Date(), nullable=False),
    sa.Column('multiplier', sa.Float(), nullable=False),
    sa.Column('intervals', sa.Integer(), nullable=False),
    sa.Column('expected', sa.Integer(), nullable=False),
    sa.Column('summary', sa.LargeBinary(), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_monitor_day_meter_id_meter'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('meter_id', 'day', name=op.f('pk_monitor_day')),
    sqlite_with_rowid=False
    )


def downgrade() -> None:
    op.drop_table('monitor_day')
    op.drop_table('meter_tariff')
    with op.batch_alter_table('alert', schema=None) as batch_op:
        batch_op.drop_index('ix_alert_state')
        batch_op.drop_index('ix_alert_meter_kind')

    op.drop_table('alert')
    op.drop_table('notification')
    op.drop_table('monitor_run')
