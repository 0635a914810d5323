"""FastAPI dependencies shared by the API and the pages."""

from __future__ import annotations

from collections.abc import AsyncIterator, Callable, Hashable
from typing import Annotated, TypeVar

from fastapi import Depends, Request
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from server.storage import generation
from server.storage.audit import set_actor
from server.storage.generation import GenerationCache

T = TypeVar("T")


def open_session(request: Request) -> Session:
    """A session for this request. Set by ``server.auth.Requires``, which runs first: who is
    acting, and the data version read with the user's session (so a cached result needs
    no query of its own until the session writes)."""
    session = request.app.state.db.sessionmaker()
    actor = getattr(request.state, "actor", None)
    if actor is not None:
        set_actor(session, actor)
    known = getattr(request.state, "generation", None)
    if known is not None:
        generation.remember(session, known)
    return session


async def get_session(request: Request) -> AsyncIterator[Session]:
    """One session per request; services commit, everything else rolls back.

    Opened on the event loop (a session connects only when first used) and closed in a
    worker thread only when it did connect.
    """
    session = open_session(request)
    try:
        yield session
    finally:
        if session.in_transaction():
            await run_in_threadpool(_close, session)
        else:
            session.close()


def _close(session: Session) -> None:
    session.rollback()
    session.close()


async def cached(request: Request, cache: GenerationCache, key: Hashable, compute: Callable[[Session], T]) -> T:
    """``cache``'s result for ``key`` at the data version the request's authentication read:
    a hit is served on the event loop with no session and no I/O; a miss is computed (once,
    however many requests miss together) in a worker thread with its own session."""
    known = getattr(request.state, "generation", None)
    if known is not None:
        hit = cache.peek(request.app.state.db.cache_key, known, key)
        if hit is not None:
            return hit  # type: ignore[return-value]

    def miss() -> T:
        session = open_session(request)
        try:
            return cache.get_or_compute(session, key, lambda: compute(session))
        finally:
            _close(session)

    return await run_in_threadpool(miss)


SessionDep = Annotated[Session, Depends(get_session)]
