"""JSON API: tenders and lots."""

from __future__ import annotations

from fastapi import APIRouter, Response

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.services import tenders as service

router = APIRouter(tags=["tenders"])


@router.post("/tenders", status_code=201, response_model=schemas.TenderOut, dependencies=[BUYER])
def create_tender(data: schemas.TenderCreate, session: SessionDep):
    return service.tender_out(session, service.create_tender(session, data))


@router.get("/tenders", response_model=list[schemas.TenderOut], dependencies=[ANY_ROLE])
def list_tenders(session: SessionDep):
    return [service.tender_out(session, t) for t in service.list_tenders(session)]


@router.get("/tenders/{tender_id}", response_model=schemas.TenderOut, dependencies=[ANY_ROLE])
def get_tender(tender_id: schemas.PathId, session: SessionDep):
    return service.tender_out(session, service.get_tender(session, tender_id))


@router.patch("/tenders/{tender_id}", response_model=schemas.TenderOut, dependencies=[BUYER])
def patch_tender(tender_id: schemas.PathId, patch: schemas.TenderPatch, session: SessionDep):
    return service.tender_out(session, service.patch_tender(session, tender_id, patch))


@router.delete("/tenders/{tender_id}", status_code=204, dependencies=[BUYER])
def delete_tender(tender_id: schemas.PathId, session: SessionDep):
    service.delete_tender(session, tender_id)
    return Response(status_code=204)


@router.post("/tenders/{tender_id}/lots", status_code=201, response_model=schemas.LotOut, dependencies=[BUYER])
def add_lot(tender_id: schemas.PathId, data: schemas.LotCreate, session: SessionDep):
    return service.lot_out(service.add_lot(session, tender_id, data))


@router.get("/lots/{lot_id}", response_model=schemas.LotOut, dependencies=[ANY_ROLE])
def get_lot(lot_id: schemas.PathId, session: SessionDep):
    lot = service.get_lot(session, lot_id)
    return service.lot_out(lot, service.offer_counts(session, [lot.id]).get(lot.id, 0))


@router.patch("/lots/{lot_id}", response_model=schemas.LotOut, dependencies=[BUYER])
def patch_lot(lot_id: schemas.PathId, patch: schemas.LotPatch, session: SessionDep):
    return service.lot_out(service.patch_lot(session, lot_id, patch))


@router.delete("/lots/{lot_id}", status_code=204, dependencies=[BUYER])
def delete_lot(lot_id: schemas.PathId, session: SessionDep):
    service.delete_lot(session, lot_id)
    return Response(status_code=204)
