"""Monte Carlo runs of a lot, and the robustness kept with each evaluation record.

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-01 23:05:55.045319

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# revision identifiers, used by Alembic.
revision: str = '0007'
down_revision: str | Sequence[str] | None = '0006'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Upgrade schema."""
    op.create_table('monte_carlo_runs',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('lot_id', sa.Integer(), nullable=False),
    sa.Column('created_by', sa.String(length=64), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('progress', sa.Float(), nullable=False),
    sa.Column('cancel_requested', sa.Boolean(), nullable=False),
    sa.Column('request', sa.JSON(), nullable=False),
    sa.Column('result', sa.JSON(), nullable=True),
    sa.Column('message', sa.Text(), nullable=False),
    sa.ForeignKeyConstraint(['lot_id'], ['lots.id'], name=op.f('fk_monte_carlo_runs_lot_id_lots'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_monte_carlo_runs'))
    )
    with op.batch_alter_table('monte_carlo_runs', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_monte_carlo_runs_lot_id'), ['lot_id'], unique=False)

    with op.batch_alter_table('evaluation_records', schema=None) as batch_op:
        batch_op.add_column(sa.Column('robustness', sa.JSON(), nullable=True))



def downgrade() -> None:
    """Downgrade schema."""
    with op.batch_alter_table('evaluation_records', schema=None) as batch_op:
        batch_op.drop_column('robustness')

    with op.batch_alter_table('monte_carlo_runs', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_monte_carlo_runs_lot_id'))

    op.drop_table('monte_carlo_runs')
