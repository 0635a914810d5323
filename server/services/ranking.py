"""Use case: rank a lot's offers by total owning cost under its tender's cost basis."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.limits import is_compliant
from domain.toc import OfferLosses, rank_offers
from server import schemas
from server.errors import Conflict
from server.services.compliance import all_tables, offer_findings, reason
from server.services.loading import lot_rates
from server.services.tenders import get_lot
from server.storage.generation import GenerationCache
from server.storage.models import CostBasisRevision, Lot, Offer, Tender


def price_in_tender_currency(offer: Offer, tender: Tender) -> float:
    """The offer's price converted at the tender's fixed exchange rate."""
    if not offer.currency or offer.currency == tender.currency:
        return offer.unit_price
    rate = (tender.exchange_rates or {}).get(offer.currency)
    if rate is None:
        raise Conflict(
            f"Offer {offer.id} from {offer.bidder} is priced in {offer.currency}, but tender {tender.reference} has "
            f"no exchange rate for {offer.currency}; set one (fixed at bid opening) before ranking."
        )
    return offer.unit_price * rate


def rankable_offers(session: Session, lot: Lot) -> list[OfferLosses]:
    """The lot's compliant offers, priced in the tender's currency: what a ranking ranks."""
    tender = lot.tender
    tables = all_tables(session)
    return [
        OfferLosses(o.id, o.bidder, price_in_tender_currency(o, tender), o.no_load_loss_w, o.load_loss_w, o.aux_loss_w)
        for o in session.scalars(select(Offer).where(Offer.lot_id == lot.id)).all()
        if is_compliant(offer_findings(lot, o, tables))
    ]


_RANKINGS = GenerationCache()


def lot_ranking(session: Session, lot_id: int, include_non_compliant: bool = False) -> schemas.RankingOut:
    """The lot's ranking under its tender's cost basis revision (computed once per data generation)."""
    return _shared_ranking(session, lot_id, include_non_compliant).model_copy(deep=True)


def _shared_ranking(session: Session, lot_id: int, include_non_compliant: bool) -> schemas.RankingOut:
    """The cached ranking itself: read it, never change it (``lot_ranking`` hands out copies)."""

    def compute() -> schemas.RankingOut:
        lot = get_lot(session, lot_id)
        return rank_lot(session, lot, lot.tender.cost_basis_revision, include_non_compliant)

    return _RANKINGS.get_or_compute(session, ("ranking", lot_id, include_non_compliant), compute)


# ``lot_ranking`` as JSON, encoded once per data generation (the API's hot path).
RANKINGS_JSON = GenerationCache()


def lot_ranking_json(session: Session, lot_id: int, include_non_compliant: bool = False) -> bytes:
    return _shared_ranking(session, lot_id, include_non_compliant).model_dump_json().encode()


def rank_lot(session: Session, lot: Lot, revision: CostBasisRevision,
             include_non_compliant: bool = False) -> schemas.RankingOut:
    """Rank the compliant offers (and, when asked, list the others after them, unranked)."""
    tender = lot.tender
    rates, loading = lot_rates(lot, revision)
    offers = session.scalars(select(Offer).where(Offer.lot_id == lot.id)).all()
    tables = all_tables(session)
    failed = {}
    for offer in offers:
        findings = offer_findings(lot, offer, tables)
        if not is_compliant(findings):
            failed[offer.id] = [reason(f) for f in findings if f.passed is False]
    by_id = {offer.id: offer for offer in offers}
    prices = {offer.id: price_in_tender_currency(offer, tender) for offer in offers}

    def rank(group: list[Offer]):
        return rank_offers(
            [OfferLosses(o.id, o.bidder, prices[o.id], o.no_load_loss_w, o.load_loss_w, o.aux_loss_w) for o in group],
            rates, quantity=lot.quantity, rating_kva=lot.rating_kva,
        )

    ranked = rank([o for o in offers if o.id not in failed])
    shown = [(r, r.rank) for r in ranked]
    if include_non_compliant:
        shown += [(r, None) for r in rank([o for o in offers if o.id in failed])]
    rows = []
    for r, position in shown:
        offer = by_id[r.offer_id]
        rows.append(schemas.RankingRowOut(
            rank=position, offer_id=r.offer_id, bidder=r.bidder, unit_price=r.unit_price,
            offer_currency=offer.currency or tender.currency, offer_unit_price=offer.unit_price,
            compliant=offer.id not in failed, reasons=failed.get(offer.id, []),
            no_load_loss_w=offer.no_load_loss_w, load_loss_w=offer.load_loss_w, aux_loss_w=offer.aux_loss_w,
            capitalised_no_load=r.capitalised_no_load, capitalised_load=r.capitalised_load,
            capitalised_aux=r.capitalised_aux, toc_per_unit=r.toc_per_unit, toc_total=r.toc_total,
            efficiency_25_pct=r.efficiency_pct[25], efficiency_50_pct=r.efficiency_pct[50],
            efficiency_75_pct=r.efficiency_pct[75], efficiency_100_pct=r.efficiency_pct[100],
        ))
    return schemas.RankingOut(
        loading=loading, lot_id=lot.id, tender_id=tender.id, currency=tender.currency, quantity=lot.quantity,
        cost_basis_id=revision.cost_basis_id, cost_basis_name=revision.cost_basis.name,
        cost_basis_revision=revision.revision, no_load_rate_per_kw=rates.no_load_rate_per_kw,
        load_rate_per_kw=rates.load_rate_per_kw, aux_rate_per_kw=rates.aux_rate_per_kw,
        limit_tables=list(lot.limit_tables or []), excluded=len(failed), rows=rows,
    )
