"""Use cases for awarding a lot: freeze its evaluation, lock it, reopen it, re-verify it."""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.limits import is_compliant
from domain.rates import CapitalisationRates
from domain.toc import OfferLosses, rank_offers
from server.errors import Conflict, InvalidField
from server.services.compliance import all_tables, offer_findings, reason
from server.services.loading import lot_rates
from server.services.locks import active_record, ensure_open
from server.services.ranking import price_in_tender_currency
from server.services.robustness import award_robustness
from server.services.common import commit, get_or_404
from server.services.tenders import get_lot
from server.storage import audit
from server.storage.models import EvaluationRecord, Lot, Offer, utcnow
from server.version import VERSION

_OFFER_FIELDS = (
    "id", "bidder", "unit_price", "no_load_loss_w", "load_loss_w", "aux_loss_w",
    "impedance_pct", "no_load_current_pct", "delivery_weeks",
)
_LOT_FIELDS = (
    "id", "name", "rating_kva", "phases", "hv_kv", "lv_kv", "frequency_hz", "insulation",
    "quantity", "reference_temp_c", "max_no_load_loss_w", "max_load_loss_w", "impedance_pct",
    "load_shape_id", "peak_load_pu", "load_growth_pct", "limit_tables",
)


def canonical_hash(inputs: dict[str, Any]) -> str:
    """SHA-256 of the inputs written as canonical JSON (sorted keys, no spaces, UTF-8)."""
    text = json.dumps(inputs, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def freeze_inputs(session: Session, lot: Lot) -> dict[str, Any]:
    """Everything the ranking depends on, as plain data, decided as the live ranking decides it.

    Each offer carries its price in the tender's currency (at the tender's fixed rate) and its
    compliance verdict with reasons, so the frozen ranking excludes what the live one excludes
    even if a limit table or an exchange rate changes later.
    """
    tender = lot.tender
    revision = tender.cost_basis_revision
    rates, loading = lot_rates(lot, revision)
    offers = session.scalars(select(Offer).where(Offer.lot_id == lot.id).order_by(Offer.id)).all()
    tables = all_tables(session)
    frozen_offers = []
    for offer in offers:
        findings = offer_findings(lot, offer, tables)
        frozen_offers.append({
            **{field: getattr(offer, field) for field in _OFFER_FIELDS},
            "currency": offer.currency or tender.currency,
            "price_in_tender_currency": price_in_tender_currency(offer, tender),
            "compliant": is_compliant(findings),
            "reasons": [reason(f) for f in findings if f.passed is False],
        })
    return {
        "tender": {"id": tender.id, "reference": tender.reference, "title": tender.title, "currency": tender.currency,
                   "exchange_rates": dict(tender.exchange_rates or {})},
        "lot": {field: getattr(lot, field) for field in _LOT_FIELDS},
        "cost_basis": {
            "id": revision.cost_basis_id,
            "name": revision.cost_basis.name,
            "revision": revision.revision,
            "method": revision.method,
            "inputs": revision.inputs,
            "loading": loading.model_dump(),
            "no_load_rate_per_kw": rates.no_load_rate_per_kw,
            "load_rate_per_kw": rates.load_rate_per_kw,
            "aux_rate_per_kw": rates.aux_rate_per_kw,
        },
        "offers": frozen_offers,
    }


def rank_frozen(inputs: dict[str, Any]) -> list[dict[str, Any]]:
    """Rank the frozen compliant offers with the domain engine alone (no database)."""
    basis = inputs["cost_basis"]
    rates = CapitalisationRates(basis["no_load_rate_per_kw"], basis["load_rate_per_kw"], basis["aux_rate_per_kw"])
    ranked = rank_offers(
        [
            OfferLosses(o["id"], o["bidder"], o.get("price_in_tender_currency", o["unit_price"]),
                        o["no_load_loss_w"], o["load_loss_w"], o["aux_loss_w"])
            for o in inputs["offers"]
            if o.get("compliant", True)
        ],
        rates,
        quantity=inputs["lot"]["quantity"],
        rating_kva=inputs["lot"]["rating_kva"],
    )
    return [
        {
            "rank": r.rank, "offer_id": r.offer_id, "bidder": r.bidder, "unit_price": r.unit_price,
            "capitalised_no_load": r.capitalised_no_load, "capitalised_load": r.capitalised_load,
            "capitalised_aux": r.capitalised_aux, "toc_per_unit": r.toc_per_unit, "toc_total": r.toc_total,
            "efficiency_50_pct": r.efficiency_50_pct,
        }
        for r in ranked
    ]


def award_lot(session: Session, lot_id: int, note: str | None = None) -> EvaluationRecord:
    """Award the lot to its lowest-TOC offer and freeze the evaluation."""
    lot = get_lot(session, lot_id)
    ensure_open(session, lot)
    inputs = freeze_inputs(session, lot)
    ranking = rank_frozen(inputs)
    if not ranking:
        raise InvalidField("lot", "has no compliant offers to award.")
    record = EvaluationRecord(
        lot=lot,
        awarded_by=audit.get_actor(session).username,
        awarded_offer_id=ranking[0]["offer_id"],
        software_version=VERSION,
        inputs=inputs,
        ranking=ranking,
        sha256=canonical_hash(inputs),
    )
    session.add(record)
    session.flush()
    record.robustness = award_robustness(session, lot.id)
    audit.record(session, "award", "lot", lot.id,
                 f"awarded lot '{lot.name}' to {ranking[0]['bidder']} (record {record.id})"
                 + (f": {note}" if note else ""),
                 after={"evaluation_record": record.id, "sha256": record.sha256, "offer_id": record.awarded_offer_id})
    tender = lot.tender
    if all(active_record(session, other.id) is not None for other in tender.lots):
        tender.status = "awarded"
    commit(session, "lot")
    return record


def reopen_lot(session: Session, lot_id: int, reason: str) -> EvaluationRecord:
    lot = get_lot(session, lot_id)
    reason = (reason or "").strip()
    if not reason:
        raise InvalidField("reason", "say why the award is reopened.")
    record = active_record(session, lot.id)
    if record is None:
        raise Conflict(f"Lot '{lot.name}' is not awarded; there is nothing to reopen.")
    record.reopened_at = utcnow()
    record.reopened_by = audit.get_actor(session).username
    record.reopen_reason = reason[:2000]
    audit.record(session, "reopen", "lot", lot.id, f"reopened lot '{lot.name}': {reason}"[:300],
                 before={"evaluation_record": record.id})
    if lot.tender.status == "awarded":
        lot.tender.status = "evaluation"
    commit(session, "lot")
    return record


def get_record(session: Session, record_id: int) -> EvaluationRecord:
    return get_or_404(session, EvaluationRecord, record_id, "Evaluation record")


def list_records(session: Session, lot_id: int) -> list[EvaluationRecord]:
    get_lot(session, lot_id)
    return list(
        session.scalars(select(EvaluationRecord).where(EvaluationRecord.lot_id == lot_id).order_by(EvaluationRecord.id))
    )


def verify_record(record: EvaluationRecord) -> dict[str, Any]:
    """Recompute the hash and the ranking from the frozen inputs and compare."""
    hash_ok = canonical_hash(record.inputs) == record.sha256
    again = rank_frozen(record.inputs)
    order_ok = [r["offer_id"] for r in again] == [r["offer_id"] for r in record.ranking]
    values_ok = order_ok and all(
        math.isclose(a["toc_per_unit"], b["toc_per_unit"], rel_tol=1e-12, abs_tol=1e-9)
        for a, b in zip(again, record.ranking, strict=True)
    )
    return {
        "record_id": record.id,
        "hash_matches": hash_ok,
        "ranking_matches": values_ok,
        "verified": hash_ok and values_ok,
        "sha256": record.sha256,
        "recomputed_sha256": canonical_hash(record.inputs),
    }


