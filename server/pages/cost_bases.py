"""Pages: cost bases, their editor with a live preview of A, B, C, and their revisions."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from pydantic import TypeAdapter, ValidationError

from server import schemas
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.errors import Conflict, InvalidField
from server.pages import planning_views, views
from server.pages.basis_form import chosen_method
from server.pages.forms import FormDep, FormValues, conflict_errors, field_errors, full_inputs
from server.pages.templating import is_htmx, page_or_partial, render, see_other
from server.services import cost_bases as service

router = APIRouter()

_NEW_BASIS = TypeAdapter(schemas.CostBasisCreate)
_HEADER = ("name", "currency")


def _basis_data(form: FormValues) -> dict[str, Any]:
    """Name, currency, the method and every one of its inputs, as the schemas name them."""
    method = chosen_method(form.get("method"))
    header = {name: form.get(name, "") for name in _HEADER}
    return header | full_inputs(form, schemas.METHOD_MODELS[method]) | {"method": method}


def _typed(form: FormValues) -> dict[str, str]:
    return {key: value for key, value in form.items() if key not in _HEADER}


@router.get("/cost-bases", dependencies=[ANY_ROLE])
def cost_basis_list(request: Request, session: SessionDep):
    """The list and the new-basis form; htmx asks here for another method's boxes."""
    typed = dict(request.query_params)
    boxes = planning_views.with_warnings(views.editor_boxes(None, typed))
    if is_htmx(request):
        return render(request, "cost_bases/_method_inputs.html", boxes)
    return render(request, "cost_bases/list.html", views.cost_basis_list(session) | boxes | {"form": typed})


@router.post("/cost-bases", dependencies=[PLANNER])
def create_cost_basis(request: Request, session: SessionDep, form: FormDep):
    try:
        basis = service.create_cost_basis(session, _NEW_BASIS.validate_python(_basis_data(form)))
    except ValidationError as exc:
        errors = field_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {exc.field: exc.detail}
    else:
        return see_other(request, f"/cost-bases/{basis.id}")
    method = chosen_method(form.get("method"))
    boxes = planning_views.with_warnings(views.method_inputs(method, _typed(form), form.get("currency", ""), errors))
    context = views.cost_basis_list(session) | boxes | {"form": form, "errors": errors}
    return page_or_partial(request, "cost_bases/list.html", "cost_bases/_new_form.html", context, status_code=422)


@router.post("/cost-bases/preview", dependencies=[ANY_ROLE])
def preview_rates(request: Request, form: FormDep):
    """A, B, C for the inputs as typed; nothing is stored."""
    method = chosen_method(form.get("method"))
    values = full_inputs(form, schemas.METHOD_MODELS[method]) | {"method": method}
    currency = form.get("currency", "")
    preview = views.rates_preview(values)
    preview["warnings"] = planning_views.typed_warnings(values, currency) if preview["rates"] else []
    return render(request, "cost_bases/_preview.html", {"preview": preview, "currency": currency})


@router.get("/cost-bases/{cost_basis_id:int}", dependencies=[ANY_ROLE])
def cost_basis_detail(request: Request, cost_basis_id: schemas.PathId, session: SessionDep, saved: int | None = None):
    """The editor; htmx asks here for another method's boxes, keeping what was typed."""
    context = views.cost_basis_detail(session, cost_basis_id)
    typed = dict(request.query_params)
    boxes = planning_views.with_warnings(views.editor_boxes(context["basis"], typed))
    if is_htmx(request):
        return render(request, "cost_bases/_method_inputs.html", boxes)
    form = views.basis_form(context["basis"]) | {k: v for k, v in typed.items() if k in ("name", "currency", "version")}
    return render(request, "cost_bases/detail.html", context | boxes | {"form": form, "saved": saved})


@router.post("/cost-bases/{cost_basis_id:int}", dependencies=[PLANNER])
def revise_cost_basis(request: Request, cost_basis_id: schemas.PathId, session: SessionDep, form: FormDep):
    """Save: changed inputs make a new revision; a stale version saves nothing."""
    conflict = None
    try:
        patch = schemas.CostBasisPatch.model_validate(
            _basis_data(form) | {"version": form.get("version", ""), "change_reason": form.get("change_reason", "")}
        )
        basis = service.revise_cost_basis(session, cost_basis_id, patch)
    except ValidationError as exc:
        errors, status = field_errors(exc), 422
    except InvalidField as exc:
        views.discard(session)
        errors, status = {exc.field: exc.detail}, 422
    except Conflict as exc:
        views.discard(session)
        errors, status, conflict = conflict_errors(exc), 409, exc.current
    else:
        revision = basis.latest.revision
        if not is_htmx(request):
            return see_other(request, f"/cost-bases/{cost_basis_id}?saved={revision}")
        context = views.cost_basis_detail(session, cost_basis_id)
        context |= planning_views.with_warnings(views.editor_boxes(context["basis"], {}))
        context |= {"form": views.basis_form(context["basis"])}
        return render(request, "cost_bases/_body.html", context | {"saved": revision})
    context = views.cost_basis_detail(session, cost_basis_id)
    if conflict is not None:
        form = form | {"version": str(context["basis"].version)}
    method = chosen_method(form.get("method"))
    boxes = planning_views.with_warnings(views.method_inputs(method, _typed(form), form.get("currency", ""), errors))
    context |= boxes | {"form": form, "errors": errors, "conflict": conflict}
    return page_or_partial(request, "cost_bases/detail.html", "cost_bases/_body.html", context, status)
