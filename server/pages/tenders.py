"""Pages: the list of tenders, a tender with its lots."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.pages import views
from server.pages.forms import (
    FormDep,
    FormListsDep,
    FormValues,
    Refused,
    attempt,
    basis_choice,
    create_data,
)
from server.pages.templating import is_htmx, page_or_partial, render, see_other
from server.services import pages_intake
from server.services import tenders as service

router = APIRouter()


def _new_tender(form: FormValues, tables: list[str]) -> dict[str, Any]:
    """The tender's header boxes and its first lot's boxes (posted without a prefix)."""
    header = {name: form.get(name, "") for name in ("reference", "title", "currency")}
    lot = create_data(form, schemas.LotCreate) | {"limit_tables": tables}
    return header | basis_choice(form.get("cost_basis", "")) | {"lots": [lot]}


def _tender_patch(form: FormValues) -> dict[str, Any]:
    """Title and status always; the cost basis only when it was changed, since an awarded
    lot refuses a new basis but not a new title."""
    fields = {name: form.get(name, "") for name in ("version", "title", "status")}
    if form.get("cost_basis") == form.get("cost_basis_was"):
        return fields
    return fields | basis_choice(form.get("cost_basis", ""))


@router.get("/", dependencies=[ANY_ROLE])
def home() -> RedirectResponse:
    return RedirectResponse("/tenders", status_code=303)


@router.get("/tenders", dependencies=[ANY_ROLE])
def tender_list(request: Request, session: SessionDep):
    return render(request, "tenders/list.html", views.tender_list(session) | {"form": views.LOT_DEFAULTS})


@router.post("/tenders", dependencies=[BUYER])
def create_tender(request: Request, session: SessionDep, form: FormDep, lists: FormListsDep):
    tables = lists.get("limit_tables", [])
    result = attempt(session, lambda: service.create_tender(
        session, schemas.TenderCreate.model_validate(_new_tender(form, tables))), conflict_on_form=False)
    if not isinstance(result, Refused):
        return see_other(request, f"/tenders/{result.id}")
    context = views.tender_list(session) | {"form": form | {"limit_tables": tables}, "errors": result.errors}
    return page_or_partial(request, "tenders/list.html", "tenders/_new_form.html", context, status_code=422)


@router.get("/tenders/{tender_id:int}", dependencies=[ANY_ROLE])
def tender_detail(request: Request, tender_id: schemas.PathId, session: SessionDep, saved: bool = False,
                  imported: int | None = None):
    context = views.tender_detail(session, tender_id)
    context |= {"form": views.tender_form(context["tender"]), "saved": saved, "lot_form": views.LOT_DEFAULTS}
    if imported is not None:
        context["imported"] = pages_intake.committed_import(session, tender_id, imported)
    return render(request, "tenders/detail.html", context)


@router.post("/tenders/{tender_id:int}", dependencies=[BUYER])
def edit_tender(request: Request, tender_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Title, status and cost basis (with its revision), saved against the version in the form."""
    result = attempt(session, lambda: service.patch_tender(
        session, tender_id, schemas.TenderPatch.model_validate(_tender_patch(form))))
    if not isinstance(result, Refused):
        if not is_htmx(request):
            return see_other(request, f"/tenders/{tender_id}?saved=1")
        context = views.tender_detail(session, tender_id)
        context |= {"form": views.tender_form(context["tender"]), "saved": True}
        return render(request, "tenders/_header.html", context)
    context = views.tender_detail(session, tender_id)
    if result.conflict is not None:
        # Keep what was typed, but against the stored version: saving again is a deliberate overwrite.
        form = form | {"version": str(context["tender"].version)}
    context |= {"form": form, "errors": result.errors, "conflict": result.conflict, "lot_form": views.LOT_DEFAULTS}
    return page_or_partial(request, "tenders/detail.html", "tenders/_header.html", context, result.status)


@router.post("/tenders/{tender_id:int}/lots", dependencies=[BUYER])
def add_lot(request: Request, tender_id: schemas.PathId, session: SessionDep, form: FormDep, lists: FormListsDep):
    tables = lists.get("limit_tables", [])
    data = create_data(form, schemas.LotCreate) | {"limit_tables": tables}
    result = attempt(session, lambda: service.add_lot(session, tender_id, schemas.LotCreate.model_validate(data)),
                     conflict_on_form=False)
    if not isinstance(result, Refused):
        if not is_htmx(request):
            return see_other(request, f"/tenders/{tender_id}")
        context = views.tender_detail(session, tender_id) | {"lot_form": views.LOT_DEFAULTS}
        return render(request, "tenders/_lots.html", context)
    context = views.tender_detail(session, tender_id)
    context |= {"form": views.tender_form(context["tender"]), "lot_form": form | {"limit_tables": tables},
                "lot_errors": result.errors}
    return page_or_partial(request, "tenders/detail.html", "tenders/_lots.html", context, status_code=422)
