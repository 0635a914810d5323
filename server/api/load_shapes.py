"""JSON API: load shapes (typical days or a metered year)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Body, File, Form, UploadFile

from server import schemas
from server.api.responses import FILE_REFUSED
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.services import load_shapes as service

router = APIRouter(prefix="/load-shapes", tags=["load shapes"])


@router.post("", status_code=201, response_model=schemas.LoadShapeOut, dependencies=[PLANNER])
def create_load_shape(session: SessionDep, data: schemas.LoadShapeCreate = Body()):
    """A shape from typical days (``kind: daily``) or from a year of hourly values (``kind: hourly``)."""
    return service.load_shape_out(service.create_load_shape(session, data))


@router.post("/import", status_code=201, response_model=schemas.LoadShapeOut, dependencies=[PLANNER],
             responses=FILE_REFUSED)
def import_load_shape(
    session: SessionDep,
    name: Annotated[str, Form(max_length=120)],
    file: Annotated[UploadFile, File(description="CSV or XLSX: timestamp, load (or kw/kva/pu), unit, power_factor")],
    unit: Annotated[str, Form()] = "kva",
    fill_gaps_up_to_hours: Annotated[int, Form(ge=0, le=24)] = 0,
):
    """Import a metered year of hourly load; a file with any problem is refused whole."""
    content = file.file.read()
    shape = service.import_load_shape(session, name, file.filename or "", content, unit, fill_gaps_up_to_hours)
    return service.load_shape_out(shape)


@router.get("", response_model=list[schemas.LoadShapeOut], dependencies=[ANY_ROLE])
def list_load_shapes(session: SessionDep):
    return [service.load_shape_out(s) for s in service.list_load_shapes(session)]


@router.get("/{shape_id}", response_model=schemas.LoadShapeOut, dependencies=[ANY_ROLE])
def get_load_shape(shape_id: schemas.PathId, session: SessionDep):
    return service.load_shape_out(service.get_load_shape(session, shape_id))


@router.get("/{shape_id}/values", response_model=schemas.LoadShapeValuesOut, dependencies=[ANY_ROLE])
def get_load_shape_values(shape_id: schemas.PathId, session: SessionDep):
    """The hourly values and the load duration curve."""
    return service.load_shape_values(service.get_load_shape(session, shape_id))
