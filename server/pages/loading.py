"""Page: set a lot's own loading (load shape, initial peak, growth) on the lot page."""

from __future__ import annotations

from fastapi import APIRouter, Request
from pydantic import ValidationError

from server import schemas
from server.auth import BUYER
from server.deps import SessionDep
from server.errors import Conflict, InvalidField
from server.pages import views
from server.pages.forms import FormDep, conflict_errors, field_errors, patch_data
from server.pages.templating import RANKING_CHANGED, is_htmx, page_or_partial, render, see_other
from server.services import tenders as service

router = APIRouter()

LOADING_FIELDS = ["load_shape_id", "peak_load_pu", "load_growth_pct"]


@router.post("/lots/{lot_id:int}/loading", dependencies=[BUYER])
def save_loading(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Save the lot's loading against the version in the form; an empty box means the basis's."""
    conflict = None
    try:
        data = patch_data(form, schemas.LotCreate, LOADING_FIELDS) | {"version": form.get("version", "")}
        service.patch_lot(session, lot_id, schemas.LotPatch.model_validate(data))
    except ValidationError as exc:
        errors, status = field_errors(exc), 422
    except InvalidField as exc:
        views.discard(session)
        errors, status = {exc.field: exc.detail}, 422
    except Conflict as exc:
        views.discard(session)
        errors, status, conflict = conflict_errors(exc), 409, exc.current
    else:
        if not is_htmx(request):
            return see_other(request, f"/lots/{lot_id}")
        context = views.lot_detail(session, lot_id) | {"loading_saved": True}
        return render(request, "lots/_loading.html", context, headers=RANKING_CHANGED)
    context = views.lot_detail(session, lot_id)
    if conflict is not None:
        form = form | {"version": str(context["lot"].version)}
    context |= {"loading_form": form, "loading_errors": errors, "loading_conflict": conflict}
    return page_or_partial(request, "lots/detail.html", "lots/_loading.html", context, status)
