"""Whether a lot may change: an awarded lot is frozen until an approver reopens it."""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.errors import Conflict
from server.storage.models import EvaluationRecord, Lot, Tender


def active_record(session: Session, lot_id: int) -> EvaluationRecord | None:
    """The evaluation record of the lot's standing award, if any."""
    return session.scalar(
        select(EvaluationRecord).where(EvaluationRecord.lot_id == lot_id, EvaluationRecord.reopened_at.is_(None))
    )


def ensure_open(session: Session, lot: Lot) -> None:
    """Refuse any change to an awarded lot's offers, facts or rates (409)."""
    record = active_record(session, lot.id)
    if record is not None:
        raise Conflict(
            f"Lot '{lot.name}' was awarded on {record.awarded_at:%Y-%m-%d} by {record.awarded_by} "
            f"(evaluation record {record.id}); an approver must reopen it with a reason before it can change."
        )


def ensure_tender_open(session: Session, tender: Tender) -> None:
    for lot in tender.lots:
        ensure_open(session, lot)


def ensure_no_records(session: Session, tender: Tender) -> None:
    """A tender whose lots were ever awarded keeps its evaluation records: it cannot be deleted."""
    lot_ids = [lot.id for lot in tender.lots]
    count = session.scalar(
        select(func.count()).select_from(EvaluationRecord).where(EvaluationRecord.lot_id.in_(lot_ids))
    ) if lot_ids else 0
    if count:
        raise Conflict(
            f"Tender {tender.reference} has {count} evaluation record(s) from awards; it is kept for the record."
        )
