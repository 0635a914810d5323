"""FastAPI dependencies shared by the API and the pages."""

from __future__ import annotations

from collections.abc import AsyncIterator
from typing import Annotated

from fastapi import Depends, Request
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from server.storage import generation
from server.storage.audit import set_actor


async def get_session(request: Request) -> AsyncIterator[Session]:
    """One session per request; services commit, everything else rolls back.

    Opened on the event loop (a session connects only when first used) and closed in a
    worker thread only when it did connect: a cached page costs no thread hop for it.
    """
    session = request.app.state.db.sessionmaker()
    # Set by server.auth.Requires, which runs first: who is acting, and the data generation
    # it read with the user's session (a cached page then needs no query of its own).
    actor = getattr(request.state, "actor", None)
    if actor is not None:
        set_actor(session, actor)
    known = getattr(request.state, "generation", None)
    if known is not None:
        generation.remember(session, known)
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


SessionDep = Annotated[Session, Depends(get_session)]
