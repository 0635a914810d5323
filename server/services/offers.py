"""Use cases for the offers of a lot."""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server import schemas
from server.errors import InvalidField
from server.services.common import apply_patch, check_version, commit, get_or_404
from server.services.locks import ensure_open
from server.services.ranking import lot_ranking
from server.services.tenders import get_lot
from server.settings import get_settings
from server.storage.models import Offer

_REQUIRED = {"bidder", "unit_price", "no_load_loss_w", "load_loss_w", "aux_loss_w", "impedance_pct"}


def add_offer(session: Session, lot_id: int, data: schemas.OfferCreate) -> Offer:
    lot = get_lot(session, lot_id)
    ensure_open(session, lot)
    count = session.scalar(select(func.count()).select_from(Offer).where(Offer.lot_id == lot.id))
    limit = get_settings().max_offers_per_lot
    if count >= limit:
        raise InvalidField("lot", f"holds {count} offers already, the most one lot may hold.")
    _check_currency(lot.tender, data.currency)
    offer = Offer(lot=lot, **data.model_dump())
    session.add(offer)
    commit(session, "offer")
    return offer


def _check_currency(tender, currency: str | None) -> None:
    if currency and currency != tender.currency and currency not in (tender.exchange_rates or {}):
        raise InvalidField(
            "currency", f"tender {tender.reference} has no exchange rate for {currency}; add it to the tender first."
        )


def list_offers(session: Session, lot_id: int) -> list[Offer]:
    lot = get_lot(session, lot_id)
    return list(session.scalars(select(Offer).where(Offer.lot_id == lot.id).order_by(Offer.id)))


def get_offer(session: Session, offer_id: int) -> Offer:
    return get_or_404(session, Offer, offer_id, "Offer")


def offers_out(session: Session, offers: list[Offer]) -> list[schemas.OfferOut]:
    """Offers of one lot as the API gives them, each with the warnings the checks raise on it
    (the same checks as the ranking: plausibility, price against the lot's median, coverage)."""
    if not offers:
        return []
    # The ranking of every offer carries each one's warnings, computed once per data generation.
    full = lot_ranking(session, offers[0].lot_id, include_non_compliant=True)
    warnings = {row.offer_id: row.warnings for row in full.rows}
    return [
        schemas.OfferOut.model_validate(offer).model_copy(update={"warnings": warnings.get(offer.id, [])})
        for offer in offers
    ]


def offer_out(session: Session, offer: Offer) -> schemas.OfferOut:
    return offers_out(session, [offer])[0]


def patch_offer(session: Session, offer_id: int, patch: schemas.OfferPatch) -> Offer:
    offer = get_offer(session, offer_id)
    ensure_open(session, offer.lot)
    check_version(offer, patch.version, "offer",
                  current=schemas.OfferOut.model_validate(offer).model_dump(mode="json", exclude={"warnings"}))
    if "currency" in patch.model_fields_set:
        _check_currency(offer.lot.tender, patch.currency)
    apply_patch(offer, patch, _REQUIRED)
    commit(session, "offer", current=lambda: schemas.OfferOut.model_validate(get_offer(session, offer_id)).model_dump(
        mode="json", exclude={"warnings"}))
    return offer


def delete_offer(session: Session, offer_id: int) -> None:
    offer = get_offer(session, offer_id)
    ensure_open(session, offer.lot)
    session.delete(offer)
    commit(session, "offer")
