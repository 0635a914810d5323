"""The data generation: the newest audit event's id.

Every change the application makes writes an audit event in the same transaction, so this
number moves whenever anything a page or ranking shows may have changed. Caches key on it
and never serve data older than the last committed change.
"""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Callable, Hashable
from datetime import datetime
from threading import Event, Lock
from typing import TypeVar

from sqlalchemy import URL, event, select
from sqlalchemy.orm import Session

from server.storage.models import AuditEvent

T = TypeVar("T")


# Where a request's session keeps the generation it read with the user's session (see remember).
_KEY = "data_generation"


_NEWEST = select(AuditEvent.id, AuditEvent.at).order_by(AuditEvent.id.desc()).limit(1)


def generation_columns() -> tuple:
    """The newest audit event's id and time as scalar subqueries, to read along with other columns."""
    return (_NEWEST.with_only_columns(AuditEvent.id).scalar_subquery(),
            _NEWEST.with_only_columns(AuditEvent.at).scalar_subquery())


def generation_value(newest_id: int | None, newest_at: object) -> tuple:
    """The generation from the two values ``generation_columns`` read, as SQLAlchemy or the
    driver gives them (SQLite's driver hands back the stored text of the time)."""
    if newest_id is None:
        return 0, ""
    if isinstance(newest_at, str):
        newest_at = datetime.fromisoformat(newest_at)
    return newest_id, str(newest_at)


def remember(session: Session, value: tuple) -> None:
    """Keep a generation read earlier in this request for the session's reads; any flush,
    commit or rollback forgets it, so a change made here is never hidden."""
    session.info[_KEY] = value


def remembered(session: Session) -> tuple | None:
    return session.info.get(_KEY)


@event.listens_for(Session, "after_flush")
@event.listens_for(Session, "after_commit")
@event.listens_for(Session, "after_soft_rollback")
def _forget(session: Session, *_args) -> None:
    session.info.pop(_KEY, None)


def data_generation(session: Session) -> tuple:
    """The newest audit event's id and time (the time tells apart a database emptied and refilled)."""
    known = remembered(session)
    if known is not None:
        return known
    row = session.execute(_NEWEST).first()
    return generation_value(*row) if row else (0, "")


def database_key(url: URL) -> str:
    """Which database a cached result came from, as the caches key it."""
    return url.render_as_string(hide_password=False)


class GenerationCache:
    """A small per-process LRU of computed results keyed by (data generation, key)."""

    def __init__(self, size: int = 256) -> None:
        self.size = size
        self.entries: OrderedDict[Hashable, object] = OrderedDict()
        self.computing: dict[Hashable, Event] = {}
        self.lock = Lock()

    def get_or_compute(self, session: Session, key: Hashable, compute: Callable[[], T]) -> T:
        """The cached result, or ``compute()`` stored for this generation. Requests that miss the
        same key at the same time wait for the first one's result instead of computing it again."""
        full_key = self._full_key(session, data_generation(session), key)
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

    def peek(self, database: str, generation: tuple, key: Hashable) -> object | None:
        """The result cached for a generation already known (read with the user's session), or
        None; never touches the database, so it may run on the event loop. ``database`` is
        ``database_key`` of the engine's URL."""
        full_key = (database, generation, key)
        with self.lock:
            if full_key in self.entries:
                self.entries.move_to_end(full_key)
                return self.entries[full_key]
        return None

    @staticmethod
    def _full_key(session: Session, generation: tuple, key: Hashable) -> tuple:
        # The database is part of the key: one process may serve (or test) several.
        return database_key(session.get_bind().url), generation, key

    def clear(self) -> None:
        with self.lock:
            self.entries.clear()
