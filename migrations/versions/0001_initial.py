"""Initial schema: comparisons, looks, cells, alerts, deliveries, leases, source health.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

from alembic import op
import sqlalchemy as sa


revision = '0001'
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('comparison',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('design', sa.JSON(), nullable=False),
    sa.Column('design_hash', sa.String(length=64), nullable=False),
    sa.Column('settings', sa.JSON(), nullable=False),
    sa.Column('state', sa.String(length=40), nullable=False),
    sa.Column('looks_taken', sa.Integer(), nullable=False),
    sa.Column('watermark', sa.JSON(), nullable=True),
    sa.Column('created_at', sa.DateTime(), nullable=False),
    sa.Column('last_look_at', sa.DateTime(), nullable=True),
    sa.Column('stopped_at', sa.DateTime(), nullable=True),
    sa.Column('archived', sa.Boolean(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_comparison')),
    sa.UniqueConstraint('name', 'version', name=op.f('uq_comparison_name'))
    )
    with op.batch_alter_table('comparison', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_comparison_name'), ['name'], unique=False)

    op.create_table('lease',
    sa.Column('comparison_name', sa.String(length=200), nullable=False),
    sa.Column('holder', sa.String(length=200), nullable=False),
    sa.Column('expires_at', sa.DateTime(), nullable=False),
    sa.PrimaryKeyConstraint('comparison_name', name=op.f('pk_lease'))
    )
    op.create_table('source_health',
    sa.Column('comparison_name', sa.String(length=200), nullable=False),
    sa.Column('failing_since', sa.DateTime(), nullable=True),
    sa.Column('failures', sa.Integer(), nullable=False),
    sa.Column('last_error', sa.Text(), nullable=True),
    sa.Column('last_attempt_at', sa.DateTime(), nullable=True),
    sa.Column('alerted', sa.Boolean(), nullable=False),
    sa.PrimaryKeyConstraint('comparison_name', name=op.f('pk_source_health'))
    )
    op.create_table('cell',
    sa.Column('comparison_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=16), nullable=False),
    sa.Column('group_index', sa.Integer(), nullable=False),
    sa.Column('key', sa.String(length=200), nullable=False),
    sa.Column('n', sa.Integer(), nullable=False),
    sa.Column('sum_dev', sa.Float(), nullable=False),
    sa.Column('sum_dev2', sa.Float(), nullable=False),
    sa.ForeignKeyConstraint(['comparison_id'], ['comparison.id'], name=op.f('fk_cell_comparison_id_comparison'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('comparison_id', 'kind', 'group_index', 'key', name=op.f('pk_cell'))
    )
    op.create_table('look',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('comparison_id', sa.Integer(), nullable=False),
    sa.Column('look_number', sa.Integer(), nullable=False),
    sa.Column('as_of', sa.DateTime(), nullable=False),
    sa.Column('cutoff', sa.DateTime(), nullable=False),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('arrival_watermark', sa.String(length=100), nullable=True),
    sa.Column('n1', sa.Integer(), nullable=False),
    sa.Column('n2', sa.Integer(), nullable=False),
    sa.Column('mean1', sa.Float(), nullable=True),
    sa.Column('mean2', sa.Float(), nullable=True),
    sa.Column('sd1', sa.Float(), nullable=True),
    sa.Column('sd2', sa.Float(), nullable=True),
    sa.Column('pairs', sa.Integer(), nullable=True),
    sa.Column('new_events', sa.Integer(), nullable=False),
    sa.Column('late_events', sa.Integer(), nullable=False),
    sa.Column('excluded', sa.JSON(), nullable=False),
    sa.Column('estimate', sa.Float(), nullable=True),
    sa.Column('standard_error', sa.Float(), nullable=True),
    sa.Column('statistic', sa.Float(), nullable=True),
    sa.Column('df', sa.Float(), nullable=True),
    sa.Column('p_value', sa.Float(), nullable=True),
    sa.Column('information', sa.Float(), nullable=True),
    sa.Column('fraction', sa.Float(), nullable=True),
    sa.Column('boundary_z', sa.Float(), nullable=True),
    sa.Column('futility_z', sa.Float(), nullable=True),
    sa.Column('nominal_p', sa.Float(), nullable=True),
    sa.Column('cumulative_alpha', sa.Float(), nullable=True),
    sa.Column('ci_low', sa.Float(), nullable=True),
    sa.Column('ci_high', sa.Float(), nullable=True),
    sa.Column('clusters', sa.Integer(), nullable=True),
    sa.Column('design_effect', sa.Float(), nullable=True),
    sa.Column('effective_n', sa.Float(), nullable=True),
    sa.Column('decision', sa.String(length=40), nullable=False),
    sa.Column('warnings', sa.JSON(), nullable=False),
    sa.Column('detail', sa.JSON(), nullable=False),
    sa.Column('duration_ms', sa.Float(), nullable=True),
    sa.ForeignKeyConstraint(['comparison_id'], ['comparison.id'], name=op.f('fk_look_comparison_id_comparison'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_look')),
    sa.UniqueConstraint('comparison_id', 'look_number', name=op.f('uq_look_comparison_id'))
    )
    with op.batch_alter_table('look', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_look_comparison_id'), ['comparison_id'], unique=False)

    op.create_table('alert',
    sa.Column('id', sa.String(length=36), nullable=False),
    sa.Column('comparison_id', sa.Integer(), nullable=True),
    sa.Column('comparison_name', sa.String(length=200), nullable=False),
    sa.Column('look_id', sa.Integer(), nullable=True),
    sa.Column('kind', sa.String(length=40), nullable=False),
    sa.Column('created_at', sa.DateTime(), nullable=False),
    sa.Column('payload', sa.JSON(), nullable=False),
    sa.Column('state', sa.String(length=20), nullable=False),
    sa.Column('acknowledged_at', sa.DateTime(), nullable=True),
    sa.Column('acknowledged_by', sa.String(length=200), nullable=True),
    sa.ForeignKeyConstraint(['comparison_id'], ['comparison.id'], name=op.f('fk_alert_comparison_id_comparison'), ondelete='CASCADE'),
    sa.ForeignKeyConstraint(['look_id'], ['look.id'], name=op.f('fk_alert_look_id_look'), ondelete='SET NULL'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_alert'))
    )
    with op.batch_alter_table('alert', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_alert_comparison_id'), ['comparison_id'], unique=False)
        batch_op.create_index('ix_alert_state_created', ['state', 'created_at'], unique=False)

    op.create_table('delivery',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('alert_id', sa.String(length=36), nullable=False),
    sa.Column('channel', sa.String(length=100), nullable=False),
    sa.Column('state', sa.String(length=20), nullable=False),
    sa.Column('attempts', sa.Integer(), nullable=False),
    sa.Column('next_attempt_at', sa.DateTime(), nullable=False),
    sa.Column('last_error', sa.Text(), nullable=True),
    sa.Column('delivered_at', sa.DateTime(), nullable=True),
    sa.ForeignKeyConstraint(['alert_id'], ['alert.id'], name=op.f('fk_delivery_alert_id_alert'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_delivery')),
    sa.UniqueConstraint('alert_id', 'channel', name=op.f('uq_delivery_alert_id'))
    )
    with op.batch_alter_table('delivery', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_delivery_alert_id'), ['alert_id'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('delivery', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_delivery_alert_id'))

    op.drop_table('delivery')
    with op.batch_alter_table('alert', schema=None) as batch_op:
        batch_op.drop_index('ix_alert_state_created')
        batch_op.drop_index(batch_op.f('ix_alert_comparison_id'))

    op.drop_table('alert')
    with op.batch_alter_table('look', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_look_comparison_id'))

    op.drop_table('look')
    op.drop_table('cell')
    op.drop_table('source_health')
    op.drop_table('lease')
    with op.batch_alter_table('comparison', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_comparison_name'))

    op.drop_table('comparison')
