"""plan_change: replans and restarts made by hand, with who, when, why and the figures used;
comparison.replans, the count a look guards its write on.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03
"""

from alembic import op
import sqlalchemy as sa


revision = '0004'
down_revision = '0003'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('plan_change',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('comparison_id', sa.Integer(), nullable=False),
    sa.Column('number', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=20), nullable=False),
    sa.Column('made_at', sa.DateTime(), nullable=False),
    sa.Column('made_by', sa.String(length=200), nullable=False),
    sa.Column('reason', sa.Text(), nullable=False),
    sa.Column('after_look', sa.Integer(), nullable=False),
    sa.Column('old_plan', sa.JSON(), nullable=True),
    sa.Column('new_plan', sa.JSON(), nullable=True),
    sa.Column('record', sa.JSON(), nullable=False),
    sa.ForeignKeyConstraint(['comparison_id'], ['comparison.id'],
                            name=op.f('fk_plan_change_comparison_id_comparison'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_plan_change')),
    sa.UniqueConstraint('comparison_id', 'number', name=op.f('uq_plan_change_comparison_id'))
    )
    with op.batch_alter_table('plan_change', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_plan_change_comparison_id'), ['comparison_id'], unique=False)
    with op.batch_alter_table('comparison', schema=None) as batch_op:
        batch_op.add_column(sa.Column('replans', sa.Integer(), server_default='0', nullable=False))


def downgrade() -> None:
    with op.batch_alter_table('comparison', schema=None) as batch_op:
        batch_op.drop_column('replans')
    with op.batch_alter_table('plan_change', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_plan_change_comparison_id'))
    op.drop_table('plan_change')
