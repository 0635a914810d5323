"""Read-only queries the planner's pages need beyond the shared services: which lots use a
load shape, and which loading prices each lot of a tender."""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from server import schemas
from server.services.loading import lot_rates
from server.services.tenders import get_tender
from server.storage.models import Lot, Tender


@dataclass(frozen=True)
class LotUse:
    lot_id: int
    lot_name: str
    tender_id: int
    tender_reference: str


def lots_using_shape(session: Session, shape_id: int) -> list[LotUse]:
    """Every lot that names this load shape, by tender reference and lot."""
    rows = session.execute(
        select(Lot.id, Lot.name, Tender.id, Tender.reference)
        .join(Tender, Lot.tender_id == Tender.id)
        .where(Lot.load_shape_id == shape_id)
        .order_by(Tender.reference, Lot.id)
    )
    return [LotUse(*row) for row in rows]


def tender_loadings(session: Session, tender_id: int) -> dict[int, schemas.LoadingOut]:
    """The loading that prices each lot's load loss under the tender's current revision."""
    tender = get_tender(session, tender_id)
    return {lot.id: lot_rates(lot)[1] for lot in tender.lots}
