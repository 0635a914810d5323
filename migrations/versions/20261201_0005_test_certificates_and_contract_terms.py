"""Test certificates of delivered units, and each tender's contract terms for factory tests.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-01 22:41:44.951958

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

# revision identifiers, used by Alembic.
revision: str = '0005'
down_revision: str | Sequence[str] | None = '0004'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    """Upgrade schema."""
    op.create_table('test_certificates',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('lot_id', sa.Integer(), nullable=False),
    sa.Column('offer_id', sa.Integer(), nullable=False),
    sa.Column('serial_number', sa.String(length=64), nullable=False),
    sa.Column('test_date', sa.Date(), nullable=False),
    sa.Column('laboratory', sa.String(length=200), nullable=False),
    sa.Column('entered_by', sa.String(length=64), nullable=False),
    sa.Column('entered_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('readings', sa.JSON(), nullable=False),
    sa.Column('no_load_loss_w', sa.Float(), nullable=False),
    sa.Column('load_loss_at_reference_w', sa.Float(), nullable=False),
    sa.Column('impedance_pct', sa.Float(), nullable=False),
    sa.Column('no_load_current_pct', sa.Float(), nullable=False),
    sa.Column('within_tolerance', sa.Boolean(), nullable=False),
    sa.Column('penalty', sa.Float(), nullable=False),
    sa.Column('rejected', sa.Boolean(), nullable=False),
    sa.ForeignKeyConstraint(['lot_id'], ['lots.id'], name=op.f('fk_test_certificates_lot_id_lots'), ondelete='RESTRICT'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_test_certificates')),
    sa.UniqueConstraint('lot_id', 'serial_number', name=op.f('uq_test_certificates_lot_id'))
    )
    with op.batch_alter_table('test_certificates', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_test_certificates_lot_id'), ['lot_id'], unique=False)

    with op.batch_alter_table('tenders', schema=None) as batch_op:
        batch_op.add_column(sa.Column('tolerance_standard', sa.String(length=8), nullable=False, server_default='iec'))
        batch_op.add_column(sa.Column('penalty_multiplier', sa.Float(), nullable=False, server_default='1'))
        batch_op.add_column(sa.Column('penalty_credit_below', sa.Boolean(), nullable=False, server_default=sa.false()))
        batch_op.add_column(sa.Column('reject_beyond_tolerance', sa.Boolean(), nullable=False, server_default=sa.true()))



def downgrade() -> None:
    """Downgrade schema."""
    with op.batch_alter_table('tenders', schema=None) as batch_op:
        batch_op.drop_column('reject_beyond_tolerance')
        batch_op.drop_column('penalty_credit_below')
        batch_op.drop_column('penalty_multiplier')
        batch_op.drop_column('tolerance_standard')

    with op.batch_alter_table('test_certificates', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_test_certificates_lot_id'))

    op.drop_table('test_certificates')
