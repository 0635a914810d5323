"""Defensible awards: the award decision, a lot's own revision while awarded, the lot's conductor
and insulation level, each offer's I2R share, a reason for each cost basis revision, reviews of
each built-in rule against a named document, and no penalty on rejected units.

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-02 15:20:00

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0008'
down_revision: str | Sequence[str] | None = '0007'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# Reviews used to name a family of built-in tables; each table now has an id of its own.
# A review of a family carries over to every table of that family as it stood then.
_FAMILIES = {
    'doe-2016': ('doe-2016-liquid-1ph', 'doe-2016-liquid-3ph', 'doe-2016-lv-dry-3ph'),
    'doe-2029': ('doe-2029-liquid-3ph',),
    'eu-tier-1': ('eu-tier-1-liquid', 'eu-tier-1-dry', 'eu-tier-1-large-liquid'),
    'eu-tier-2': ('eu-tier-2-liquid', 'eu-tier-2-dry', 'eu-tier-2-large-liquid'),
}


def upgrade() -> None:
    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.add_column(sa.Column('conductor_material', sa.String(length=16), server_default='copper',
                                      nullable=False))
        batch_op.add_column(sa.Column('bil_kv', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('cost_basis_revision_id', sa.Integer(), nullable=True))
        batch_op.create_index(batch_op.f('ix_lots_cost_basis_revision_id'), ['cost_basis_revision_id'], unique=False)
        batch_op.create_foreign_key(batch_op.f('fk_lots_cost_basis_revision_id_cost_basis_revisions'),
                                    'cost_basis_revisions', ['cost_basis_revision_id'], ['id'], ondelete='RESTRICT')

    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.add_column(sa.Column('i2r_share_pct', sa.Float(), nullable=True))

    with op.batch_alter_table('evaluation_records', schema=None) as batch_op:
        batch_op.add_column(sa.Column('decision', sa.JSON(), nullable=True))

    with op.batch_alter_table('cost_basis_revisions', schema=None) as batch_op:
        batch_op.add_column(sa.Column('change_reason', sa.Text(), nullable=True))

    with op.batch_alter_table('limit_table_reviews', schema=None) as batch_op:
        batch_op.add_column(sa.Column('document', sa.String(length=300), server_default='', nullable=False))

    bind = op.get_bind()
    reviews = sa.table('limit_table_reviews', sa.column('id', sa.Integer), sa.column('key', sa.String),
                       sa.column('status', sa.String), sa.column('note', sa.Text),
                       sa.column('reviewed_by', sa.String), sa.column('reviewed_at', sa.DateTime(timezone=True)),
                       sa.column('document', sa.String))
    old = bind.execute(sa.select(reviews.c.key, reviews.c.status, reviews.c.note, reviews.c.reviewed_by,
                                 reviews.c.reviewed_at).where(reviews.c.key.in_(list(_FAMILIES)))
                       .order_by(reviews.c.id)).all()
    rows = [{'key': table_id, 'status': r.status, 'note': r.note, 'reviewed_by': r.reviewed_by,
             'reviewed_at': r.reviewed_at, 'document': ''}
            for r in old for table_id in _FAMILIES[r.key]]
    if rows:
        op.bulk_insert(reviews, rows)

    # A unit rejected at the factory is sent back: it carries no loss penalty.
    certificates = sa.table('test_certificates', sa.column('penalty', sa.Float), sa.column('rejected', sa.Boolean))
    bind.execute(sa.update(certificates).where(certificates.c.rejected.is_(True)).values(penalty=0.0))

    # A lot awarded before this revision keeps the revision its award froze.
    lots = sa.table('lots', sa.column('id', sa.Integer), sa.column('tender_id', sa.Integer),
                    sa.column('cost_basis_revision_id', sa.Integer))
    tenders = sa.table('tenders', sa.column('id', sa.Integer), sa.column('cost_basis_revision_id', sa.Integer))
    records = sa.table('evaluation_records', sa.column('lot_id', sa.Integer),
                       sa.column('reopened_at', sa.DateTime(timezone=True)))
    standing = sa.select(records.c.lot_id).where(records.c.reopened_at.is_(None))
    tender_revision = (sa.select(tenders.c.cost_basis_revision_id)
                       .where(tenders.c.id == lots.c.tender_id).scalar_subquery())
    bind.execute(sa.update(lots).where(lots.c.id.in_(standing)).values(cost_basis_revision_id=tender_revision))


def downgrade() -> None:
    with op.batch_alter_table('limit_table_reviews', schema=None) as batch_op:
        batch_op.drop_column('document')

    with op.batch_alter_table('cost_basis_revisions', schema=None) as batch_op:
        batch_op.drop_column('change_reason')

    with op.batch_alter_table('evaluation_records', schema=None) as batch_op:
        batch_op.drop_column('decision')

    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.drop_column('i2r_share_pct')

    with op.batch_alter_table('lots', schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f('fk_lots_cost_basis_revision_id_cost_basis_revisions'),
                                 type_='foreignkey')
        batch_op.drop_index(batch_op.f('ix_lots_cost_basis_revision_id'))
        batch_op.drop_column('cost_basis_revision_id')
        batch_op.drop_column('bil_kv')
        batch_op.drop_column('conductor_material')
