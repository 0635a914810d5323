"""Use cases the pages need beyond the shared services: log-in that replaces the browser's
old session, user administration that keeps an administrator from locking themselves out,
and small read helpers (which lots stand awarded, which object types the trail names)."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.errors import InvalidField
from server.services import users
from server.settings import Settings
from server.storage import audit
from server.storage.models import AuthSession, EvaluationRecord, User

# Object types as the audit trail names them, in the order the filter offers them.
AUDITED_TYPES: tuple[str, ...] = tuple(audit.AUDITED.values())


def log_in_replacing(
    session: Session, settings: Settings, username: str, password: str, address: str, old_token: str | None
) -> tuple[str, AuthSession]:
    """Log in through the browser with a brand-new session; the session the browser's old
    cookie named (if it still lives) is revoked once the new one exists."""
    token, stored = users.log_in(session, settings, username, password, address, "browser")
    old = users.resolve(session, settings, old_token, ("browser",)) if old_token else None
    if old is not None and old.session_id != stored.id:
        users.revoke(session, old.session_id, audit.Actor(old.username, address, old.user_id))
    return token, stored


def patch_user_as(session: Session, acting_user_id: int, user_id: int, patch) -> User:
    """``users.patch_user``, refusing the changes that would lock the acting administrator
    out: disabling their own account or dropping their own admin role."""
    if user_id == acting_user_id:
        if patch.disabled:
            raise InvalidField("disabled", "you cannot disable your own account; ask another administrator.")
        if patch.roles is not None and "admin" not in patch.roles:
            raise InvalidField("roles", "you cannot remove your own admin role; ask another administrator.")
    return users.patch_user(session, user_id, patch)


def awarded_lot_ids(session: Session, lot_ids: list[int]) -> set[int]:
    """Which of these lots have a standing (not reopened) award."""
    if not lot_ids:
        return set()
    return set(
        session.scalars(
            select(EvaluationRecord.lot_id).where(
                EvaluationRecord.lot_id.in_(lot_ids), EvaluationRecord.reopened_at.is_(None)
            )
        )
    )
