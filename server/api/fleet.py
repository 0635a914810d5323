"""JSON API: the installed fleet, its losses, loading findings and replacement shortlist."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, File, Form, Query, Response, UploadFile

from server import schemas
from server.api.responses import FILE_REFUSED
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.services import fleet as service

router = APIRouter(prefix="/fleet", tags=["fleet"])


def _csv(text: str, name: str) -> Response:
    return Response(text, media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f'attachment; filename="{name}"'})


@router.get("/template.csv", dependencies=[ANY_ROLE], response_class=Response,
            responses={200: {"content": {"text/csv": {}}, "description": "The inventory template."}})
def template():
    """Columns of the inventory file (one example row, invented)."""
    return _csv(service.TEMPLATE, "fleet-template.csv")


@router.post("/import", status_code=201, response_model=schemas.FleetImportOut, dependencies=[PLANNER],
             responses=FILE_REFUSED)
def import_fleet(
    session: SessionDep,
    file: Annotated[UploadFile, File(description="CSV or XLSX with the template's columns")],
    default_loss_factor: Annotated[float | None, Form(ge=0, le=1)] = None,
    commit: Annotated[bool, Form(description="Commit at once when the file is clean.")] = False,
):
    """Check an inventory file and keep it for a preview; with ``commit`` write it at once.

    Re-importing updates units by ``asset_id``. Missing losses are estimated from the
    typical-loss table and marked estimated. A file with any problem stores nothing.
    """
    staged = service.stage_import(session, file.filename or "", file.file.read(), default_loss_factor, commit)
    return service.import_out(staged)


@router.get("/imports/{import_id}", response_model=schemas.FleetImportOut, dependencies=[ANY_ROLE])
def get_import(import_id: schemas.PathId, session: SessionDep):
    return service.import_out(service.get_import(session, import_id))


@router.post("/imports/{import_id}/commit", response_model=schemas.FleetImportOut, dependencies=[PLANNER],
             responses=FILE_REFUSED)
def commit_import(import_id: schemas.PathId, session: SessionDep):
    """Write the previewed file: every row, or none."""
    return service.import_out(service.commit_import(session, import_id))


@router.post("/units", status_code=201, response_model=schemas.FleetUnitOut, dependencies=[PLANNER])
def create_unit(data: schemas.FleetUnitCreate, session: SessionDep):
    return service.unit_out(service.create_unit(session, data))


@router.get("/units", response_model=schemas.FleetUnitsOut, dependencies=[ANY_ROLE])
def list_units(session: SessionDep, region: str | None = None, site: str | None = None,
               offset: Annotated[int, Query(ge=0)] = 0, limit: Annotated[int, Query(ge=1, le=1000)] = 100):
    total, units = service.list_units(session, region, site, offset, limit)
    return schemas.FleetUnitsOut(total=total, offset=offset, units=[service.unit_out(u) for u in units])


@router.get("/units.csv", dependencies=[ANY_ROLE], response_class=Response,
            responses={200: {"content": {"text/csv": {}}, "description": "Every unit with its annual losses."}})
def units_csv(cost_basis_id: schemas.QueryId, session: SessionDep):
    return _csv(service.units_csv(session, cost_basis_id), "fleet-losses.csv")


@router.get("/summary", response_model=schemas.FleetSummaryOut, dependencies=[ANY_ROLE])
def summary(cost_basis_id: schemas.QueryId, session: SessionDep, region: str | None = None):
    """This year's loss energy, loss cost and CO2 of the whole fleet at a cost basis's prices."""
    return service.fleet_summary(session, cost_basis_id, region)


@router.get("/groups", response_model=schemas.FleetGroupsOut, dependencies=[ANY_ROLE])
def groups(cost_basis_id: schemas.QueryId, session: SessionDep,
           by: Annotated[str, Query(description="region, site, rating, vintage or insulation")] = "region"):
    """The same totals by group, largest loss cost first (a Pareto of where the cost sits)."""
    return service.fleet_groups(session, cost_basis_id, by)


@router.get("/loading", response_model=schemas.FleetLoadingOut, dependencies=[ANY_ROLE])
def loading(session: SessionDep, max_loading_pu: Annotated[float, Query(gt=0, le=5)] = 1.0,
            min_loading_pu: Annotated[float, Query(ge=0, le=5)] = 0.3,
            limit: Annotated[int, Query(ge=1, le=10_000)] = 200):
    """Units loaded above the limit (overloaded) or far below it (oversized)."""
    return service.fleet_loading(session, max_loading_pu, min_loading_pu, limit)


@router.post("/shortlist", response_model=schemas.ShortlistOut, dependencies=[ANY_ROLE])
def shortlist(request: schemas.ShortlistIn, session: SessionDep):
    """Units worth replacing by a right-sized unit, by net present value; computed, not stored."""
    return service.fleet_shortlist(session, request)[0]


@router.post("/shortlist.csv", dependencies=[ANY_ROLE], response_class=Response,
             responses={200: {"content": {"text/csv": {}}, "description": "The shortlist as CSV."}})
def shortlist_csv(request: schemas.ShortlistIn, session: SessionDep):
    return _csv(service.shortlist_csv(service.fleet_shortlist(session, request)[0]), "fleet-shortlist.csv")


@router.get("/typical-losses", dependencies=[ANY_ROLE])
def get_typical_losses(session: SessionDep) -> dict:
    """The table that estimates missing losses by insulation, vintage and rating."""
    return service.typical_losses_out(service.typical_losses(session))


@router.put("/typical-losses", dependencies=[PLANNER])
def put_typical_losses(data: schemas.TypicalLossesIn, session: SessionDep) -> dict:
    """Replace the typical-loss table with your utility's data (used by later imports)."""
    return service.typical_losses_out(service.set_typical_losses(session, data.name, data.source, data.rows))
