"""initial schema

Revision ID: 0001
Revises:
Create Date: 2026-12-01 21:41:41.337360
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0001'
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('import_batch',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('file_name', sa.String(length=500), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False),
    sa.Column('format', sa.String(length=32), nullable=False),
    sa.Column('rows_accepted', sa.Integer(), nullable=False),
    sa.Column('rows_rejected', sa.Integer(), nullable=False),
    sa.Column('rows_revised', sa.Integer(), nullable=False),
    sa.Column('started_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('finished_at', sa.DateTime(timezone=True), nullable=True),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('errors', sa.Text(), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_import_batch'))
    )
    with op.batch_alter_table('import_batch', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_import_batch_sha256'), ['sha256'], unique=False)

    op.create_table('site',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('timezone', sa.String(length=64), nullable=False),
    sa.Column('nominal_voltage_v', sa.Float(), nullable=True),
    sa.Column('transformer_kva', sa.Float(), nullable=True),
    sa.Column('transformer_impedance_percent', sa.Float(), nullable=True),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_site')),
    sa.UniqueConstraint('name', name=op.f('uq_site_name'))
    )
    op.create_table('meter',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('site_id', sa.Integer(), nullable=False),
    sa.Column('external_id', sa.String(length=200), nullable=False),
    sa.Column('multiplier', sa.Float(), nullable=False),
    sa.Column('interval_minutes', sa.SmallInteger(), nullable=True),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['site_id'], ['site.id'], name=op.f('fk_meter_site_id_site')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_meter')),
    sa.UniqueConstraint('external_id', name=op.f('uq_meter_external_id'))
    )
    op.create_table('channel',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('quantity', sa.String(length=32), nullable=False),
    sa.Column('source_unit', sa.String(length=16), nullable=False),
    sa.Column('first_batch_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['first_batch_id'], ['import_batch.id'], name=op.f('fk_channel_first_batch_id_import_batch')),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_channel_meter_id_meter')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_channel')),
    sa.UniqueConstraint('meter_id', 'quantity', name=op.f('uq_channel_meter_id'))
    )
    op.create_table('quality_flag',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('batch_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=16), nullable=False),
    sa.Column('start', sa.BigInteger(), nullable=False),
    sa.Column('end', sa.BigInteger(), nullable=False),
    sa.Column('intervals', sa.Integer(), nullable=False),
    sa.Column('detail', sa.Text(), nullable=True),
    sa.ForeignKeyConstraint(['batch_id'], ['import_batch.id'], name=op.f('fk_quality_flag_batch_id_import_batch')),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_quality_flag_meter_id_meter')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_quality_flag'))
    )
    with op.batch_alter_table('quality_flag', schema=None) as batch_op:
        batch_op.create_index('ix_quality_flag_meter', ['meter_id', 'start'], unique=False)

    op.create_table('reading',
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('start', sa.BigInteger(), nullable=False),
    sa.Column('kwh', sa.Float(), nullable=True),
    sa.Column('kvarh_lag', sa.Float(), nullable=True),
    sa.Column('kvarh_lead', sa.Float(), nullable=True),
    sa.Column('kwh_received', sa.Float(), nullable=True),
    sa.Column('flags', sa.SmallInteger(), nullable=False),
    sa.Column('batch_id', sa.Integer(), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_reading_meter_id_meter')),
    sa.PrimaryKeyConstraint('meter_id', 'start', name=op.f('pk_reading')),
    sqlite_with_rowid=False
    )
    op.create_table('reading_revision',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('meter_id', sa.Integer(), nullable=False),
    sa.Column('start', sa.BigInteger(), nullable=False),
    sa.Column('kwh', sa.Float(), nullable=True),
    sa.Column('kvarh_lag', sa.Float(), nullable=True),
    sa.Column('kvarh_lead', sa.Float(), nullable=True),
    sa.Column('kwh_received', sa.Float(), nullable=True),
    sa.Column('flags', sa.SmallInteger(), nullable=False),
    sa.Column('batch_id', sa.Integer(), nullable=False),
    sa.Column('superseded_by', sa.Integer(), nullable=False),
    sa.ForeignKeyConstraint(['meter_id'], ['meter.id'], name=op.f('fk_reading_revision_meter_id_meter')),
    sa.ForeignKeyConstraint(['superseded_by'], ['import_batch.id'], name=op.f('fk_reading_revision_superseded_by_import_batch')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_reading_revision'))
    )
    with op.batch_alter_table('reading_revision', schema=None) as batch_op:
        batch_op.create_index('ix_reading_revision_meter_start', ['meter_id', 'start'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('reading_revision', schema=None) as batch_op:
        batch_op.drop_index('ix_reading_revision_meter_start')

    op.drop_table('reading_revision')
    op.drop_table('reading')
    with op.batch_alter_table('quality_flag', schema=None) as batch_op:
        batch_op.drop_index('ix_quality_flag_meter')

    op.drop_table('quality_flag')
    op.drop_table('channel')
    op.drop_table('meter')
    op.drop_table('site')
    with op.batch_alter_table('import_batch', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_import_batch_sha256'))

    op.drop_table('import_batch')
