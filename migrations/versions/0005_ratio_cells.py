"""Cell.sum_den, sum_den2, sum_cross: a ratio comparison's denominator sums and cross-product.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03
"""

from alembic import op
import sqlalchemy as sa


revision = '0005'
down_revision = '0004'
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table('cell', schema=None) as batch_op:
        batch_op.add_column(sa.Column('sum_den', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('sum_den2', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('sum_cross', sa.Float(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('cell', schema=None) as batch_op:
        batch_op.drop_column('sum_cross')
        batch_op.drop_column('sum_den2')
        batch_op.drop_column('sum_den')
