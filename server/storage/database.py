"""Engine and session factory for SQLite (embedded) and PostgreSQL (multi-user)."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

from server.storage import audit  # noqa: F401  (registers the audit hook on every session)


def make_engine(url: str) -> Engine:
    """Create an engine; SQLite gets foreign keys, WAL and a busy timeout."""
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 30})

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_connection, _record):  # pragma: no cover - trivial
            cursor = dbapi_connection.cursor()
            cursor.execute("PRAGMA foreign_keys=ON")
            if ":memory:" not in url:
                cursor.execute("PRAGMA journal_mode=WAL")
            cursor.close()

        return engine
    return create_engine(url, pool_pre_ping=True)


class Database:
    """Owns the engine and hands out sessions; one instance per application."""

    def __init__(self, url: str) -> None:
        self.url = url
        self.engine = make_engine(url)
        self.sessionmaker = sessionmaker(self.engine, expire_on_commit=False)

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session that rolls back whatever was not committed explicitly."""
        session = self.sessionmaker()
        try:
            yield session
        finally:
            session.rollback()
            session.close()

    def dispose(self) -> None:
        self.engine.dispose()
