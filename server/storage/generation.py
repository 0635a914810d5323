"""The data generation: the newest audit event's id.

Every change the application makes writes an audit event in the same transaction, so this
number moves whenever anything a page or ranking shows may have changed. Caches key on it
and never serve data older than the last committed change.
"""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Callable, Hashable
from threading import Lock
from typing import TypeVar

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.storage.models import AuditEvent

T = TypeVar("T")


def data_generation(session: Session) -> tuple:
    """The newest audit event's id and time (the time tells apart a database emptied and refilled)."""
    row = session.execute(select(AuditEvent.id, AuditEvent.at).order_by(AuditEvent.id.desc()).limit(1)).first()
    return (row[0], str(row[1])) if row else (0, "")


class GenerationCache:
    """A small per-process LRU of computed results keyed by (data generation, key)."""

    def __init__(self, size: int = 256) -> None:
        self.size = size
        self.entries: OrderedDict[Hashable, object] = OrderedDict()
        self.lock = Lock()

    def get_or_compute(self, session: Session, key: Hashable, compute: Callable[[], T]) -> T:
        # The database is part of the key: one process may serve (or test) several.
        full_key = (session.get_bind().url.render_as_string(hide_password=True), data_generation(session), key)
        with self.lock:
            if full_key in self.entries:
                self.entries.move_to_end(full_key)
                return self.entries[full_key]  # type: ignore[return-value]
        value = compute()
        with self.lock:
            self.entries[full_key] = value
            while len(self.entries) > self.size:
                self.entries.popitem(last=False)
        return value

    def clear(self) -> None:
        with self.lock:
            self.entries.clear()
