"""Pages: how sure a lot's ranking is. Break-even rates, the winner over a map of rates, a tornado
of the cost basis inputs, and Monte Carlo runs on the job queue (polled for progress, cancelled by
whoever started them or an admin). Everyone may look; a run stores only itself, never a change to
the tender."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import RedirectResponse

from server import schemas
from server.auth import ANY_ROLE
from server.deps import SessionDep
from server.errors import Conflict, InvalidField
from server.pages import robustness_views, views
from server.pages.forms import FormDep
from server.pages.templating import is_htmx, page_or_partial, render, see_other
from server.services import pages_robustness
from server.services import robustness as service

router = APIRouter()


def _query(request: Request) -> dict[str, str]:
    return {key: value.strip() for key, value in request.query_params.items()}


def _page(lot_id: int, run_id: int) -> str:
    return f"/lots/{lot_id}/robustness?run={run_id}#monte-carlo"


@router.get("/lots/{lot_id:int}/robustness", dependencies=[ANY_ROLE])
def robustness(request: Request, lot_id: schemas.PathId, session: SessionDep, run: schemas.OptionalQueryId = None):
    """Every section at its defaults, and the lot's latest Monte Carlo run (or the one asked)."""
    return render(request, "robustness/page.html", robustness_views.page_context(session, lot_id, run_id=run))


@router.get("/lots/{lot_id:int}/robustness/rate-map", dependencies=[ANY_ROLE])
def rate_map(request: Request, lot_id: schemas.PathId, session: SessionDep):
    """The rate map over the ranges asked; nothing is stored, so the form is a GET and a map is an address."""
    context = robustness_views.page_context(session, lot_id, rate_form=_query(request))
    status = 422 if context["rate_errors"] else 200
    return page_or_partial(request, "robustness/page.html", "robustness/_rate_map.html", context, status)


@router.get("/lots/{lot_id:int}/robustness/tornado", dependencies=[ANY_ROLE])
def tornado(request: Request, lot_id: schemas.PathId, session: SessionDep):
    """The tornado over the low and high values asked; a GET form like the rate map's."""
    context = robustness_views.page_context(session, lot_id, tornado_form=_query(request))
    status = 422 if context["tornado_errors"] else 200
    return page_or_partial(request, "robustness/page.html", "robustness/_tornado.html", context, status)


@router.post("/lots/{lot_id:int}/robustness/monte-carlo", dependencies=[ANY_ROLE])
def start_monte_carlo(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Queue a Monte Carlo run; htmx gets the section back with the run's place in the queue, then its progress."""
    mc, errors = robustness_views.monte_carlo_request(form)
    status = 422
    if mc is not None:
        try:
            run = service.start_run(session, lot_id, mc)
        except InvalidField as exc:
            views.discard(session)
            errors = {robustness_views.error_key(exc.field): exc.detail}
        except Conflict as exc:  # too many runs of this person's waiting or running
            views.discard(session)
            errors, status = {"form": exc.message}, 409
        else:
            if not is_htmx(request):
                return see_other(request, _page(lot_id, run.id))
            context = robustness_views.page_context(session, lot_id, mc_form=form, run_id=run.id,
                                                    monte_carlo_only=True)
            return render(request, "robustness/_monte_carlo.html", context)
    context = robustness_views.page_context(session, lot_id, mc_form=form, mc_errors=errors,
                                            monte_carlo_only=is_htmx(request))
    return page_or_partial(request, "robustness/page.html", "robustness/_monte_carlo.html", context, status)


@router.get("/monte-carlo-runs/{run_id:int}/progress", dependencies=[ANY_ROLE])
def run_progress(request: Request, run_id: schemas.PathId, session: SessionDep):
    """The run's place in the queue or progress (htmx polls it every second until it stops), or its results once
    done; a run that has stopped also sends the section's start button, enabled again."""
    view = pages_robustness.run_view(session, run_id)
    if not is_htmx(request):
        return RedirectResponse(_page(view.run.lot_id, run_id), status_code=303)
    return render(request, "robustness/_run.html", robustness_views.run_context(view) | {"send_start": True})


@router.post("/monte-carlo-runs/{run_id:int}/cancel", dependencies=[ANY_ROLE])
def cancel_run(request: Request, run_id: schemas.PathId, session: SessionDep):
    """Cancel a run (its owner or an admin only, else 403): a queued one at once, a running one between two
    batches of draws. A finished run keeps its state."""
    principal = request.state.principal
    view = pages_robustness.cancel_run(session, run_id, principal.username, "admin" in principal.roles)
    if not is_htmx(request):
        return see_other(request, _page(view.run.lot_id, run_id))
    return render(request, "robustness/_run.html", robustness_views.run_context(view) | {"send_start": True})
