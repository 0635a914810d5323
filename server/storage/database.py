"""Engine and session factory for SQLite (embedded) and PostgreSQL (multi-user)."""

from __future__ import annotations

import asyncio
import os
from collections import namedtuple
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from typing import Any

import psycopg
from psycopg_pool import AsyncConnectionPool
from sqlalchemy import DateTime, Engine, create_engine, event
from sqlalchemy.dialects import sqlite
from sqlalchemy.engine import Compiled
from sqlalchemy.orm import Session, sessionmaker
from sqlalchemy.sql.expression import Executable

from server.storage import audit  # noqa: F401  (registers the audit hook on every session)
from server.storage.generation import database_key

# Asynchronous connections per worker for the read every request makes: reads wait for one
# only while all are busy, and a server under load answers several at once.
ASYNC_POOL_SIZE = 4


class _UTCDateTime(sqlite.DATETIME):
    """SQLite keeps a time as text without its zone: written in UTC, read back in UTC, so that
    every ``DateTime(timezone=True)`` column is aware on SQLite as it is on PostgreSQL."""

    def bind_processor(self, dialect):
        to_text = super().bind_processor(dialect)

        def process(value):
            if isinstance(value, datetime) and value.tzinfo is not None:
                value = value.astimezone(UTC)
            return to_text(value) if to_text else value

        return process

    def result_processor(self, dialect, coltype):
        from_text = super().result_processor(dialect, coltype)
        if not self.timezone:
            return from_text

        def process(value):
            value = from_text(value) if from_text else value
            return value.replace(tzinfo=UTC) if isinstance(value, datetime) and value.tzinfo is None else value

        return process


def _create_private(path: str) -> None:
    """Create a new SQLite file readable by its owner alone (SQLite gives its -wal and -shm
    files the same mode); an existing file keeps the mode it has."""
    if path and path != ":memory:" and not path.startswith("file:") and not os.path.exists(path):
        os.close(os.open(path, os.O_CREAT | os.O_WRONLY, 0o600))


def make_engine(url: str) -> Engine:
    """Create an engine; SQLite gets foreign keys, WAL, a busy timeout, aware times and a file of mode 0600."""
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 30})
        _create_private(engine.url.database or "")
        engine.dialect.colspecs = {**engine.dialect.colspecs, DateTime: _UTCDateTime}

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_connection, _record):  # pragma: no cover - trivial
            cursor = dbapi_connection.cursor()
            cursor.execute("PRAGMA foreign_keys=ON")
            if ":memory:" not in url:
                cursor.execute("PRAGMA journal_mode=WAL")
            cursor.close()

        return engine
    # A ping on checkout replaces connections the server dropped (it restarted). The read every
    # request makes does not come through this pool when served (Database.read_row_async).
    return create_engine(url, pool_pre_ping=True)


class Database:
    """Owns the engine and hands out sessions; one instance per application."""

    def __init__(self, url: str) -> None:
        self.url = url
        self.engine = make_engine(url)
        self.sessionmaker = sessionmaker(self.engine, expire_on_commit=False)
        self.cache_key = database_key(self.engine.url)  # see server.storage.generation
        self._compiled: dict[int, tuple[Executable, Compiled, Callable[[Any], tuple]]] = {}
        # PostgreSQL, in a served app: asynchronous connections for the read every request
        # makes, bound to the event loop that opened them (see open_async).
        self._async_pool: AsyncConnectionPool | None = None
        self._async_loop: asyncio.AbstractEventLoop | None = None

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session that rolls back whatever was not committed explicitly."""
        session = self.sessionmaker()
        try:
            yield session
        finally:
            session.rollback()
            session.close()

    def read_row(self, statement: Executable, params: dict[str, Any]) -> tuple | None:
        """The first row of a read-only ``statement``, as the driver returns its values, in a
        named tuple whose fields are the statement's column names (``row.data_version``).

        For a read on every request: a pooled driver connection in autocommit mode (no BEGIN or
        ROLLBACK) and SQL compiled once, which costs a fraction of a session's execute. Values
        are not converted (SQLite's driver gives times and JSON as text).
        """
        sql, values, make_row = self._bind(statement, params)
        postgres = self.engine.dialect.name == "postgresql"
        connection = self.engine.raw_connection()
        try:
            driver = connection.driver_connection
            if postgres:
                driver.autocommit = True
            cursor = driver.cursor()
            try:
                cursor.execute(sql, values)
                row = cursor.fetchone()
                return None if row is None else make_row(row)
            finally:
                cursor.close()
                if postgres:
                    driver.autocommit = False
        finally:
            connection.close()

    async def read_row_async(self, statement: Executable, params: dict[str, Any]) -> tuple | None:
        """``read_row`` without a worker thread: on the asynchronous pool when this event loop
        opened one (PostgreSQL), else ``read_row`` in the thread pool. A handoff to a thread
        costs more than the read itself, and under load it waits for the interpreter lock. When
        the server has dropped the connections (it restarted), the pool is checked and the read
        tried once more."""
        if self._async_pool is None or self._async_loop is not asyncio.get_running_loop():
            return await asyncio.to_thread(self.read_row, statement, params)
        sql, values, make_row = self._bind(statement, params)
        for attempt in (1, 2):
            try:
                async with self._async_pool.connection() as connection:
                    cursor = await connection.execute(sql, values)
                    row = await cursor.fetchone()
                    return None if row is None else make_row(row)
            except psycopg.OperationalError:
                if attempt == 2:
                    raise
                await self._async_pool.check()  # drops every connection the server closed
        raise AssertionError("unreachable")

    async def open_async(self) -> None:
        """Open a small pool of asynchronous connections on the running loop (PostgreSQL only;
        the app's start-up). It connects in the background, so a server that cannot be reached
        yet delays no start-up; ``/readyz`` tells."""
        if self.engine.dialect.name != "postgresql":
            return
        _args, options = self.engine.dialect.create_connect_args(self.engine.url)
        options.pop("context", None)  # SQLAlchemy's adapters are for its own connections
        self._async_pool = AsyncConnectionPool(
            kwargs={**options, "autocommit": True}, min_size=ASYNC_POOL_SIZE, max_size=ASYNC_POOL_SIZE,
            timeout=10, open=False, name="request-reads")
        await self._async_pool.open(wait=False)
        self._async_loop = asyncio.get_running_loop()

    async def close_async(self) -> None:
        if self._async_pool is not None:
            await self._async_pool.close()
        self._async_pool = self._async_loop = None

    def _bind(self, statement: Executable, params: dict[str, Any]) -> tuple[str, Any, Callable[[Any], tuple]]:
        compiled, make_row = self._compile(statement)
        bound = compiled.construct_params(params)
        values = tuple(bound[name] for name in compiled.positiontup) if compiled.positiontup else bound
        return compiled.string, values, make_row

    def _compile(self, statement: Executable) -> tuple[Compiled, Callable[[Any], tuple]]:
        # Keyed by identity, holding the statement so that its id is never reused. The row type
        # is made once too: code reads a row's values by column name, never by position.
        entry = self._compiled.get(id(statement))
        if entry is None or entry[0] is not statement:
            names = list(statement.selected_columns.keys()) if hasattr(statement, "selected_columns") else []
            make_row = namedtuple("Row", names, rename=True)._make if names else tuple
            entry = (statement, statement.compile(dialect=self.engine.dialect), make_row)
            self._compiled[id(statement)] = entry
        return entry[1], entry[2]

    def dispose(self) -> None:
        self.engine.dispose()
