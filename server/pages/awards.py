"""Pages: award a lot to its lowest total owning cost, reopen an award, and the award report."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse
from pydantic import ValidationError

from server import schemas
from server.auth import ANY_ROLE, APPROVER
from server.deps import SessionDep
from server.errors import InvalidField
from server.pages import views
from server.pages.forms import FormDep, field_errors
from server.pages.report import report_view
from server.pages.templating import is_htmx, render, see_other
from server.services import awards as service
from server.version import VERSION

router = APIRouter()


def _lot_refused(request: Request, session, lot_id: int, form: dict[str, str], errors: dict[str, str]):
    """The lot page again, with the award or reopen form showing what was wrong."""
    views.discard(session)
    context = views.lot_detail(session, lot_id) | {"award_form": form, "award_errors": errors}
    return render(request, "lots/detail.html", context, status_code=422)


@router.post("/lots/{lot_id:int}/award", dependencies=[APPROVER])
def award_lot(request: Request, lot_id: int, session: SessionDep, form: FormDep):
    """Freeze the evaluation and lock the lot; the lowest total owning cost wins."""
    try:
        data = schemas.AwardIn.model_validate({"note": form.get("note") or None})
        service.award_lot(session, lot_id, data.note)
    except ValidationError as exc:
        return _lot_refused(request, session, lot_id, form, field_errors(exc))
    except InvalidField as exc:
        # The only such refusal names the lot itself ("lot: has no offers to award").
        return _lot_refused(request, session, lot_id, form, {"form": f"{exc.field} {exc.detail}"})
    return see_other(request, f"/lots/{lot_id}")


@router.post("/lots/{lot_id:int}/reopen", dependencies=[APPROVER])
def reopen_lot(request: Request, lot_id: int, session: SessionDep, form: FormDep):
    """Lift the standing award; the reason stays with the record."""
    try:
        service.reopen_lot(session, lot_id, schemas.ReopenIn.model_validate({"reason": form.get("reason", "")}).reason)
    except ValidationError as exc:
        return _lot_refused(request, session, lot_id, form, field_errors(exc))
    except InvalidField as exc:
        return _lot_refused(request, session, lot_id, form, {exc.field: exc.detail})
    return see_other(request, f"/lots/{lot_id}")


@router.get("/evaluation-records/{record_id:int}/report", dependencies=[ANY_ROLE])
def award_report(request: Request, record_id: int, session: SessionDep):
    """A printable report built from the frozen record alone, re-verified as it is shown."""
    record = service.get_record(session, record_id)
    context = report_view(record, service.verify_record(record)) | {"version_now": VERSION}
    return render(request, "awards/report.html", context)


@router.get("/evaluation-records/{record_id:int}/verification", dependencies=[ANY_ROLE])
def verify_record(request: Request, record_id: int, session: SessionDep):
    """Recompute the hash and the ranking now; htmx shows the result in place."""
    if not is_htmx(request):
        return RedirectResponse(f"/evaluation-records/{record_id}/report#verification", status_code=303)
    record = service.get_record(session, record_id)
    context: dict[str, Any] = {"verification": service.verify_record(record), "version_now": VERSION}
    return render(request, "awards/_verification.html", context)
