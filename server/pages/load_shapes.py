"""Pages: load shapes, new ones from typical days or a metered year, and one shape's figures."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from pydantic import ValidationError
from starlette.datastructures import UploadFile

from server import schemas
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.errors import ImportRefused, InvalidField
from server.pages import planning_views as views
from server.pages import shape_form
from server.pages.forms import FormListsDep
from server.pages.templating import page_or_partial, render, see_other
from server.pages.views import discard
from server.services import load_shapes as service

router = APIRouter()


async def read_upload(request: Request) -> tuple[dict[str, str], str, bytes]:
    """The import form's text boxes, and the chosen file's name and content ("" and b"" for none)."""
    form = await request.form()
    fields = {key: value.strip() for key, value in form.items() if isinstance(value, str)}
    upload = form.get("file")
    if isinstance(upload, UploadFile) and upload.filename:
        return fields, upload.filename, await upload.read()
    return fields, "", b""


UploadDep = Annotated[tuple[dict[str, str], str, bytes], Depends(read_upload)]


def _list_page(session, **parts: Any) -> dict[str, Any]:
    """The list page: the shapes, and both forms as typed (or as first shown)."""
    daily = parts.pop("daily", None) or shape_form.daily_defaults()
    errors = parts.pop("daily_errors", {})
    return views.shape_list(session) | {
        "daily": daily,
        "daily_errors": errors,
        "cell_problems": shape_form.cell_problems(errors, daily),
        "month_choices": shape_form.MONTH_CHOICES,
        "seasons": range(shape_form.SEASONS),
        "import_form": parts.pop("import_form", None) or {"unit": "kva", "fill_gaps_up_to_hours": "0"},
        "import_errors": parts.pop("import_errors", {}),
        "refusal": parts.pop("refusal", None),
    } | parts


@router.get("/load-shapes", dependencies=[ANY_ROLE])
def shape_list(request: Request, session: SessionDep):
    return render(request, "load_shapes/list.html", _list_page(session))


@router.post("/load-shapes", dependencies=[PLANNER])
def create_daily_shape(request: Request, session: SessionDep, lists: FormListsDep):
    """A shape from typical days; a season with no month ticked is left out."""
    typed = shape_form.daily_typed(lists)
    data, kept = shape_form.daily_data(typed)
    try:
        shape = service.create_load_shape(session, schemas.DailyShapeCreate.model_validate(data))
    except ValidationError as exc:
        errors = shape_form.daily_errors(exc, kept)
    except InvalidField as exc:
        discard(session)
        errors = {shape_form.daily_service_error(exc.field, kept): exc.detail}
    else:
        return see_other(request, f"/load-shapes/{shape.id}")
    context = _list_page(session, daily=typed, daily_errors=errors)
    return page_or_partial(request, "load_shapes/list.html", "load_shapes/_daily_form.html", context, 422)


@router.post("/load-shapes/import", dependencies=[PLANNER])
def import_shape(request: Request, session: SessionDep, upload: UploadDep):
    """A metered year from CSV or XLSX: all or nothing, every problem named by row and column."""
    fields, filename, content = upload
    typed = {k: fields.get(k, "") for k in ("name", "unit", "fill_gaps_up_to_hours")}
    errors: dict[str, str] = {}
    refusal = None
    gaps = typed["fill_gaps_up_to_hours"] or "0"
    if not gaps.isdigit():
        errors["fill_gaps_up_to_hours"] = "must be a whole number of hours from 0 to 24"
    if not filename:
        errors["file"] = "choose a CSV or XLSX file"
    if not errors:
        try:
            shape = service.import_load_shape(session, typed["name"], filename, content, typed["unit"], int(gaps))
        except ImportRefused as exc:
            discard(session)
            refusal = {"message": exc.message, "filename": filename, "problems": shape_form.problem_rows(exc.problems)}
        except InvalidField as exc:
            discard(session)
            errors[exc.field] = exc.detail
        else:
            return see_other(request, f"/load-shapes/{shape.id}")
    context = _list_page(session, import_form=typed, import_errors=errors, refusal=refusal)
    return page_or_partial(request, "load_shapes/list.html", "load_shapes/_import_form.html", context, 422)


@router.get("/load-shapes/{shape_id:int}", dependencies=[ANY_ROLE])
def shape_detail(request: Request, shape_id: schemas.PathId, session: SessionDep):
    return render(request, "load_shapes/detail.html", views.shape_detail(session, shape_id))
