"""bills: imported bill files (name, digest, text) and one row per bill

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01 22:01:30.293375
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0003'
down_revision = '0002'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('bill_file',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('file_name', sa.String(length=500), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False),
    sa.Column('format', sa.String(length=200), nullable=False),
    sa.Column('content', sa.Text(), nullable=False),
    sa.Column('bills_inserted', sa.Integer(), nullable=False),
    sa.Column('bills_updated', sa.Integer(), nullable=False),
    sa.Column('bills_unchanged', sa.Integer(), nullable=False),
    sa.Column('imported_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_bill_file'))
    )
    with op.batch_alter_table('bill_file', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_bill_file_sha256'), ['sha256'], unique=False)

    op.create_table('bill',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('period_start', sa.Date(), nullable=False),
    sa.Column('period_end', sa.Date(), nullable=False),
    sa.Column('kwh', sa.Float(), nullable=True),
    sa.Column('kvarh', sa.Float(), nullable=True),
    sa.Column('peak_kw', sa.Float(), nullable=True),
    sa.Column('peak_kva', sa.Float(), nullable=True),
    sa.Column('pf', sa.Float(), nullable=True),
    sa.Column('reactive_charge', sa.Float(), nullable=True),
    sa.Column('total', sa.Float(), nullable=True),
    sa.Column('source_file_id', sa.Integer(), nullable=True),
    sa.Column('source_line', sa.Integer(), nullable=True),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_bill_meter_id_meter')),
    sa.ForeignKeyConstraint(['source_file_id'], ['bill_file.id'], name=op.f('fk_bill_source_file_id_bill_file')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_bill')),
    sa.UniqueConstraint('meter_id', 'period_start', 'period_end', name=op.f('uq_bill_meter_id'))
    )


def downgrade() -> None:
    op.drop_table('bill')
    with op.batch_alter_table('bill_file', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_bill_file_sha256'))

    op.drop_table('bill_file')
