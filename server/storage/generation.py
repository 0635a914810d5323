"""The data version: one number that moves with every committed change of evaluated data.

Every transaction that changes anything a ranking or page shows runs ``bump`` once, inside the
transaction: an UPDATE of the single ``data_version`` row. The UPDATE takes that row's lock, so
concurrent writers take turns on it and the value a reader sees is the one the last *committed*
change wrote. The version therefore orders changes by commit, as an id drawn at INSERT does
not (a transaction that drew a smaller id may commit after a reader saw a larger one). Caches
key on it and never serve data older than the last committed change.

Security events (log-ins, log-outs, lock-outs, tokens) change no evaluated data and leave it
alone (``server.storage.audit.SECURITY_ACTIONS``), so signing in keeps every cache warm.
"""

from __future__ import annotations

import secrets
from collections import OrderedDict
from collections.abc import Callable, Hashable
from threading import Event, Lock
from typing import Any, TypeVar

from sqlalchemy import URL, DateTime, Select, bindparam, event, select, text
from sqlalchemy.orm import Session, SessionTransaction

from server.storage.models import DataVersion, utcnow

T = TypeVar("T")

# The id of the one row (the table's check constraint allows no other).
ROW_ID = 1
# What a database without the row reads as (emptied by hand; the next bump makes it again).
NO_VERSION = (0, 0)

# Where a request's session keeps the version it read with the user's session (see remember),
# and whether the current transaction has moved the version already (see bump).
_KEY = "data_version"
_BUMPED = "data_version_bumped"

# Upsert rather than UPDATE: a row deleted by hand (a test emptying every table) is made again,
# with a new epoch, instead of leaving the version frozen. Same text on SQLite and PostgreSQL;
# on a conflict it is the UPDATE, row lock included.
_BUMP = text(
    "INSERT INTO data_version (id, value, epoch, changed_at) VALUES (:id, 1, :epoch, :now) "
    "ON CONFLICT (id) DO UPDATE SET value = data_version.value + 1, changed_at = excluded.changed_at"
).bindparams(bindparam("id", ROW_ID), bindparam("now", type_=DateTime(timezone=True)))

_VERSION_COLUMNS = (DataVersion.value.label("data_version"), DataVersion.epoch.label("data_epoch"))
_READ = select(*_VERSION_COLUMNS).where(DataVersion.id == ROW_ID)


def with_data_version(statement: Select) -> Select:
    """``statement`` reading the data version along, as columns labelled ``data_version`` and
    ``data_epoch`` (``version_of`` takes the row). An outer join: a missing row reads as none."""
    return statement.add_columns(*_VERSION_COLUMNS).outerjoin(DataVersion, DataVersion.id == ROW_ID)


def version_of(row: Any) -> tuple[int, int]:
    """The cache key part of a row read with ``with_data_version`` (by column name, from a
    SQLAlchemy row or ``Database.read_row``'s): epoch and value."""
    if row.data_version is None:
        return NO_VERSION
    return row.data_epoch, row.data_version


def bump(session: Session) -> None:
    """Move the data version inside the session's transaction, once however often it is called.

    Call it before a change is written: the row lock is then taken before the changed rows'
    own locks, in every writer, so two writers of the same rows queue rather than deadlock.
    The audit hooks (``server.storage.audit``) call it for every change of an audited record
    and every event that is not a security event; a write that bypasses the ORM must call it
    itself.
    """
    if session.info.get(_BUMPED):
        return
    session.connection().execute(_BUMP, {"epoch": secrets.randbits(62), "now": utcnow()})
    session.info[_BUMPED] = True


@event.listens_for(Session, "after_transaction_end")
def _forget_bump(session: Session, transaction: SessionTransaction) -> None:
    # The transaction's end (commit, rollback or close) or a savepoint's: bumping again after a
    # savepoint costs one statement, trusting a rolled-back one's bump would lose it. Not the
    # inner transaction every flush opens and closes, which would bump once per flush.
    if transaction.parent is None or transaction.nested:
        session.info.pop(_BUMPED, None)


def remember(session: Session, value: tuple) -> None:
    """Keep a version read earlier in this request for the session's reads; any flush,
    commit or rollback forgets it, so a change made here is never hidden."""
    session.info[_KEY] = value


def remembered(session: Session) -> tuple | None:
    return session.info.get(_KEY)


@event.listens_for(Session, "after_flush")
@event.listens_for(Session, "after_commit")
@event.listens_for(Session, "after_soft_rollback")
def _forget(session: Session, *_args) -> None:
    session.info.pop(_KEY, None)


def data_version(session: Session) -> tuple[int, int]:
    """The data version as the caches key it: the remembered one, else read now."""
    known = remembered(session)
    if known is not None:
        return known
    row = session.execute(_READ).first()
    return version_of(row) if row else NO_VERSION


def database_key(url: URL) -> str:
    """Which database a cached result came from, as the caches key it."""
    return url.render_as_string(hide_password=False)


class GenerationCache:
    """A small per-process LRU of computed results keyed by (database, data version, key)."""

    def __init__(self, size: int = 256) -> None:
        self.size = size
        self.entries: OrderedDict[Hashable, object] = OrderedDict()
        self.computing: dict[Hashable, Event] = {}
        self.lock = Lock()

    def get_or_compute(self, session: Session, key: Hashable, compute: Callable[[], T]) -> T:
        """The cached result, or ``compute()`` stored for this version. Requests that miss the
        same key at the same time wait for the first one's result instead of computing it again."""
        full_key = self._full_key(session, data_version(session), key)
        while True:
            with self.lock:
                if full_key in self.entries:
                    self.entries.move_to_end(full_key)
                    return self.entries[full_key]  # type: ignore[return-value]
                running = self.computing.get(full_key)
                if running is None:
                    running = self.computing[full_key] = Event()
                    break
            running.wait()  # then take its result, or compute if it failed
        try:
            value = compute()
            with self.lock:
                self.entries[full_key] = value
                while len(self.entries) > self.size:
                    self.entries.popitem(last=False)
            return value
        finally:
            with self.lock:
                del self.computing[full_key]
            running.set()

    def peek(self, database: str, version: tuple, key: Hashable) -> object | None:
        """The result cached for a version already known (read with the user's session), or
        None; never touches the database, so it may run on the event loop. ``database`` is
        ``database_key`` of the engine's URL."""
        full_key = (database, version, key)
        with self.lock:
            if full_key in self.entries:
                self.entries.move_to_end(full_key)
                return self.entries[full_key]
        return None

    @staticmethod
    def _full_key(session: Session, version: tuple, key: Hashable) -> tuple:
        # The database is part of the key: one process may serve (or test) several.
        return database_key(session.get_bind().url), version, key

    def clear(self) -> None:
        with self.lock:
            self.entries.clear()
