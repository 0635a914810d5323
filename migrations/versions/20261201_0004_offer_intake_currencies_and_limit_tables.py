"""Offer intake: staged imports, offer currencies, exchange rates, limit tables per lot.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-01 22:21:42.083768

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# revision identifiers, used by Alembic.
revision: str = '0004'
down_revision: str | Sequence[str] | None = '0003'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Upgrade schema."""
    op.create_table('limit_tables',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('key', sa.String(length=64), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('source', sa.String(length=300), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('kind', sa.String(length=16), nullable=False),
    sa.Column('phases', sa.Integer(), nullable=True),
    sa.Column('insulation', sa.String(length=16), nullable=True),
    sa.Column('per_unit_load', sa.Float(), nullable=False),
    sa.Column('rows', sa.JSON(), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_limit_tables')),
    sa.UniqueConstraint('key', name=op.f('uq_limit_tables_key'))
    )
    op.create_table('limit_table_reviews',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('key', sa.String(length=64), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('note', sa.Text(), nullable=False),
    sa.Column('reviewed_by', sa.String(length=64), nullable=False),
    sa.Column('reviewed_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_limit_table_reviews'))
    )
    with op.batch_alter_table('limit_table_reviews', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_limit_table_reviews_key'), ['key'], unique=False)

    op.create_table('offer_imports',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('tender_id', sa.Integer(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('created_by', sa.String(length=64), nullable=False),
    sa.Column('filename', sa.String(length=200), nullable=False),
    sa.Column('rows', sa.JSON(), nullable=False),
    sa.Column('committed_at', sa.DateTime(timezone=True), nullable=True),
    sa.ForeignKeyConstraint(['tender_id'], ['tenders.id'], name=op.f('fk_offer_imports_tender_id_tenders'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_offer_imports'))
    )
    with op.batch_alter_table('offer_imports', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_offer_imports_tender_id'), ['tender_id'], unique=False)

    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.add_column(sa.Column('limit_tables', sa.JSON(), nullable=False, server_default='[]'))

    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.add_column(sa.Column('currency', sa.String(length=3), nullable=True))

    with op.batch_alter_table('tenders', schema=None) as batch_op:
        batch_op.add_column(sa.Column('bid_opening_date', sa.Date(), nullable=True))
        batch_op.add_column(sa.Column('exchange_rates', sa.JSON(), nullable=False, server_default='{}'))



def downgrade() -> None:
    """Downgrade schema."""
    with op.batch_alter_table('tenders', schema=None) as batch_op:
        batch_op.drop_column('exchange_rates')
        batch_op.drop_column('bid_opening_date')

    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.drop_column('currency')

    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.drop_column('limit_tables')

    with op.batch_alter_table('offer_imports', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_offer_imports_tender_id'))

    op.drop_table('offer_imports')
    with op.batch_alter_table('limit_table_reviews', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_limit_table_reviews_key'))

    op.drop_table('limit_table_reviews')
    op.drop_table('limit_tables')
