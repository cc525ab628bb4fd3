"""look_check (when any worker last checked a comparison) and worker (heartbeats).

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-03
"""

from alembic import op
import sqlalchemy as sa


revision = '0003'
down_revision = '0002'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        'look_check',
        sa.Column('comparison_name', sa.String(length=200), nullable=False),
        sa.Column('checked_at', sa.DateTime(), nullable=False),
        sa.Column('as_of', sa.DateTime(), nullable=True),
        sa.Column('holder', sa.String(length=200), nullable=True),
        sa.Column('outcome', sa.String(length=20), nullable=False),
        sa.Column('detail', sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint('comparison_name', name=op.f('pk_look_check')),
    )
    op.create_table(
        'worker',
        sa.Column('holder', sa.String(length=200), nullable=False),
        sa.Column('started_at', sa.DateTime(), nullable=False),
        sa.Column('beat_at', sa.DateTime(), nullable=False),
        sa.Column('looked_at', sa.DateTime(), nullable=True),
        sa.Column('stopped_at', sa.DateTime(), nullable=True),
        sa.PrimaryKeyConstraint('holder', name=op.f('pk_worker')),
    )


def downgrade() -> None:
    op.drop_table('worker')
    op.drop_table('look_check')
