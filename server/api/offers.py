"""JSON API: offers and the ranking of a lot."""

from __future__ import annotations

from fastapi import APIRouter, Request, Response

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep, cached
from server.exports import ranking_csv
from server.services import offers as service
from server.services import ranking
from server.services.ranking import lot_ranking

router = APIRouter(tags=["offers and ranking"])


@router.post("/lots/{lot_id}/offers", status_code=201, response_model=schemas.OfferOut, dependencies=[BUYER])
def add_offer(lot_id: schemas.PathId, data: schemas.OfferCreate, session: SessionDep):
    return service.offer_out(session, service.add_offer(session, lot_id, data))


@router.get("/lots/{lot_id}/offers", response_model=list[schemas.OfferOut], dependencies=[ANY_ROLE])
def list_offers(lot_id: schemas.PathId, session: SessionDep):
    return service.offers_out(session, service.list_offers(session, lot_id))


@router.get("/offers/{offer_id}", response_model=schemas.OfferOut, dependencies=[ANY_ROLE])
def get_offer(offer_id: schemas.PathId, session: SessionDep):
    return service.offer_out(session, service.get_offer(session, offer_id))


@router.patch("/offers/{offer_id}", response_model=schemas.OfferOut, dependencies=[BUYER])
def patch_offer(offer_id: schemas.PathId, patch: schemas.OfferPatch, session: SessionDep):
    return service.offer_out(session, service.patch_offer(session, offer_id, patch))


@router.delete("/offers/{offer_id}", status_code=204, dependencies=[BUYER])
def delete_offer(offer_id: schemas.PathId, session: SessionDep):
    service.delete_offer(session, offer_id)
    return Response(status_code=204)


@router.get("/lots/{lot_id}/ranking", response_model=schemas.RankingOut, dependencies=[ANY_ROLE])
async def get_ranking(request: Request, lot_id: schemas.PathId, include_non_compliant: bool = False):
    """Compliant offers ranked by total owning cost, lowest first, with the rates and loading used.

    Non-compliant offers are left out (counted in ``excluded``); with
    ``include_non_compliant=true`` they follow, unranked, with their reasons.
    """
    body = await cached(request, ranking.RANKINGS_JSON, (lot_id, include_non_compliant),
                        lambda session: ranking.lot_ranking_json(session, lot_id, include_non_compliant))
    return Response(body, media_type="application/json")


@router.get(
    "/lots/{lot_id}/ranking.csv",
    dependencies=[ANY_ROLE],
    response_class=Response,
    responses={200: {"content": {"text/csv": {}}, "description": "The ranking as CSV."}},
)
def get_ranking_csv(lot_id: schemas.PathId, session: SessionDep, include_non_compliant: bool = True):
    ranking = lot_ranking(session, lot_id, include_non_compliant)
    return Response(
        content=ranking_csv(ranking),
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="lot-{lot_id}-ranking.csv"'},
    )
