"""A data version bumped in every transaction that changes evaluated data, read by the caches.

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-02 17:00:00

"""
import secrets
from collections.abc import Sequence
from datetime import UTC, datetime

import sqlalchemy as sa
from alembic import op

revision: str = '0009'
down_revision: str | Sequence[str] | None = '0008'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    table = op.create_table(
        'data_version',
        sa.Column('id', sa.Integer(), autoincrement=False, nullable=False),
        sa.Column('value', sa.BigInteger(), nullable=False),
        sa.Column('epoch', sa.BigInteger(), nullable=False),
        sa.Column('changed_at', sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint('id = 1', name=op.f('ck_data_version_single_row')),
        sa.PrimaryKeyConstraint('id', name=op.f('pk_data_version')),
    )
    # The one row. Its epoch is drawn here, so a database made again from nothing never shares
    # a version with the one it replaced (a cache keyed on it would serve the old one's data).
    op.bulk_insert(table, [{'id': 1, 'value': 0, 'epoch': secrets.randbits(62), 'changed_at': datetime.now(UTC)}])


def downgrade() -> None:
    op.drop_table('data_version')
