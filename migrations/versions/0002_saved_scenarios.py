"""saved scenarios

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01 21:52:25.254225
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0002'
down_revision = '0001'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('scenario',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('tariff_name', sa.String(length=200), nullable=False),
    sa.Column('tariff_source', sa.Text(), nullable=False),
    sa.Column('params', sa.Text(), nullable=False),
    sa.Column('result', sa.Text(), nullable=False),
    sa.Column('annual_savings', sa.Float(), nullable=True),
    sa.Column('npv', sa.Float(), nullable=True),
    sa.Column('simple_payback_years', sa.Float(), nullable=True),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_scenario_meter_id_meter')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_scenario')),
    sa.UniqueConstraint('name', name=op.f('uq_scenario_name'))
    )


def downgrade() -> None:
    op.drop_table('scenario')
