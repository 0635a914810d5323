"""JSON API: cost bases and their revisions."""

from __future__ import annotations

from fastapi import APIRouter, Body, Response

from server import schemas
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.services import cost_bases as service
from server.services import revisions

router = APIRouter(prefix="/cost-bases", tags=["cost bases"])


@router.post("", status_code=201, response_model=schemas.CostBasisDetailOut, dependencies=[PLANNER])
def create_cost_basis(session: SessionDep, data: schemas.CostBasisCreate = Body()):
    return service.cost_basis_out(service.create_cost_basis(session, data), detail=True)


@router.get("", response_model=list[schemas.CostBasisOut], dependencies=[ANY_ROLE])
def list_cost_bases(session: SessionDep):
    return [service.cost_basis_out(cb) for cb in service.list_cost_bases(session)]


@router.get("/{cost_basis_id}", response_model=schemas.CostBasisDetailOut, dependencies=[ANY_ROLE])
def get_cost_basis(cost_basis_id: schemas.PathId, session: SessionDep):
    return service.cost_basis_out(service.get_cost_basis(session, cost_basis_id), detail=True)


@router.patch("/{cost_basis_id}", response_model=schemas.CostBasisDetailOut, dependencies=[PLANNER])
def revise_cost_basis(cost_basis_id: schemas.PathId, patch: schemas.CostBasisPatch, session: SessionDep):
    """Change name, currency, method or inputs; changed inputs make a new revision."""
    return service.cost_basis_out(service.revise_cost_basis(session, cost_basis_id, patch), detail=True)


@router.get("/{cost_basis_id}/revisions", response_model=list[schemas.CostBasisRevisionOut], dependencies=[ANY_ROLE])
def list_revisions(cost_basis_id: schemas.PathId, session: SessionDep):
    """Every revision, oldest first, with who made it and when."""
    return [service.revision_out(r) for r in service.get_cost_basis(session, cost_basis_id).revisions]


@router.get("/{cost_basis_id}/revisions/{revision}/diff", response_model=schemas.RevisionDiffOut,
            dependencies=[ANY_ROLE])
def diff_revisions(cost_basis_id: schemas.PathId, revision: schemas.PathId, against: schemas.QueryId, session: SessionDep):
    """What changed from revision ``against`` to ``revision``."""
    return revisions.diff_revisions(session, cost_basis_id, revision, against)


@router.get("/{cost_basis_id}/revisions/{revision}/preview", response_model=schemas.RevisionPreviewOut,
            dependencies=[ANY_ROLE])
def preview_revision(cost_basis_id: schemas.PathId, revision: schemas.PathId, session: SessionDep):
    """Re-rank every open lot on this basis under ``revision``; nothing is stored."""
    return revisions.preview_revision(session, cost_basis_id, revision)


@router.get("/{cost_basis_id}/revisions/{revision}/workings", response_model=schemas.WorkingsOut,
            dependencies=[ANY_ROLE])
def revision_workings(cost_basis_id: schemas.PathId, revision: schemas.PathId, session: SessionDep):
    """How the rates were made: every term and the year-by-year present-worth table."""
    return revisions.workings(session, cost_basis_id, revision)


@router.get(
    "/{cost_basis_id}/revisions/{revision}/workings.csv",
    dependencies=[ANY_ROLE],
    response_class=Response,
    responses={200: {"content": {"text/csv": {}}, "description": "The year-by-year table as CSV."}},
)
def revision_workings_csv(cost_basis_id: schemas.PathId, revision: schemas.PathId, session: SessionDep):
    out = revisions.workings(session, cost_basis_id, revision)
    return Response(
        revisions.workings_csv(out),
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="cost-basis-{cost_basis_id}-r{revision}-workings.csv"'},
    )
