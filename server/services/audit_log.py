"""Use cases for reading the audit trail (nothing here, or anywhere, changes it)."""

from __future__ import annotations

import json
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from server.exports import write_csv
from server.storage.models import AuditEvent

MAX_ROWS = 10_000


def list_events(
    session: Session,
    object_type: str | None = None,
    object_id: int | None = None,
    actor: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    limit: int = 500,
) -> list[AuditEvent]:
    """Newest first, filtered by object, user and time."""
    query = select(AuditEvent)
    if object_type:
        query = query.where(AuditEvent.object_type == object_type)
    if object_id is not None:
        query = query.where(AuditEvent.object_id == object_id)
    if actor:
        query = query.where(AuditEvent.actor == actor)
    if since is not None:
        query = query.where(AuditEvent.at >= since)
    if until is not None:
        query = query.where(AuditEvent.at <= until)
    query = query.order_by(AuditEvent.id.desc()).limit(min(max(limit, 1), MAX_ROWS))
    return list(session.scalars(query))


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
