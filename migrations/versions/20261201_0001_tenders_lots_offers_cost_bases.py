"""Cost bases with revisions, tenders, lots and offers.

Revision ID: 0001
Revises:
Create Date: 2026-12-01 21:54:06.452977

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# revision identifiers, used by Alembic.
revision: str = '0001'
down_revision: str | Sequence[str] | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Upgrade schema."""
    op.create_table('cost_bases',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=120), nullable=False),
    sa.Column('currency', sa.String(length=3), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_cost_bases')),
    sa.UniqueConstraint('name', name=op.f('uq_cost_bases_name'))
    )
    op.create_table('cost_basis_revisions',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('cost_basis_id', sa.Integer(), nullable=False),
    sa.Column('revision', sa.Integer(), nullable=False),
    sa.Column('method', sa.String(length=32), nullable=False),
    sa.Column('inputs', sa.JSON(), nullable=False),
    sa.Column('no_load_rate_per_kw', sa.Float(), nullable=False),
    sa.Column('load_rate_per_kw', sa.Float(), nullable=False),
    sa.Column('aux_rate_per_kw', sa.Float(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['cost_basis_id'], ['cost_bases.id'], name=op.f('fk_cost_basis_revisions_cost_basis_id_cost_bases'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_cost_basis_revisions')),
    sa.UniqueConstraint('cost_basis_id', 'revision', name=op.f('uq_cost_basis_revisions_cost_basis_id'))
    )
    op.create_table('tenders',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('reference', sa.String(length=64), nullable=False),
    sa.Column('title', sa.String(length=200), nullable=False),
    sa.Column('currency', sa.String(length=3), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('cost_basis_revision_id', sa.Integer(), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['cost_basis_revision_id'], ['cost_basis_revisions.id'], name=op.f('fk_tenders_cost_basis_revision_id_cost_basis_revisions'), ondelete='RESTRICT'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_tenders')),
    sa.UniqueConstraint('reference', name=op.f('uq_tenders_reference'))
    )
    op.create_table('lots',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('tender_id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=120), nullable=False),
    sa.Column('rating_kva', sa.Float(), nullable=False),
    sa.Column('phases', sa.Integer(), nullable=False),
    sa.Column('hv_kv', sa.Float(), nullable=False),
    sa.Column('lv_kv', sa.Float(), nullable=False),
    sa.Column('frequency_hz', sa.Float(), nullable=False),
    sa.Column('insulation', sa.String(length=16), nullable=False),
    sa.Column('quantity', sa.Integer(), nullable=False),
    sa.Column('reference_temp_c', sa.Float(), nullable=False),
    sa.Column('max_no_load_loss_w', sa.Float(), nullable=True),
    sa.Column('max_load_loss_w', sa.Float(), nullable=True),
    sa.Column('impedance_pct', sa.Float(), nullable=True),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['tender_id'], ['tenders.id'], name=op.f('fk_lots_tender_id_tenders'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_lots'))
    )
    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_lots_tender_id'), ['tender_id'], unique=False)

    op.create_table('offers',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('lot_id', sa.Integer(), nullable=False),
    sa.Column('bidder', sa.String(length=120), nullable=False),
    sa.Column('unit_price', sa.Float(), nullable=False),
    sa.Column('no_load_loss_w', sa.Float(), nullable=False),
    sa.Column('load_loss_w', sa.Float(), nullable=False),
    sa.Column('aux_loss_w', sa.Float(), nullable=False),
    sa.Column('impedance_pct', sa.Float(), nullable=False),
    sa.Column('no_load_current_pct', sa.Float(), nullable=True),
    sa.Column('delivery_weeks', sa.Integer(), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['lot_id'], ['lots.id'], name=op.f('fk_offers_lot_id_lots'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_offers'))
    )
    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_offers_lot_id'), ['lot_id'], unique=False)



def downgrade() -> None:
    """Downgrade schema."""
    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_offers_lot_id'))

    op.drop_table('offers')
    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_lots_tender_id'))

    op.drop_table('lots')
    op.drop_table('tenders')
    op.drop_table('cost_basis_revisions')
    op.drop_table('cost_bases')
