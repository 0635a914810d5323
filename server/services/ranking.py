"""Use case: rank a lot's offers by total owning cost under its tender's cost basis."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.rates import CapitalisationRates
from domain.toc import OfferLosses, rank_offers
from server import schemas
from server.services.tenders import get_lot
from server.storage.models import Offer


def lot_ranking(session: Session, lot_id: int) -> schemas.RankingOut:
    lot = get_lot(session, lot_id)
    tender = lot.tender
    revision = tender.cost_basis_revision
    rates = CapitalisationRates(
        no_load_rate_per_kw=revision.no_load_rate_per_kw,
        load_rate_per_kw=revision.load_rate_per_kw,
        aux_rate_per_kw=revision.aux_rate_per_kw,
    )
    offers = session.scalars(select(Offer).where(Offer.lot_id == lot.id)).all()
    by_id = {offer.id: offer for offer in offers}
    ranked = rank_offers(
        [
            OfferLosses(
                offer_id=o.id,
                bidder=o.bidder,
                unit_price=o.unit_price,
                no_load_loss_w=o.no_load_loss_w,
                load_loss_w=o.load_loss_w,
                aux_loss_w=o.aux_loss_w,
            )
            for o in offers
        ],
        rates,
        quantity=lot.quantity,
        rating_kva=lot.rating_kva,
    )
    rows = [
        schemas.RankingRowOut(
            rank=r.rank,
            offer_id=r.offer_id,
            bidder=r.bidder,
            unit_price=r.unit_price,
            no_load_loss_w=by_id[r.offer_id].no_load_loss_w,
            load_loss_w=by_id[r.offer_id].load_loss_w,
            aux_loss_w=by_id[r.offer_id].aux_loss_w,
            capitalised_no_load=r.capitalised_no_load,
            capitalised_load=r.capitalised_load,
            capitalised_aux=r.capitalised_aux,
            toc_per_unit=r.toc_per_unit,
            toc_total=r.toc_total,
            efficiency_25_pct=r.efficiency_pct[25],
            efficiency_50_pct=r.efficiency_pct[50],
            efficiency_75_pct=r.efficiency_pct[75],
            efficiency_100_pct=r.efficiency_pct[100],
        )
        for r in ranked
    ]
    return schemas.RankingOut(
        lot_id=lot.id,
        tender_id=tender.id,
        currency=tender.currency,
        quantity=lot.quantity,
        cost_basis_id=revision.cost_basis_id,
        cost_basis_name=revision.cost_basis.name,
        cost_basis_revision=revision.revision,
        no_load_rate_per_kw=rates.no_load_rate_per_kw,
        load_rate_per_kw=rates.load_rate_per_kw,
        aux_rate_per_kw=rates.aux_rate_per_kw,
        rows=rows,
    )
