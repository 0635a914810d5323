"""Helpers shared by the services: look-ups, optimistic locking and commits."""

from __future__ import annotations

import sqlite3
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, TypeVar

import psycopg
from pydantic import BaseModel
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session
from sqlalchemy.orm.exc import StaleDataError

from server.errors import Conflict, InvalidField, NotFound
from server.storage import audit
from server.storage.models import User

T = TypeVar("T")


def get_or_404(session: Session, model: type[T], object_id: int, label: str) -> T:
    obj = session.get(model, object_id)
    if obj is None:
        raise NotFound(f"{label} {object_id} does not exist.")
    return obj


def check_version(obj: Any, version: int, label: str, current: dict | None = None) -> None:
    """Refuse an edit made against a version other than the one stored."""
    if obj.version != version:
        raise Conflict(
            f"This {label} was changed by someone else (you edited version {version}, "
            f"it is now version {obj.version}). Reload to see the current values; nothing was saved.",
            current=current,
        )


def apply_patch(obj: Any, patch: BaseModel, required: set[str], skip: set[str] = frozenset()) -> dict[str, Any]:
    """Copy the fields the client sent onto ``obj``; a required field may not be set to null."""
    changes = patch.model_dump(exclude_unset=True, exclude={"version", *skip})
    for field, value in changes.items():
        if value is None and field in required:
            raise InvalidField(field, "may not be empty.")
        setattr(obj, field, value)
    return changes


def commit(session: Session, label: str, unique_field: str | None = None,
           current: Callable[[], dict] | None = None) -> None:
    """Commit; a concurrent edit becomes 409 (with the stored values when ``current`` can
    read them), and so does a unique clash (naming ``unique_field`` when given)."""
    try:
        session.commit()
    except StaleDataError as exc:
        session.rollback()
        raise Conflict(
            f"This {label} was changed by someone else while you saved; nothing was saved. "
            "Reload to see the current values.",
            current=current() if current else None,
        ) from exc
    except IntegrityError as exc:
        session.rollback()
        if not is_unique_violation(exc):
            raise
        if unique_field:
            raise Conflict(f"{unique_field}: is already used by another record; nothing was saved.",
                           current=current() if current else None) from exc
        raise _clash(label, current) from exc


def is_unique_violation(exc: BaseException) -> bool:
    """Whether a database error (SQLAlchemy's, or the driver's own from a raw cursor) is a
    unique constraint refusing a row."""
    error = getattr(exc, "orig", None) or exc
    if isinstance(error, psycopg.errors.UniqueViolation):
        return True
    return isinstance(error, sqlite3.IntegrityError) and "UNIQUE constraint failed" in str(error)


def _clash(label: str, current: Callable[[], dict] | None) -> Conflict:
    return Conflict(
        f"This {label} clashes with a record saved already, perhaps at the same moment; nothing was saved. "
        "Reload to see the current values.",
        current=current() if current else None,
    )


@contextmanager
def unique_clash_is_conflict(session: Session, label: str,
                             current: Callable[[], dict] | None = None) -> Iterator[None]:
    """Turn a unique violation inside the block into 409, the transaction rolled back. For
    writes through the driver's cursor, whose errors SQLAlchemy never wraps."""
    try:
        yield
    except (IntegrityError, psycopg.IntegrityError, sqlite3.IntegrityError) as exc:
        if not is_unique_violation(exc):
            raise
        session.rollback()
        raise _clash(label, current) from exc


def acting_roles(session: Session) -> frozenset[str] | None:
    """The roles of the user this session acts for, or None when no signed-in user is behind
    it (the command line, start-up work, a service called from code), which is trusted."""
    user_id = audit.get_actor(session).user_id
    if user_id is None:
        return None
    roles = session.scalar(select(User.roles).where(User.id == user_id))
    return frozenset(roles or ())


def may_see_all(session: Session) -> bool:
    """Whether this session may see what belongs to others: an administrator, or trusted code."""
    roles = acting_roles(session)
    return roles is None or "admin" in roles


def get_owned_or_404(session: Session, model: type[T], object_id: int, label: str) -> T:
    """``get_or_404`` for a record its creator keeps to themselves (``created_by``): anyone
    else but an administrator is told it does not exist, so its existence leaks nothing."""
    obj = get_or_404(session, model, object_id, label)
    if not may_see_all(session) and obj.created_by != audit.get_actor(session).username:
        raise NotFound(f"{label} {object_id} does not exist.")
    return obj
