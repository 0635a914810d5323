"""Pages: award a lot (the lowest total owning cost, or another compliant offer with a reason, after a
confirmation that shows the margin and the warnings), reopen an award, and the award report."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse
from pydantic import ValidationError

from server import schemas
from server.auth import ANY_ROLE, APPROVER
from server.deps import SessionDep
from server.errors import Conflict, InvalidField
from server.pages import views
from server.pages.forms import FormDep, field_errors
from server.pages.report import report_view
from server.pages.templating import is_htmx, page_or_partial, render, see_other
from server.services import awards as service
from server.version import VERSION

router = APIRouter()


def _lot_refused(request: Request, session, lot_id: int, form: dict[str, str], errors: dict[str, str]):
    """The lot page again, with the award or reopen form showing what was wrong."""
    views.discard(session)
    context = views.lot_detail(session, lot_id) | {"award_form": form, "award_errors": errors}
    return render(request, "lots/detail.html", context, status_code=422)


def _award_data(form: dict[str, str]) -> dict[str, Any]:
    """The confirmation's boxes as the award's fields (a checkbox posts "true" only when ticked)."""
    return {
        "offer_id": form.get("offer_id") or None,
        "reason_kind": form.get("reason_kind") or None,
        "reason": form.get("reason") or None,
        "acknowledge_warnings": form.get("acknowledge_warnings") == "true",
        "note": form.get("note") or None,
    }


def _refusal(exc: InvalidField) -> dict[str, str]:
    """A refusal beside its box; one about the lot itself reads as a sentence of its own."""
    return {"form": f"{exc.field} {exc.detail}"} if exc.field == "lot" else {exc.field: exc.detail}


def _offer_choice(value: str | None) -> int | None:
    # Past the id range is no offer at all, like any other text that is not an id.
    return int(value) if value and value.isdigit() and int(value) <= schemas.MAX_ID else None


@router.get("/lots/{lot_id:int}/award/review", dependencies=[APPROVER])
def review_award(request: Request, lot_id: schemas.PathId, session: SessionDep, offer_id: str | None = None):
    """The confirmation of an award to one offer: its margin, its warnings, the reason box; nothing stored."""
    try:
        context = views.award_confirmation(session, lot_id, _offer_choice(offer_id))
    except InvalidField as exc:
        return _lot_refused(request, session, lot_id, {"offer_id": offer_id or ""}, _refusal(exc))
    return page_or_partial(request, "lots/detail.html", "lots/_award_confirm.html",
                           views.lot_detail(session, lot_id) | context if not is_htmx(request) else context)


@router.post("/lots/{lot_id:int}/award", dependencies=[APPROVER])
def award_lot(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Freeze the evaluation and lock the lot: the chosen offer wins, with its reason and acknowledgements."""
    status = 422
    try:
        data = schemas.AwardIn.model_validate(_award_data(form))
        service.award_lot(session, lot_id, data)
    except ValidationError as exc:
        errors = field_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = _refusal(exc)
    except Conflict as exc:
        views.discard(session)
        if exc.warnings is None:
            raise
        errors, status = {"acknowledge_warnings": "tick the box to confirm you have checked each warning"}, 409
    else:
        return see_other(request, f"/lots/{lot_id}")
    try:
        context = views.award_confirmation(session, lot_id, _offer_choice(form.get("offer_id")), form, errors)
    except InvalidField as exc:
        return _lot_refused(request, session, lot_id, form, _refusal(exc))
    if is_htmx(request):
        return render(request, "lots/_award_confirm.html", context, status_code=status)
    return render(request, "lots/detail.html", views.lot_detail(session, lot_id) | context, status_code=status)


@router.post("/lots/{lot_id:int}/reopen", dependencies=[APPROVER])
def reopen_lot(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Lift the standing award; the reason stays with the record."""
    try:
        service.reopen_lot(session, lot_id, schemas.ReopenIn.model_validate({"reason": form.get("reason", "")}).reason)
    except ValidationError as exc:
        return _lot_refused(request, session, lot_id, form, field_errors(exc))
    except InvalidField as exc:
        return _lot_refused(request, session, lot_id, form, {exc.field: exc.detail})
    return see_other(request, f"/lots/{lot_id}")


@router.get("/evaluation-records/{record_id:int}/report", dependencies=[ANY_ROLE])
def award_report(request: Request, record_id: schemas.PathId, session: SessionDep):
    """A printable report built from the frozen record alone, re-verified as it is shown."""
    record = service.get_record(session, record_id)
    context = report_view(record, service.verify_record(session, record)) | {"version_now": VERSION}
    return render(request, "awards/report.html", context)


@router.get("/evaluation-records/{record_id:int}/verification", dependencies=[ANY_ROLE])
def verify_record(request: Request, record_id: schemas.PathId, session: SessionDep):
    """Recompute the hash and the ranking now; htmx shows the result in place."""
    if not is_htmx(request):
        return RedirectResponse(f"/evaluation-records/{record_id}/report#verification", status_code=303)
    record = service.get_record(session, record_id)
    context: dict[str, Any] = {"verification": service.verify_record(session, record), "version_now": VERSION}
    return render(request, "awards/_verification.html", context)
