"""The audit trail: every create, update and delete of an audited record is written in the
same transaction as the change itself, by a session hook, so no service can forget it.

The same hooks move the data version (``server.storage.generation``) in every transaction that
changes evaluated data, which is what the caches key on; security events do not move it.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

from sqlalchemy import event, inspect
from sqlalchemy.orm import Session

from server.storage import generation
from server.storage.models import (
    AuditEvent,
    CostBasis,
    CostBasisRevision,
    EvaluationRecord,
    LoadShape,
    Lot,
    Offer,
    Tender,
    TestCertificate,
    User,
    UserLimitTable,
    utcnow,
)

# Object type names as shown in the audit trail.
AUDITED: dict[type, str] = {
    CostBasis: "cost_basis",
    CostBasisRevision: "cost_basis_revision",
    Tender: "tender",
    Lot: "lot",
    Offer: "offer",
    User: "user",
    EvaluationRecord: "evaluation_record",
    UserLimitTable: "limit_table",
    TestCertificate: "test_certificate",
    LoadShape: "load_shape",
}
# Events about who is signed in, never about evaluated data: they leave the data version (and
# so every cache) alone, or each log-in, even a failed one, would empty every cache.
SECURITY_ACTIONS = frozenset({"login", "login_failed", "login_locked", "lockout", "logout", "token_revoked"})
# Never copied into the trail (secrets), or noise that every change carries.
_HIDDEN = {"password_hash"}
_NOISE = {"created_at", "updated_at", "bidder_key"}  # bidder_key follows bidder


@dataclass(frozen=True)
class Actor:
    """Who is acting, as the audit trail records it."""

    username: str
    address: str | None = None
    user_id: int | None = None


SYSTEM = Actor("system")


def set_actor(session: Session, actor: Actor) -> None:
    session.info["actor"] = actor


def get_actor(session: Session) -> Actor:
    return session.info.get("actor", SYSTEM)


def _plain(value: Any) -> Any:
    if isinstance(value, datetime | date):
        return value.isoformat()
    return value


def _snapshot(obj: Any) -> dict[str, Any]:
    mapper = inspect(obj).mapper
    values = {}
    for column in mapper.column_attrs:
        key = column.key
        if key in _NOISE:
            continue
        values[key] = "(hidden)" if key in _HIDDEN else _plain(getattr(obj, key))
    return values


def _changes(obj: Any) -> tuple[dict[str, Any], dict[str, Any]]:
    state = inspect(obj)
    before, after = {}, {}
    for column in state.mapper.column_attrs:
        key = column.key
        if key in _NOISE:
            continue
        history = state.attrs[key].history
        if not history.has_changes():
            continue
        old = history.deleted[0] if history.deleted else None
        new = history.added[0] if history.added else None
        if old == new:
            continue
        hidden = key in _HIDDEN
        before[key] = "(hidden)" if hidden else _plain(old)
        after[key] = "(changed)" if hidden else _plain(new)
    return before, after


def _label(obj: Any) -> str:
    for attr in ("reference", "name", "bidder", "username"):
        value = getattr(obj, attr, None)
        if value:
            return str(value)
    return ""


def event_row(actor: Actor, action: str, object_type: str, object_id: int | None, summary: str,
              before: dict | None = None, after: dict | None = None) -> dict[str, Any]:
    return {
        "at": utcnow(),
        "actor": actor.username,
        "address": actor.address,
        "action": action,
        "object_type": object_type,
        "object_id": object_id,
        "summary": summary[:300],
        "before": before,
        "after": after,
    }


def record(session: Session, action: str, object_type: str, object_id: int | None, summary: str,
           before: dict | None = None, after: dict | None = None, actor: Actor | None = None) -> None:
    """Add an event that is not a plain row change (a login, an award, a reopening). Unless
    its action is one of ``SECURITY_ACTIONS``, the flush that writes it moves the data version."""
    row = event_row(actor or get_actor(session), action, object_type, object_id, summary, before, after)
    session.add(AuditEvent(**row))


def _changes_evaluated_data(session: Session) -> bool:
    """Whether the coming flush writes an audited change or an event that is not a security event."""
    for obj in session.new:
        if type(obj) in AUDITED or (isinstance(obj, AuditEvent) and obj.action not in SECURITY_ACTIONS):
            return True
    if any(type(obj) in AUDITED for obj in session.deleted):
        return True
    return any(type(obj) in AUDITED and session.is_modified(obj, include_collections=False) for obj in session.dirty)


@event.listens_for(Session, "before_flush")
def _bump_data_version(session: Session, _context, _instances) -> None:
    # Before the flush rather than after: the version's row lock is then taken before any lock
    # on the rows this flush changes, the same order in every writer.
    if _changes_evaluated_data(session):
        generation.bump(session)


@event.listens_for(Session, "after_flush")
def _audit_changes(session: Session, _context) -> None:
    actor = get_actor(session)
    rows = []
    for obj in session.new:
        kind = AUDITED.get(type(obj))
        if kind:
            rows.append(event_row(actor, "create", kind, obj.id, f"created {kind} {_label(obj)}".strip(),
                                  after=_snapshot(obj)))
    for obj in session.dirty:
        kind = AUDITED.get(type(obj))
        if kind and session.is_modified(obj, include_collections=False):
            before, after = _changes(obj)
            if after:
                rows.append(event_row(actor, "update", kind, obj.id,
                                      f"changed {', '.join(sorted(after))} of {kind} {_label(obj)}".strip(),
                                      before=before, after=after))
    for obj in session.deleted:
        kind = AUDITED.get(type(obj))
        if kind:
            rows.append(event_row(actor, "delete", kind, obj.id, f"deleted {kind} {_label(obj)}".strip(),
                                  before=_snapshot(obj)))
    if rows:
        generation.bump(session)  # already done before the flush, unless the flush itself added a change
        session.connection().execute(AuditEvent.__table__.insert(), rows)
