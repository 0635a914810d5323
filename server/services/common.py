"""Helpers shared by the services: look-ups, optimistic locking and commits."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeVar

from pydantic import BaseModel
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session
from sqlalchemy.orm.exc import StaleDataError

from server.errors import Conflict, InvalidField, NotFound

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
    read them), a unique clash 422 naming the field."""
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
        if unique_field:
            raise InvalidField(unique_field, "is already used by another record.") from exc
        raise
