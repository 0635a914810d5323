"""FastAPI dependencies shared by the API and the pages."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Annotated

from fastapi import Depends, Request
from sqlalchemy.orm import Session

from server.storage.audit import set_actor


def get_session(request: Request) -> Iterator[Session]:
    """One session per request; services commit, everything else rolls back."""
    with request.app.state.db.session() as session:
        actor = getattr(request.state, "actor", None)  # set by server.auth.Requires
        if actor is not None:
            set_actor(session, actor)
        yield session


SessionDep = Annotated[Session, Depends(get_session)]
