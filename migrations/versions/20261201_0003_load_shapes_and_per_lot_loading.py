"""Load shapes, per-lot loading, and who made each cost basis revision.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01 22:14:40.033819

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# revision identifiers, used by Alembic.
revision: str = '0003'
down_revision: str | Sequence[str] | None = '0002'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Upgrade schema."""
    op.create_table('load_shapes',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=120), nullable=False),
    sa.Column('kind', sa.String(length=16), nullable=False),
    sa.Column('unit', sa.String(length=8), nullable=False),
    sa.Column('year', sa.Integer(), nullable=False),
    sa.Column('seasons', sa.JSON(), nullable=True),
    sa.Column('values', sa.JSON(), nullable=False),
    sa.Column('source', sa.String(length=200), nullable=False),
    sa.Column('filled_hours', sa.Integer(), nullable=False),
    sa.Column('peak', sa.Float(), nullable=False),
    sa.Column('load_factor', sa.Float(), nullable=False),
    sa.Column('loss_factor', sa.Float(), nullable=False),
    sa.Column('rms_pu', sa.Float(), nullable=False),
    sa.Column('equivalent_hours', sa.Float(), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_load_shapes')),
    sa.UniqueConstraint('name', name=op.f('uq_load_shapes_name'))
    )
    with op.batch_alter_table('cost_basis_revisions', schema=None) as batch_op:
        batch_op.add_column(sa.Column('created_by', sa.String(length=64), nullable=True))

    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.add_column(sa.Column('load_shape_id', sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column('peak_load_pu', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('load_growth_pct', sa.Float(), nullable=True))
        batch_op.create_index(batch_op.f('ix_lots_load_shape_id'), ['load_shape_id'], unique=False)
        batch_op.create_foreign_key(batch_op.f('fk_lots_load_shape_id_load_shapes'), 'load_shapes', ['load_shape_id'], ['id'], ondelete='RESTRICT')



def downgrade() -> None:
    """Downgrade schema."""
    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f('fk_lots_load_shape_id_load_shapes'), type_='foreignkey')
        batch_op.drop_index(batch_op.f('ix_lots_load_shape_id'))
        batch_op.drop_column('load_growth_pct')
        batch_op.drop_column('peak_load_pu')
        batch_op.drop_column('load_shape_id')

    with op.batch_alter_table('cost_basis_revisions', schema=None) as batch_op:
        batch_op.drop_column('created_by')

    op.drop_table('load_shapes')
