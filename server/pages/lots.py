"""Pages: a lot with its offers (edited in place) and their ranking by total owning cost."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.pages import views
from server.pages.forms import FormDep, Refused, attempt, create_data, patch_data
from server.pages.page_cache import cached_page
from server.pages.templating import RANKING_CHANGED, is_htmx, page_or_partial, render, see_other
from server.services import offers as service

router = APIRouter()


@router.get("/lots/{lot_id:int}", dependencies=[ANY_ROLE])
async def lot_detail(request: Request, lot_id: schemas.PathId, include_non_compliant: bool = False):
    return await cached_page(request, ("lot", lot_id, include_non_compliant), lambda session: render(
        request, "lots/detail.html", views.lot_detail(session, lot_id, include_non_compliant)))


@router.get("/lots/{lot_id:int}/ranking", dependencies=[ANY_ROLE])
def lot_ranking(request: Request, lot_id: schemas.PathId, session: SessionDep, include_non_compliant: bool = False):
    """The ranking section alone, fetched again by htmx whenever an offer changes (and with the
    non-compliant offers listed after the ranked ones when asked)."""
    if not is_htmx(request):
        shown = "?include_non_compliant=true" if include_non_compliant else ""
        return RedirectResponse(f"/lots/{lot_id}{shown}#ranking", status_code=303)
    return render(request, "lots/_ranking.html", views.ranking_view(session, lot_id, include_non_compliant))


@router.post("/lots/{lot_id:int}/offers", dependencies=[BUYER])
def add_offer(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep):
    result = attempt(session, lambda: service.add_offer(
        session, lot_id, schemas.OfferCreate.model_validate(create_data(form, schemas.OfferCreate))),
        conflict_on_form=False)
    if not isinstance(result, Refused):
        if not is_htmx(request):
            return see_other(request, f"/lots/{lot_id}")
        return render(request, "lots/_offers.html", views.lot_detail(session, lot_id), headers=RANKING_CHANGED)
    context = views.lot_detail(session, lot_id) | {"new_form": form, "new_errors": result.errors}
    return page_or_partial(request, "lots/detail.html", "lots/_offers.html", context, status_code=422)


@router.get("/offers/{offer_id:int}", dependencies=[ANY_ROLE])
def offer_row(request: Request, offer_id: schemas.PathId, session: SessionDep):
    """One offer as a table row (htmx swaps it back in when an edit is cancelled)."""
    context = views.offer_row(session, offer_id)
    if not is_htmx(request):
        return RedirectResponse(f"/lots/{context['offer'].lot_id}", status_code=303)
    return render(request, "lots/_offer_row.html", context)


@router.get("/offers/{offer_id:int}/edit", dependencies=[BUYER])
def edit_offer_form(request: Request, offer_id: schemas.PathId, session: SessionDep):
    context = views.offer_edit(session, offer_id)
    return page_or_partial(request, "lots/detail.html", "lots/_offer_edit_row.html", context)


@router.post("/offers/{offer_id:int}", dependencies=[BUYER])
def save_offer(request: Request, offer_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Save an edit made against the version in the form; a stale version changes nothing."""
    def save():
        data = patch_data(form, schemas.OfferCreate, views.OFFER_FIELDS) | {"version": form.get("version", "")}
        return service.patch_offer(session, offer_id, schemas.OfferPatch.model_validate(data))

    result = attempt(session, save)
    if not isinstance(result, Refused):
        if not is_htmx(request):
            return see_other(request, f"/lots/{result.lot_id}")
        return render(request, "lots/_offer_row.html", views.offer_row(session, offer_id), headers=RANKING_CHANGED)
    context = views.offer_edit(session, offer_id, form, result.errors, result.conflict)
    return page_or_partial(request, "lots/detail.html", "lots/_offer_edit_row.html", context, result.status)


@router.post("/offers/{offer_id:int}/delete", dependencies=[BUYER])
def delete_offer(request: Request, offer_id: schemas.PathId, session: SessionDep):
    lot_id = views.offer_row(session, offer_id)["offer"].lot_id
    service.delete_offer(session, offer_id)
    if not is_htmx(request):
        return see_other(request, f"/lots/{lot_id}")
    return render(request, "lots/_offers.html", views.lot_detail(session, lot_id), headers=RANKING_CHANGED)
