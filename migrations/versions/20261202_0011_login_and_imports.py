"""Bounded log-in records, atomic failure counts, and commits of staged imports that happen once.

- ``offers.bidder_key``: the bidder as offers are told apart (casefolded, runs of whitespace one
  space), unique with the lot, so that the database itself refuses a second offer of one bidder
  in one lot. Offers already stored twice (a staged import committed twice at once did that)
  are all kept: the oldest of each pair keeps the key and the others have none, which the
  constraint does not compare. Refusing to upgrade would leave a site to delete offers by hand,
  some of them perhaps on awarded lots whose records name them; the duplicates stay visible on
  the lot page, where an open lot's extra copies can be deleted.
- ``login_attempts.username_hash``: SHA-256 of the name as typed, beside the name cut to 64
  characters (SQLite kept any length).
- ``login_counters``: failures per account and per address in the current window, taken by a
  conditional UPDATE before a password is checked.

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-02 17:00:00

"""
import hashlib
import logging
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0011'
down_revision: str | Sequence[str] | None = '0010'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

log = logging.getLogger("alembic.runtime.migration")
_ROWS_PER_BATCH = 500


def _bidder_key(bidder: str) -> str:
    # As server.storage.models.bidder_key does it; copied so that this revision never changes.
    return " ".join(bidder.casefold().split())


def _name_hash(typed: str) -> str:
    return hashlib.sha256(typed.encode("utf-8", "surrogatepass")).hexdigest()


def _fill_bidder_keys(bind) -> None:
    offers = sa.table('offers', sa.column('id', sa.Integer), sa.column('lot_id', sa.Integer),
                      sa.column('bidder', sa.String), sa.column('bidder_key', sa.String))
    seen: set[tuple[int, str]] = set()
    keys, duplicates = [], []
    for offer_id, lot_id, bidder in bind.execute(sa.select(offers.c.id, offers.c.lot_id, offers.c.bidder)
                                                 .order_by(offers.c.id)).all():
        key = _bidder_key(bidder)
        if (lot_id, key) in seen:
            duplicates.append(offer_id)
        else:
            seen.add((lot_id, key))
            keys.append({'offer_id': offer_id, 'key': key})
    if keys:
        bind.execute(sa.update(offers).where(offers.c.id == sa.bindparam('offer_id'))
                     .values(bidder_key=sa.bindparam('key')), keys)
    if duplicates:
        log.warning("%d offers repeat a bidder of their lot and were kept without a bidder key "
                    "(offer ids %s); delete the extra copies on the lot pages.",
                    len(duplicates), ", ".join(map(str, duplicates[:50])) + (" ..." if len(duplicates) > 50 else ""))


def _bound_login_names(bind) -> None:
    attempts = sa.table('login_attempts', sa.column('id', sa.Integer), sa.column('username', sa.String),
                        sa.column('username_hash', sa.String))
    last = 0
    while True:
        # A batch at a time: on SQLite a name could be any length, and such rows are why this runs.
        rows = bind.execute(sa.select(attempts.c.id, attempts.c.username).where(attempts.c.id > last)
                            .order_by(attempts.c.id).limit(_ROWS_PER_BATCH)).all()
        if not rows:
            return
        bind.execute(sa.update(attempts).where(attempts.c.id == sa.bindparam('attempt_id'))
                     .values(username=sa.bindparam('name'), username_hash=sa.bindparam('name_hash')),
                     [{'attempt_id': i, 'name': name[:64], 'name_hash': _name_hash(name)} for i, name in rows])
        last = rows[-1][0]


def upgrade() -> None:
    bind = op.get_bind()
    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.add_column(sa.Column('bidder_key', sa.String(length=360), nullable=True))
    _fill_bidder_keys(bind)
    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.create_unique_constraint(batch_op.f('uq_offers_lot_id'), ['lot_id', 'bidder_key'])

    with op.batch_alter_table('login_attempts', schema=None) as batch_op:
        batch_op.add_column(sa.Column('username_hash', sa.String(length=64), nullable=True))
    _bound_login_names(bind)
    with op.batch_alter_table('login_attempts', schema=None) as batch_op:
        batch_op.alter_column('username_hash', existing_type=sa.String(length=64), nullable=False)

    op.create_table('login_counters',
    sa.Column('key', sa.String(length=80), nullable=False),
    sa.Column('failures', sa.Integer(), nullable=False),
    sa.Column('window_started_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('key', name=op.f('pk_login_counters'))
    )


def downgrade() -> None:
    # Failures are counted from the attempts again, as before this revision; names already cut
    # to 64 characters stay cut.
    op.drop_table('login_counters')

    with op.batch_alter_table('login_attempts', schema=None) as batch_op:
        batch_op.drop_column('username_hash')

    with op.batch_alter_table('offers', schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f('uq_offers_lot_id'), type_='unique')
        batch_op.drop_column('bidder_key')
