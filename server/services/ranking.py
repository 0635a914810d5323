"""Use case: rank a lot's offers by total owning cost under its tender's cost basis."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.toc import OfferLosses, rank_offers
from server import schemas
from server.errors import Conflict
from server.exports import ranking_xlsx
from server.services.compliance import OfferAssessment, assess_offers, warning_out
from server.services.loading import lot_inputs, lot_rates
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


def lot_offers(session: Session, lot: Lot) -> list[Offer]:
    return list(session.scalars(select(Offer).where(Offer.lot_id == lot.id).order_by(Offer.id)))


def assessed_offers(session: Session, lot: Lot) -> tuple[list[Offer], dict[int, float], dict[int, OfferAssessment]]:
    """The lot's offers, their prices in the tender's currency, and what the checks say of each."""
    offers = lot_offers(session, lot)
    prices = {offer.id: price_in_tender_currency(offer, lot.tender) for offer in offers}
    return offers, prices, assess_offers(session, lot, offers, prices)


def rankable_offers(session: Session, lot: Lot) -> list[OfferLosses]:
    """The lot's compliant offers, priced in the tender's currency: what a ranking ranks."""
    offers, prices, assessed = assessed_offers(session, lot)
    return [
        OfferLosses(o.id, o.bidder, prices[o.id], o.no_load_loss_w, o.load_loss_w, o.aux_loss_w)
        for o in offers if assessed[o.id].compliant
    ]


_RANKINGS = GenerationCache()


def lot_ranking(session: Session, lot_id: int, include_non_compliant: bool = False) -> schemas.RankingOut:
    """The lot's ranking under its tender's cost basis revision (computed once per data version)."""
    return _shared_ranking(session, lot_id, include_non_compliant).model_copy(deep=True)


def _shared_ranking(session: Session, lot_id: int, include_non_compliant: bool) -> schemas.RankingOut:
    """The cached ranking itself: read it, never change it (``lot_ranking`` hands out copies)."""

    def compute() -> schemas.RankingOut:
        lot = get_lot(session, lot_id)
        return rank_lot(session, lot, lot.pricing_revision, include_non_compliant)

    return _RANKINGS.get_or_compute(session, ("ranking", lot_id, include_non_compliant), compute)


# ``lot_ranking`` as JSON, encoded once per data version (the API's hot path).
RANKINGS_JSON = GenerationCache()


def lot_ranking_json(session: Session, lot_id: int, include_non_compliant: bool = False) -> bytes:
    return _shared_ranking(session, lot_id, include_non_compliant).model_dump_json().encode()


def ranking_workbook(session: Session, lot_id: int, include_non_compliant: bool = True) -> bytes:
    """The ranking as XLSX, with a sheet of the inputs that priced the lot (its own loading where it sets one)."""
    ranking = lot_ranking(session, lot_id, include_non_compliant)
    lot = get_lot(session, lot_id)
    priced_inputs, _, _ = lot_inputs(lot, lot.pricing_revision)
    return ranking_xlsx(ranking, priced_inputs.model_dump(), lot.pricing_revision.method)


def rank_lot(session: Session, lot: Lot, revision: CostBasisRevision,
             include_non_compliant: bool = False) -> schemas.RankingOut:
    """Rank the compliant offers (and, when asked, list the others after them, unranked).

    Offers no limit table judged ("not assessed") rank with the others, flagged; every row
    carries its warnings. Equal totals are ordered as ``domain.toc.rank_offers`` orders them.
    """
    tender = lot.tender
    rates, loading = lot_rates(lot, revision)
    offers, prices, assessed = assessed_offers(session, lot)
    by_id = {offer.id: offer for offer in offers}

    def rank(group: list[Offer]):
        return rank_offers(
            [OfferLosses(o.id, o.bidder, prices[o.id], o.no_load_loss_w, o.load_loss_w, o.aux_loss_w) for o in group],
            rates, quantity=lot.quantity, rating_kva=lot.rating_kva,
        )

    ranked = rank([o for o in offers if assessed[o.id].compliant])
    shown = [(r, r.rank) for r in ranked]
    if include_non_compliant:
        shown += [(r, None) for r in rank([o for o in offers if not assessed[o.id].compliant])]
    rows = []
    for r, position in shown:
        offer = by_id[r.offer_id]
        check = assessed[offer.id]
        rows.append(schemas.RankingRowOut(
            rank=position, offer_id=r.offer_id, bidder=r.bidder, unit_price=r.unit_price,
            offer_currency=offer.currency or tender.currency, offer_unit_price=offer.unit_price,
            compliant=check.compliant, compliance=check.verdict, reasons=check.reasons,
            warnings=[warning_out(w) for w in check.warnings],
            no_load_loss_w=offer.no_load_loss_w, load_loss_w=offer.load_loss_w, aux_loss_w=offer.aux_loss_w,
            capitalised_no_load=r.capitalised_no_load, capitalised_load=r.capitalised_load,
            capitalised_aux=r.capitalised_aux, toc_per_unit=r.toc_per_unit, toc_total=r.toc_total,
            efficiency_25_pct=r.efficiency_pct[25], efficiency_50_pct=r.efficiency_pct[50],
            efficiency_75_pct=r.efficiency_pct[75], efficiency_100_pct=r.efficiency_pct[100],
        ))
    left_out = [a for a in assessed.values() if not a.compliant]
    return schemas.RankingOut(
        loading=loading, lot_id=lot.id, tender_id=tender.id, currency=tender.currency, quantity=lot.quantity,
        cost_basis_id=revision.cost_basis_id, cost_basis_name=revision.cost_basis.name,
        cost_basis_revision=revision.revision, no_load_rate_per_kw=rates.no_load_rate_per_kw,
        load_rate_per_kw=rates.load_rate_per_kw, aux_rate_per_kw=rates.aux_rate_per_kw,
        limit_tables=list(lot.limit_tables or []), excluded=len(left_out),
        excluded_on_unverified=sum(1 for a in left_out if a.unverified_exclusion),
        not_assessed=sum(1 for a in assessed.values() if a.verdict == "not assessed"), rows=rows,
    )
