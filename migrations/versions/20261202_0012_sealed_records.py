"""Append-only protection of the audit trail and evaluation records on both engines, and a
server-key signature beside each record's SHA-256.

- audit_events: besides the row triggers that refuse UPDATE and DELETE, PostgreSQL refuses
  TRUNCATE (a statement-level trigger) and SQLite refuses an INSERT that would replace an
  existing row (INSERT OR REPLACE deletes without firing the DELETE trigger).
- evaluation_records: kept for the record. DELETE and TRUNCATE are refused, and so is any
  UPDATE except the one that reopens a standing award (setting reopened_at, reopened_by and
  reopen_reason once, nothing else).

Revision ID: 0012
Revises: 0011
Create Date: 2026-12-02 17:00:00

"""
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0012'
down_revision: str | Sequence[str] | None = '0011'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# Every column of evaluation_records that no UPDATE may change (the reopen columns may be set once).
_SEALED = ('id', 'lot_id', 'awarded_at', 'awarded_by', 'awarded_offer_id', 'software_version', 'inputs',
           'ranking', 'sha256', 'robustness', 'decision', 'seal_key_id', 'seal_hmac')
_JSON = {'inputs', 'ranking', 'robustness', 'decision'}
_MESSAGE = 'evaluation_records are kept for the record: only a standing award may be reopened, once'


def _changed(engine: str) -> str:
    """A condition true when an UPDATE touches a sealed column or reopens a record twice."""
    if engine == 'postgresql':
        # json has no equality operator: compare its text.
        parts = [f"NEW.{c}::text IS DISTINCT FROM OLD.{c}::text" if c in _JSON else f"NEW.{c} IS DISTINCT FROM OLD.{c}"
                 for c in _SEALED]
    else:
        parts = [f"NEW.{c} IS NOT OLD.{c}" for c in _SEALED]
    return "OLD.reopened_at IS NOT NULL OR " + " OR ".join(parts)


def upgrade() -> None:
    with op.batch_alter_table('evaluation_records', schema=None) as batch_op:
        batch_op.add_column(sa.Column('seal_key_id', sa.String(length=32), nullable=True))
        batch_op.add_column(sa.Column('seal_hmac', sa.String(length=64), nullable=True))

    if op.get_bind().dialect.name == 'postgresql':
        op.execute(
            "CREATE FUNCTION refuse_truncate() RETURNS trigger LANGUAGE plpgsql AS "
            "$$ BEGIN RAISE EXCEPTION '% may not be truncated', TG_TABLE_NAME; END $$"
        )
        for table in ('audit_events', 'evaluation_records'):
            op.execute(f"CREATE TRIGGER {table}_no_truncate BEFORE TRUNCATE ON {table} "
                       "FOR EACH STATEMENT EXECUTE FUNCTION refuse_truncate()")
        op.execute(
            "CREATE FUNCTION evaluation_records_sealed() RETURNS trigger LANGUAGE plpgsql AS $$ BEGIN "
            f"IF TG_OP = 'DELETE' THEN RAISE EXCEPTION '{_MESSAGE}'; END IF; "
            f"IF {_changed('postgresql')} THEN RAISE EXCEPTION '{_MESSAGE}'; END IF; "
            "RETURN NEW; END $$"
        )
        op.execute("CREATE TRIGGER evaluation_records_sealed BEFORE UPDATE OR DELETE ON evaluation_records "
                   "FOR EACH ROW EXECUTE FUNCTION evaluation_records_sealed()")
    else:
        for table in ('audit_events', 'evaluation_records'):
            op.execute(f"CREATE TRIGGER {table}_no_replace BEFORE INSERT ON {table} "
                       f"WHEN EXISTS (SELECT 1 FROM {table} WHERE id = NEW.id) "
                       f"BEGIN SELECT RAISE(ABORT, '{table} rows may not be replaced'); END")
        op.execute(f"CREATE TRIGGER evaluation_records_no_delete BEFORE DELETE ON evaluation_records "
                   f"BEGIN SELECT RAISE(ABORT, '{_MESSAGE}'); END")
        op.execute(f"CREATE TRIGGER evaluation_records_sealed BEFORE UPDATE ON evaluation_records "
                   f"WHEN {_changed('sqlite')} BEGIN SELECT RAISE(ABORT, '{_MESSAGE}'); END")


def downgrade() -> None:
    if op.get_bind().dialect.name == 'postgresql':
        op.execute("DROP TRIGGER IF EXISTS evaluation_records_sealed ON evaluation_records")
        op.execute("DROP FUNCTION IF EXISTS evaluation_records_sealed()")
        for table in ('audit_events', 'evaluation_records'):
            op.execute(f"DROP TRIGGER IF EXISTS {table}_no_truncate ON {table}")
        op.execute("DROP FUNCTION IF EXISTS refuse_truncate()")
    else:
        for name in ('audit_events_no_replace', 'evaluation_records_no_replace', 'evaluation_records_no_delete',
                     'evaluation_records_sealed'):
            op.execute(f"DROP TRIGGER IF EXISTS {name}")

    with op.batch_alter_table('evaluation_records', schema=None) as batch_op:
        batch_op.drop_column('seal_hmac')
        batch_op.drop_column('seal_key_id')
