"""JSON API: the audit trail, awards and their evaluation records."""

from __future__ import annotations

from datetime import datetime

from fastapi import APIRouter, Query, Response

from server import schemas
from server.auth import ANY_ROLE, APPROVER
from server.deps import SessionDep
from server.services import audit_log, awards

router = APIRouter()


@router.get("/audit", response_model=list[schemas.AuditEventOut], dependencies=[ANY_ROLE], tags=["audit"])
def list_audit(
    session: SessionDep,
    object_type: str | None = None,
    object_id: schemas.OptionalQueryId = None,
    actor: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    limit: int = Query(500, ge=1, le=audit_log.MAX_ROWS),
):
    """The audit trail, newest first. It is append-only: no route changes or deletes it."""
    return audit_log.list_events(session, object_type, object_id, actor, since, until, limit)


@router.get(
    "/audit.csv",
    dependencies=[ANY_ROLE],
    tags=["audit"],
    response_class=Response,
    responses={200: {"content": {"text/csv": {}}, "description": "The audit trail as CSV."}},
)
def audit_csv(
    session: SessionDep,
    object_type: str | None = None,
    object_id: schemas.OptionalQueryId = None,
    actor: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
):
    events = audit_log.list_events(session, object_type, object_id, actor, since, until, audit_log.MAX_ROWS)
    return Response(
        audit_log.events_csv(events),
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": 'attachment; filename="audit.csv"'},
    )


@router.post("/lots/{lot_id}/award", status_code=201, response_model=schemas.EvaluationRecordOut,
             dependencies=[APPROVER], tags=["awards"])
def award_lot(lot_id: schemas.PathId, data: schemas.AwardIn, session: SessionDep):
    """Award the lot; freezes the evaluation and locks the lot.

    ``offer_id`` defaults to the lowest total owning cost among compliant offers. Another
    compliant offer needs ``reason_kind`` and ``reason``. When the chosen offer has warnings
    (implausible figures, not assessed) or an offer was left out only on an unverified rule,
    ``acknowledge_warnings`` must be true: otherwise 409 lists the warnings and nothing is stored.
    """
    return awards.award_lot(session, lot_id, data)


@router.post("/lots/{lot_id}/reopen", response_model=schemas.EvaluationRecordOut,
             dependencies=[APPROVER], tags=["awards"])
def reopen_lot(lot_id: schemas.PathId, data: schemas.ReopenIn, session: SessionDep):
    """Lift the award so the lot can change again; the reason is kept with the record."""
    return awards.reopen_lot(session, lot_id, data.reason)


@router.get("/lots/{lot_id}/evaluation-records", response_model=list[schemas.EvaluationRecordOut],
            dependencies=[ANY_ROLE], tags=["awards"])
def list_records(lot_id: schemas.PathId, session: SessionDep):
    return awards.list_records(session, lot_id)


@router.get("/evaluation-records/{record_id}", response_model=schemas.EvaluationRecordOut,
            dependencies=[ANY_ROLE], tags=["awards"])
def get_record(record_id: schemas.PathId, session: SessionDep):
    return awards.get_record(session, record_id)


@router.get("/evaluation-records/{record_id}/verification", response_model=schemas.VerificationOut,
            dependencies=[ANY_ROLE], tags=["awards"])
def verify_record(record_id: schemas.PathId, session: SessionDep):
    """Recompute the ranking and the SHA-256 from the frozen inputs and compare them."""
    return awards.verify_record(session, awards.get_record(session, record_id))
