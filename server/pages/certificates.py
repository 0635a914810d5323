"""Pages: the factory test certificates of an awarded lot's units (entered one by one or imported),
a tender's contract terms for the tests, and the test-analysis tool."""

from __future__ import annotations

from typing import Any
from urllib.parse import quote

from fastapi import APIRouter, Request
from pydantic import ValidationError

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.errors import Conflict, ImportRefused, InvalidField
from server.pages import certificate_views, views
from server.pages.certificate_views import box_name, reading_errors
from server.pages.forms import FormDep, conflict_errors, field_errors
from server.pages.intake import NO_FILE, UploadDep
from server.pages.templating import is_htmx, page_or_partial, render, see_other
from server.services import tenders
from server.services import test_certificates as service

router = APIRouter()


@router.get("/lots/{lot_id:int}/certificates", dependencies=[ANY_ROLE])
def certificates(request: Request, lot_id: schemas.PathId, session: SessionDep, entered: str | None = None,
                 imported: int | None = None):
    context = certificate_views.certificates_page(session, lot_id)
    context["entered"] = next((c for c in context["certificates"] if c.serial_number == entered), None)
    context["imported"] = imported
    return render(request, "certificates/page.html", context)


@router.post("/lots/{lot_id:int}/certificates", dependencies=[BUYER])
def enter_certificate(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep):
    """One unit's certificate from the readings typed; a bad box gets its message beside it."""
    try:
        data = schemas.CertificateIn.model_validate(certificate_views.certificate_data(form))
        certificate = service.add_certificate(session, lot_id, data)
    except ValidationError as exc:
        errors = reading_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {box_name(exc.field): exc.detail}
    else:
        return see_other(request, f"/lots/{lot_id}/certificates?entered={quote(certificate.serial_number)}#entered")
    context = certificate_views.certificates_page(session, lot_id, entry_form=form, entry_errors=errors)
    return page_or_partial(request, "certificates/page.html", "certificates/_entry_form.html", context, 422)


@router.post("/lots/{lot_id:int}/certificates/import", dependencies=[BUYER])
def import_certificates(request: Request, lot_id: schemas.PathId, session: SessionDep, upload: UploadDep):
    """Many certificates from one file: every row is checked, and any problem stores none."""
    try:
        if upload is None:
            raise ImportRefused(NO_FILE, [])
        stored = service.import_certificates(session, lot_id, upload.filename, upload.content)
    except ImportRefused as exc:
        views.discard(session)
        context = certificate_views.certificates_page(session, lot_id, import_refused=exc)
        return page_or_partial(request, "certificates/page.html", "certificates/_import_form.html", context, 422)
    return see_other(request, f"/lots/{lot_id}/certificates?imported={len(stored)}#certificates")


def _tender_page(session, tender_id: int, **extra: Any) -> dict[str, Any]:
    context = views.tender_detail(session, tender_id)
    return context | {"form": views.tender_form(context["tender"]), "lot_form": views.LOT_DEFAULTS} | extra


@router.post("/tenders/{tender_id:int}/contract-terms", dependencies=[BUYER])
def save_contract_terms(request: Request, tender_id: schemas.PathId, session: SessionDep, form: FormDep):
    """The tolerance standard and penalty terms, saved against the tender's version."""
    conflict, status = None, 422
    try:
        data = schemas.TenderPatch.model_validate(certificate_views.terms_data(form))
        tenders.patch_tender(session, tender_id, data)
    except ValidationError as exc:
        errors = field_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {exc.field: exc.detail}
    except Conflict as exc:
        views.discard(session)
        errors, status, conflict = conflict_errors(exc), 409, exc.current
    else:
        if not is_htmx(request):
            return see_other(request, f"/tenders/{tender_id}?saved=1#contract-terms")
        return render(request, "tenders/_header.html", _tender_page(session, tender_id, terms_saved=True))
    context = _tender_page(session, tender_id)
    typed = dict(form) | {"version": str(context["tender"].version) if conflict else form.get("version", "")}
    context |= {"terms_form": typed, "terms_errors": errors, "terms_conflict": conflict}
    return page_or_partial(request, "tenders/detail.html", "tenders/_header.html", context, status)


@router.get("/test-analysis", dependencies=[ANY_ROLE])
def test_analysis(request: Request):
    """Readings in, equivalent circuit and figures out; nothing is stored, so the form is a GET
    and an analysis is an address to share. With no readings asked, an invented example."""
    form = certificate_views.analysis_form({k: v.strip() for k, v in request.query_params.items()})
    context: dict[str, Any] = {"form": form, "errors": {}, "result": None, "analysis_chart": None}
    rows: list[int] = []
    try:
        data, rows = certificate_views.analysis_data(form)
        result = service.analyse(schemas.TestAnalysisIn.model_validate(data))
    except ValidationError as exc:
        context["errors"] = reading_errors(exc, rows)
    except InvalidField as exc:
        context["errors"] = {box_name(exc.field): exc.detail}
    else:
        context |= certificate_views.analysis_view(result, len(rows))
    status = 422 if context["errors"] else 200
    return page_or_partial(request, "certificates/analysis.html", "certificates/_analysis.html", context, status)
