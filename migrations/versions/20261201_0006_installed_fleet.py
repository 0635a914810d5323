"""The installed fleet: units with their losses and loading, staged inventory imports, and
small editable documents such as the typical-loss table.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-01 22:47:03.879059

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# revision identifiers, used by Alembic.
revision: str = '0006'
down_revision: str | Sequence[str] | None = '0005'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Upgrade schema."""
    op.create_table('app_documents',
    sa.Column('key', sa.String(length=64), nullable=False),
    sa.Column('value', sa.JSON(), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_by', sa.String(length=64), nullable=False),
    sa.PrimaryKeyConstraint('key', name=op.f('pk_app_documents'))
    )
    op.create_table('fleet_imports',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('created_by', sa.String(length=64), nullable=False),
    sa.Column('filename', sa.String(length=200), nullable=False),
    sa.Column('content', sa.LargeBinary(), nullable=False),
    sa.Column('summary', sa.JSON(), nullable=False),
    sa.Column('committed_at', sa.DateTime(timezone=True), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_fleet_imports'))
    )
    op.create_table('fleet_units',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('asset_id', sa.String(length=64), nullable=False),
    sa.Column('site', sa.String(length=120), nullable=False),
    sa.Column('region', sa.String(length=120), nullable=False),
    sa.Column('rating_kva', sa.Float(), nullable=False),
    sa.Column('phases', sa.Integer(), nullable=False),
    sa.Column('insulation', sa.String(length=16), nullable=False),
    sa.Column('year_installed', sa.Integer(), nullable=False),
    sa.Column('no_load_loss_w', sa.Float(), nullable=False),
    sa.Column('load_loss_w', sa.Float(), nullable=False),
    sa.Column('no_load_loss_estimated', sa.Boolean(), nullable=False),
    sa.Column('load_loss_estimated', sa.Boolean(), nullable=False),
    sa.Column('peak_load_pu', sa.Float(), nullable=False),
    sa.Column('loss_factor', sa.Float(), nullable=False),
    sa.Column('load_shape_id', sa.Integer(), nullable=True),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['load_shape_id'], ['load_shapes.id'], name=op.f('fk_fleet_units_load_shape_id_load_shapes'), ondelete='SET NULL'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_fleet_units')),
    sa.UniqueConstraint('asset_id', name=op.f('uq_fleet_units_asset_id'))
    )


def downgrade() -> None:
    """Downgrade schema."""
    op.drop_table('fleet_units')
    op.drop_table('fleet_imports')
    op.drop_table('app_documents')
