"""Use cases for tenders and their lots."""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session, selectinload

from server import schemas
from server.errors import Conflict, InvalidField
from server.services.common import apply_patch, check_version, commit, get_or_404
from server.services.compliance import check_keys
from server.services.cost_bases import get_revision
from server.services.loading import own_loading_warnings
from server.services.locks import ensure_no_records, ensure_open, ensure_tender_open
from server.storage.models import EvaluationRecord, LoadShape, Lot, Offer, Tender, TestCertificate

_TENDER_REQUIRED = {
    "reference", "title", "currency", "status", "exchange_rates", "tolerance_standard", "penalty_multiplier",
    "penalty_credit_below", "reject_beyond_tolerance",
}
_LOT_REQUIRED = {
    "name", "rating_kva", "phases", "hv_kv", "lv_kv", "frequency_hz",
    "insulation", "quantity", "reference_temp_c", "limit_tables",
}


def _reference_taken(session: Session, reference: str, except_id: int | None = None) -> bool:
    found = session.scalar(select(Tender.id).where(Tender.reference == reference))
    return found is not None and found != except_id


def _check_load_shapes(session: Session, lots: list) -> None:
    for index, lot in enumerate(lots):
        shape_id = getattr(lot, "load_shape_id", None)
        if shape_id is not None and session.get(LoadShape, shape_id) is None:
            field = f"lots.{index}.load_shape_id" if len(lots) > 1 else "load_shape_id"
            raise InvalidField(field, f"there is no load shape {shape_id}.")


def create_tender(session: Session, data: schemas.TenderCreate) -> Tender:
    _check_load_shapes(session, data.lots)
    for lot in data.lots:
        check_keys(session, lot.limit_tables)
    if _reference_taken(session, data.reference):
        raise InvalidField("reference", f"a tender with reference '{data.reference}' already exists.")
    revision = get_revision(session, data.cost_basis_id, data.cost_basis_revision)
    tender = Tender(
        reference=data.reference,
        title=data.title,
        currency=data.currency,
        status=data.status,
        bid_opening_date=data.bid_opening_date,
        exchange_rates=data.exchange_rates,
        tolerance_standard=data.tolerance_standard,
        penalty_multiplier=data.penalty_multiplier,
        penalty_credit_below=data.penalty_credit_below,
        reject_beyond_tolerance=data.reject_beyond_tolerance,
        cost_basis_revision=revision,
        lots=[Lot(**lot.model_dump()) for lot in data.lots],
    )
    session.add(tender)
    commit(session, "tender", unique_field="reference")
    return tender


def list_tenders(session: Session) -> list[Tender]:
    return list(
        session.scalars(
            select(Tender).options(selectinload(Tender.lots)).order_by(Tender.created_at.desc(), Tender.id.desc())
        )
    )


def get_tender(session: Session, tender_id: int) -> Tender:
    return get_or_404(session, Tender, tender_id, "Tender")


def patch_tender(session: Session, tender_id: int, patch: schemas.TenderPatch) -> Tender:
    tender = get_tender(session, tender_id)
    check_version(tender, patch.version, "tender", current=tender_out(session, tender).model_dump(mode="json"))
    if patch.status == "awarded" and tender.status != "awarded":
        raise InvalidField("status", "a tender becomes awarded when an approver awards each of its lots.")
    # Money terms reach every lot's frozen prices: refused while any lot stands awarded. A new cost
    # basis revision reaches the open lots only; an awarded lot keeps the revision of its award.
    if {"currency", "exchange_rates"} & patch.model_fields_set:
        ensure_tender_open(session, tender)
    if patch.exchange_rates is not None:
        _check_rates_cover_offers(session, tender, patch.exchange_rates, patch.currency or tender.currency)
    if patch.reference is not None and _reference_taken(session, patch.reference, tender.id):
        raise InvalidField("reference", f"a tender with reference '{patch.reference}' already exists.")
    apply_patch(tender, patch, _TENDER_REQUIRED, skip={"cost_basis_id", "cost_basis_revision"})
    if patch.cost_basis_id is not None or patch.cost_basis_revision is not None:
        basis_id = patch.cost_basis_id or tender.cost_basis_revision.cost_basis_id
        tender.cost_basis_revision = get_revision(session, basis_id, patch.cost_basis_revision)
    commit(session, "tender", unique_field="reference")
    return tender


def _check_rates_cover_offers(session: Session, tender: Tender, rates: dict, currency: str) -> None:
    lot_ids = [lot.id for lot in tender.lots]
    used = set(session.scalars(select(Offer.currency).where(Offer.lot_id.in_(lot_ids), Offer.currency.is_not(None))))
    missing = sorted(c for c in used if c != currency and c not in rates)
    if missing:
        raise InvalidField("exchange_rates", f"offers are priced in {', '.join(missing)}; keep a rate for each.")


def delete_tender(session: Session, tender_id: int) -> None:
    tender = get_tender(session, tender_id)
    ensure_no_records(session, tender)
    session.delete(tender)
    commit(session, "tender")


def offer_counts(session: Session, lot_ids: list[int]) -> dict[int, int]:
    if not lot_ids:
        return {}
    rows = session.execute(
        select(Offer.lot_id, func.count()).where(Offer.lot_id.in_(lot_ids)).group_by(Offer.lot_id)
    )
    return {lot_id: count for lot_id, count in rows}


def lot_out(lot: Lot, offer_count: int = 0) -> schemas.LotOut:
    out = schemas.LotOut.model_validate(lot)
    out.offer_count = offer_count
    out.priced_on_revision = lot.pricing_revision.revision
    out.kept_by_award = lot.cost_basis_revision_id is not None
    out.loading_warnings = own_loading_warnings(lot)
    return out


def tender_out(session: Session, tender: Tender) -> schemas.TenderOut:
    counts = offer_counts(session, [lot.id for lot in tender.lots])
    revision = tender.cost_basis_revision
    return schemas.TenderOut(
        id=tender.id,
        version=tender.version,
        reference=tender.reference,
        title=tender.title,
        currency=tender.currency,
        status=tender.status,
        bid_opening_date=tender.bid_opening_date,
        exchange_rates=tender.exchange_rates or {},
        tolerance_standard=tender.tolerance_standard,
        penalty_multiplier=tender.penalty_multiplier,
        penalty_credit_below=tender.penalty_credit_below,
        reject_beyond_tolerance=tender.reject_beyond_tolerance,
        cost_basis_id=revision.cost_basis_id,
        cost_basis_name=revision.cost_basis.name,
        cost_basis_revision=revision.revision,
        created_at=tender.created_at,
        updated_at=tender.updated_at,
        lots=[lot_out(lot, counts.get(lot.id, 0)) for lot in tender.lots],
    )


def add_lot(session: Session, tender_id: int, data: schemas.LotCreate) -> Lot:
    tender = get_tender(session, tender_id)
    _check_load_shapes(session, [data])
    check_keys(session, data.limit_tables)
    lot = Lot(tender=tender, **data.model_dump())
    session.add(lot)
    commit(session, "lot")
    return lot


def get_lot(session: Session, lot_id: int) -> Lot:
    return get_or_404(session, Lot, lot_id, "Lot")


def patch_lot(session: Session, lot_id: int, patch: schemas.LotPatch) -> Lot:
    lot = get_lot(session, lot_id)
    ensure_open(session, lot)
    check_version(lot, patch.version, "lot", current=lot_out(lot).model_dump(mode="json"))
    _check_load_shapes(session, [patch])
    check_keys(session, patch.limit_tables)
    apply_patch(lot, patch, _LOT_REQUIRED)
    commit(session, "lot")
    return lot


def delete_lot(session: Session, lot_id: int) -> None:
    """Delete an open lot. A lot that was ever awarded keeps its evaluation records and test
    certificates, and so is kept itself (409), as its tender is."""
    lot = get_lot(session, lot_id)
    ensure_open(session, lot)
    records = session.scalar(select(func.count()).select_from(EvaluationRecord).where(EvaluationRecord.lot_id == lot.id))
    certificates = session.scalar(select(func.count()).select_from(TestCertificate).where(TestCertificate.lot_id == lot.id))
    if records or certificates:
        raise Conflict(
            f"Lot '{lot.name}' has {records} evaluation record(s) from awards and {certificates} test "
            "certificate(s); it is kept for the record."
        )
    if len(lot.tender.lots) == 1:
        raise InvalidField("lot", "a tender keeps at least one lot; delete the tender instead.")
    session.delete(lot)
    commit(session, "lot")
