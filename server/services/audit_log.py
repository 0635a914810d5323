"""Use cases for reading the audit trail (nothing here, or anywhere, changes it)."""

from __future__ import annotations

import json
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.exports import write_csv
from server.services.common import may_see_all
from server.storage.models import AuditEvent

MAX_ROWS = 10_000
# Events whose user is whatever was typed at the log-in form (often a password typed in the
# wrong box) and whose address is a stranger's: administrators see them, others see that they
# happened and nothing of who or where.
FAILED_LOG_INS = {"login_failed": "a log-in failed", "login_locked": "a log-in was refused while locked out",
                  "lockout": "an account or address was locked out"}
HIDDEN = "(hidden)"


def list_events(
    session: Session,
    object_type: str | None = None,
    object_id: int | None = None,
    actor: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    limit: int = 500,
) -> list[AuditEvent]:
    """Newest first, filtered by object, user and time. Failed log-ins show their typed name
    and address to administrators only (``FAILED_LOG_INS``)."""
    reveal = may_see_all(session)
    query = select(AuditEvent)
    if object_type:
        query = query.where(AuditEvent.object_type == object_type)
    if object_id is not None:
        query = query.where(AuditEvent.object_id == object_id)
    if actor:
        query = query.where(AuditEvent.actor == actor)
        if not reveal:
            # Else the filter would tell whether someone typed a given name (or password).
            query = query.where(AuditEvent.action.not_in(list(FAILED_LOG_INS)))
    if since is not None:
        query = query.where(AuditEvent.at >= since)
    if until is not None:
        query = query.where(AuditEvent.at <= until)
    query = query.order_by(AuditEvent.id.desc()).limit(min(max(limit, 1), MAX_ROWS))
    events = list(session.scalars(query))
    return events if reveal else [_without_who(e) if e.action in FAILED_LOG_INS else e for e in events]


def _without_who(event: AuditEvent) -> AuditEvent:
    """A copy of a failed log-in's event with neither the typed name nor the address, never
    added to the session (the trail itself is append-only)."""
    return AuditEvent(id=event.id, at=event.at, actor=HIDDEN, address=None, action=event.action,
                      object_type=event.object_type, object_id=event.object_id,
                      summary=FAILED_LOG_INS[event.action], before=None, after=None)


def object_history(session: Session, object_type: str, object_id: int, limit: int = 200) -> list[AuditEvent]:
    return list_events(session, object_type=object_type, object_id=object_id, limit=limit)


AUDIT_COLUMNS = ("id", "at", "actor", "address", "action", "object_type", "object_id", "summary", "before", "after")


def events_csv(events: list[AuditEvent]) -> str:
    rows = [
        [
            e.id, e.at.isoformat(), e.actor, e.address or "", e.action, e.object_type,
            e.object_id if e.object_id is not None else "", e.summary,
            json.dumps(e.before, sort_keys=True) if e.before is not None else "",
            json.dumps(e.after, sort_keys=True) if e.after is not None else "",
        ]
        for e in events
    ]
    return write_csv(AUDIT_COLUMNS, rows)
