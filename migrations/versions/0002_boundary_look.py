"""Look.boundary_look: which looks tested against a boundary (the boundary resumes from them).

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01
"""

from alembic import op
import sqlalchemy as sa


revision = '0002'
down_revision = '0001'
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table('look', schema=None) as batch_op:
        batch_op.add_column(sa.Column('boundary_look', sa.Integer(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('look', schema=None) as batch_op:
        batch_op.drop_column('boundary_look')
