"""Pages: a cost basis's revisions compared, previewed on the open lots, and their workings;
and moving a tender to another revision of its basis."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from pydantic import ValidationError

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.errors import Conflict, InvalidField
from server.pages import planning_views, views
from server.pages.forms import FormDep, field_errors
from server.pages.templating import page_or_partial, render, see_other
from server.services import revisions as service
from server.services import tenders

router = APIRouter()


def _basis(session, cost_basis_id: int) -> dict[str, Any]:
    return views.cost_basis_detail(session, cost_basis_id)


@router.get("/cost-bases/{cost_basis_id:int}/revisions/compare", dependencies=[ANY_ROLE])
def compare_revisions(request: Request, cost_basis_id: schemas.PathId, session: SessionDep):
    """What changed between two revisions; htmx shows it under the revisions, a browser on its own page."""
    context = _basis(session, cost_basis_id)
    basis = context["basis"]
    chosen, errors = planning_views.compare_choice(basis, dict(request.query_params))
    rows, reasons, status = None, [], 422
    if not errors:
        diff = service.diff_revisions(session, cost_basis_id, int(chosen["revision"]), int(chosen["against"]))
        rows, status = planning_views.diff_rows(diff, basis), 200
        reasons = planning_views.change_reasons(basis, diff.revision, diff.against)
    context |= {"compare": chosen, "compare_errors": errors, "diff_rows": rows, "reasons": reasons}
    return page_or_partial(request, "cost_bases/revision_compare.html", "cost_bases/_revision_diff.html",
                           context, status)


@router.get("/cost-bases/{cost_basis_id:int}/revisions/{revision:int}/preview", dependencies=[ANY_ROLE])
def preview_revision(request: Request, cost_basis_id: schemas.PathId, revision: schemas.PathId, session: SessionDep):
    """Every open lot on this basis ranked under the revision, beside its ranking now; nothing is stored."""
    preview = service.preview_revision(session, cost_basis_id, revision)
    context = _basis(session, cost_basis_id)
    context |= {
        "preview": preview,
        "summary": planning_views.preview_summary(preview),
        "target": planning_views.revision_by_number(context["basis"], revision),
    }
    return page_or_partial(request, "cost_bases/revision_preview.html", "cost_bases/_revision_preview.html", context)


@router.get("/cost-bases/{cost_basis_id:int}/revisions/{revision:int}/workings", dependencies=[ANY_ROLE])
def revision_workings(request: Request, cost_basis_id: schemas.PathId, revision: schemas.PathId, session: SessionDep):
    """How the revision's rates were made: inputs, every term and the year-by-year table."""
    out = service.workings(session, cost_basis_id, revision)
    return render(request, "cost_bases/workings.html", {
        "work": out,
        "inputs": planning_views.workings_inputs(out),
        "symbols": planning_views.workings_symbols(out),
        "groups": planning_views.term_groups(out),
        "table": planning_views.workings_table(out) if out.table else None,
    })


@router.post("/tenders/{tender_id:int}/revision", dependencies=[BUYER])
def move_tender(request: Request, tender_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Move the tender to another revision of its basis: an audited tender edit that re-prices the open lots
    (an awarded lot keeps the revision of its award)."""
    status = 422
    try:
        patch = schemas.TenderPatch.model_validate(
            {"version": form.get("version", ""), "cost_basis_revision": form.get("cost_basis_revision", "")}
        )
        tenders.patch_tender(session, tender_id, patch)
    except ValidationError as exc:
        errors = field_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {exc.field: exc.detail}
    except Conflict as exc:
        views.discard(session)
        errors, status = {"form": exc.message}, 409
    else:
        return see_other(request, f"/tenders/{tender_id}?saved=1")
    context = views.tender_detail(session, tender_id)
    # After a refusal the form carries the stored version: trying again is a deliberate choice.
    move_form = form | {"version": str(context["tender"].version)}
    context |= {
        "form": views.tender_form(context["tender"]), "lot_form": views.LOT_DEFAULTS,
        "move_form": move_form, "move_errors": errors,
    }
    return page_or_partial(request, "tenders/detail.html", "tenders/_revision_move.html", context, status)
