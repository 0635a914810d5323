"""JSON API: cost bases and their revisions."""

from __future__ import annotations

from fastapi import APIRouter, Body

from server import schemas
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.services import cost_bases as service


router = APIRouter(prefix="/cost-bases", tags=["cost bases"])


@router.post("", status_code=201, response_model=schemas.CostBasisDetailOut, dependencies=[PLANNER])
def create_cost_basis(session: SessionDep, data: schemas.CostBasisCreate = Body()):
    return service.cost_basis_out(service.create_cost_basis(session, data), detail=True)


@router.get("", response_model=list[schemas.CostBasisOut], dependencies=[ANY_ROLE])
def list_cost_bases(session: SessionDep):
    return [service.cost_basis_out(cb) for cb in service.list_cost_bases(session)]


@router.get("/{cost_basis_id}", response_model=schemas.CostBasisDetailOut, dependencies=[ANY_ROLE])
def get_cost_basis(cost_basis_id: int, session: SessionDep):
    return service.cost_basis_out(service.get_cost_basis(session, cost_basis_id), detail=True)


@router.patch("/{cost_basis_id}", response_model=schemas.CostBasisDetailOut, dependencies=[PLANNER])
def revise_cost_basis(cost_basis_id: int, patch: schemas.CostBasisPatch, session: SessionDep):
    """Change name, currency, method or inputs; changed inputs make a new revision."""
    return service.cost_basis_out(service.revise_cost_basis(session, cost_basis_id, patch), detail=True)
