"""meter data versions (span, count, last changing batch) and per-meter portfolio summaries

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-02 10:05:00

``meter_data`` is filled from the stored readings here (one pass over ``reading``); from then
on the import keeps it current in the same transaction as the readings. ``meter_summary``
starts empty: summaries are computed on first use.
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0009'
down_revision = '0008'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('meter_data',
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('data_batch_id', sa.Integer(), nullable=False),
    sa.Column('first_start', sa.BigInteger(), nullable=False),
    sa.Column('last_start', sa.BigInteger(), nullable=False),
    sa.Column('intervals', sa.Integer(), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_meter_data_meter_id_meter')),
    sa.PrimaryKeyConstraint('meter_id', name=op.f('pk_meter_data'))
    )
    op.create_table('meter_summary',
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('tariff_digest', sa.String(length=64), nullable=False),
    sa.Column('data_key', sa.String(length=64), nullable=False),
    sa.Column('summary', sa.Text(), nullable=False),
    sa.Column('computed_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_meter_summary_meter_id_meter')),
    sa.PrimaryKeyConstraint('meter_id', 'tariff_digest', name=op.f('pk_meter_summary'))
    )
    op.execute("INSERT INTO meter_data (meter_id, data_batch_id, first_start, last_start, intervals) "
               "SELECT meter_id, max(batch_id), min(start), max(start), count(*) FROM reading GROUP BY meter_id")


def downgrade() -> None:
    op.drop_table('meter_summary')
    op.drop_table('meter_data')
