"""Pages: the installed fleet (its losses at a cost basis, where the cost sits, loading findings),
the inventory import (upload, preview, commit), the replacement shortlist and the typical-loss
table. Planners write; everyone reads."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse, Response
from pydantic import ValidationError

from server import schemas
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.errors import Conflict, ImportRefused, InvalidField
from server.pages import fleet_views, views
from server.pages.forms import FormDep, field_errors
from server.pages.intake import NO_FILE, UploadDep
from server.pages.templating import page_or_partial, render, see_other
from server.services import fleet as service

router = APIRouter()


def _query(request: Request) -> dict[str, str]:
    return {key: value.strip() for key, value in request.query_params.items()}


@router.get("/fleet", dependencies=[ANY_ROLE])
def fleet(request: Request, session: SessionDep, imported: schemas.OptionalQueryId = None):
    """The view is a GET form: a chosen basis, grouping and loading limits are an address to share.
    A basis without energy prices (direct rates) is answered with its reason, as the API's 422."""
    query = _query(request)
    context = fleet_views.fleet_page(session, query)
    if imported is not None:
        context["imported"] = service.import_out(service.get_import(session, imported))
    refused = context["overview"].basis_problem is not None and "cost_basis_id" in query
    status = 422 if context["view_errors"] or refused else 200
    return page_or_partial(request, "fleet/page.html", "fleet/_view.html", context, status)


@router.post("/fleet/imports", dependencies=[PLANNER])
def upload_fleet(request: Request, session: SessionDep, form: FormDep, upload: UploadDep):
    """Check every row of the inventory file and show the preview; nothing is written yet."""
    loss_factor, errors = fleet_views.import_default_loss_factor(form)
    refused = None
    if not errors:
        try:
            if upload is None:
                raise ImportRefused(NO_FILE, [])
            staged = service.stage_import(session, upload.filename, upload.content, loss_factor)
        except ImportRefused as exc:
            views.discard(session)
            refused = exc
        else:
            return see_other(request, f"/fleet/imports/{staged.id}")
    context = fleet_views.fleet_page(session, {}, import_form=form, import_errors=errors, import_refused=refused)
    return page_or_partial(request, "fleet/page.html", "fleet/_import.html", context, 422)


@router.get("/fleet/imports/{import_id:int}", dependencies=[ANY_ROLE])
def fleet_import(request: Request, import_id: schemas.PathId, session: SessionDep):
    """The preview: counts over every row, and each problem with its rows and column."""
    return render(request, "fleet/import.html", fleet_views.import_preview(session, import_id))


@router.post("/fleet/imports/{import_id:int}/commit", dependencies=[PLANNER])
def commit_fleet_import(request: Request, import_id: schemas.PathId, session: SessionDep):
    """Write every row at once and go to the fleet; a preview with problems writes nothing."""
    try:
        service.commit_import(session, import_id)
    except (ImportRefused, Conflict) as exc:
        views.discard(session)
        context = fleet_views.import_preview(session, import_id, commit_error=exc.message)
        return render(request, "fleet/import.html", context, exc.status_code)
    return see_other(request, f"/fleet?imported={import_id}")


def _shortlist(session, form: dict[str, str], limit: int):
    """The shortlist asked for, or the messages beside the boxes that stop it."""
    try:
        request = schemas.ShortlistIn.model_validate(fleet_views.shortlist_data(form, limit))
        return service.fleet_shortlist(session, request)[0], {}
    except ValidationError as exc:
        return None, field_errors(exc)
    except InvalidField as exc:
        return None, {exc.field: exc.detail}


@router.get("/fleet/shortlist", dependencies=[ANY_ROLE])
def shortlist(request: Request, session: SessionDep):
    """Units worth replacing by a right-sized unit; computed when the form is sent, never stored."""
    query = _query(request)
    choices = fleet_views.shortlist_choices(session)
    form = fleet_views.shortlist_defaults(choices["bases"]) | query
    context = choices | {"form": form, "errors": {}, "result": None, "limit": fleet_views.SHORTLIST_ROWS}
    if query:
        context["result"], context["errors"] = _shortlist(session, form, fleet_views.SHORTLIST_ROWS)
        context["csv_url"] = fleet_views.shortlist_csv_url(form)
    status = 422 if context["errors"] else 200
    return page_or_partial(request, "fleet/shortlist.html", "fleet/_shortlist.html", context, status)


@router.get("/fleet/shortlist.csv", dependencies=[ANY_ROLE])
def shortlist_csv(request: Request, session: SessionDep):
    """Every unit on the shortlist as CSV; inputs that cannot be used go back to the form."""
    query = _query(request)
    result, errors = _shortlist(session, query, fleet_views.SHORTLIST_CSV_ROWS)
    if result is None:
        return RedirectResponse(request.url.path.removesuffix(".csv") + "?" + request.url.query, status_code=303)
    return Response(service.shortlist_csv(result), media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": 'attachment; filename="fleet-shortlist.csv"'})


@router.get("/fleet/typical-losses", dependencies=[ANY_ROLE])
def typical_losses(request: Request, session: SessionDep, saved: bool = False):
    return render(request, "fleet/typical_losses.html", fleet_views.typical_page(session, saved=saved))


@router.post("/fleet/typical-losses", dependencies=[PLANNER])
def save_typical_losses(request: Request, session: SessionDep, form: FormDep):
    """Replace the whole table with the rows typed; later imports estimate missing losses from it."""
    lines: list[int] = []
    try:
        rows, lines = fleet_views.parse_typical_rows(form.get("rows", ""))
        data = schemas.TypicalLossesIn.model_validate(
            {"name": form.get("name", ""), "source": form.get("source", ""), "rows": rows})
        service.set_typical_losses(session, data.name, data.source, data.rows)
    except fleet_views.RowsText as exc:
        errors = {"rows": str(exc)}
    except ValidationError as exc:
        errors = fleet_views.typical_errors(exc, lines)
    except InvalidField as exc:
        views.discard(session)
        errors = fleet_views.typical_service_error(exc.detail, lines)
    else:
        return see_other(request, "/fleet/typical-losses?saved=1")
    context = fleet_views.typical_page(session, edit_form=form, edit_errors=errors)
    return render(request, "fleet/typical_losses.html", context, 422)
