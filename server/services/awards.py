"""Use cases for awarding a lot: freeze its evaluation, lock it, reopen it, re-verify it."""

from __future__ import annotations

import hashlib
import hmac
import json
import math
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.rates import CapitalisationRates
from domain.toc import OfferLosses, rank_offers
from server import schemas
from server.errors import Conflict, InvalidField
from server.services.common import commit, get_or_404
from server.services.loading import lot_inputs, lot_rates
from server.services.locks import active_record, ensure_open
from server.services.ranking import assessed_offers
from server.services.robustness import award_robustness
from server.services.tenders import get_lot
from server.settings import get_settings
from server.storage import audit
from server.storage.models import AuditEvent, EvaluationRecord, Lot, utcnow
from server.version import VERSION

_OFFER_FIELDS = (
    "id", "bidder", "unit_price", "no_load_loss_w", "load_loss_w", "aux_loss_w",
    "impedance_pct", "no_load_current_pct", "i2r_share_pct", "delivery_weeks",
)
_LOT_FIELDS = (
    "id", "name", "rating_kva", "phases", "hv_kv", "lv_kv", "frequency_hz", "insulation",
    "quantity", "reference_temp_c", "conductor_material", "bil_kv", "max_no_load_loss_w", "max_load_loss_w",
    "impedance_pct", "load_shape_id", "peak_load_pu", "load_growth_pct", "limit_tables",
)
REASON_KINDS = ("delivery", "technical deviation", "clarification", "other")


def canonical_json(material: dict[str, Any]) -> bytes:
    """Data written as canonical JSON: sorted keys, no spaces, UTF-8, no NaN."""
    text = json.dumps(material, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return text.encode("utf-8")


def canonical_hash(inputs: dict[str, Any]) -> str:
    """SHA-256 of the inputs written as canonical JSON (sorted keys, no spaces, UTF-8)."""
    return hashlib.sha256(canonical_json(inputs)).hexdigest()


def seal_signature(material: dict[str, Any], secret: str) -> str:
    """HMAC-SHA256 of the canonical JSON with a server key: only a holder of the key can make it."""
    return hmac.new(secret.encode("utf-8"), canonical_json(material), hashlib.sha256).hexdigest()


def sealed_material(inputs: dict[str, Any], decision: dict[str, Any] | None) -> dict[str, Any]:
    """What the record's SHA-256 covers: the frozen inputs, and the award decision where there is one
    (records written before decisions were kept seal their inputs alone)."""
    return inputs if decision is None else {"inputs": inputs, "decision": decision}


def freeze_inputs(session: Session, lot: Lot) -> dict[str, Any]:
    """Everything the ranking depends on, as plain data, decided as the live ranking decides it.

    Each offer carries its price in the tender's currency (at the tender's fixed rate), its
    compliance verdict with reasons and its warnings, so the frozen ranking excludes what the
    live one excludes even if a limit table or an exchange rate changes later. The cost basis
    part keeps the revision that priced the lot and the inputs as they priced it (the lot's own
    loading where it sets one).
    """
    tender = lot.tender
    revision = lot.pricing_revision
    rates, loading = lot_rates(lot, revision)
    priced, _, _ = lot_inputs(lot, revision)
    offers, prices, assessed = assessed_offers(session, lot)
    frozen_offers = []
    for offer in offers:
        check = assessed[offer.id]
        frozen_offers.append({
            **{name: getattr(offer, name) for name in _OFFER_FIELDS},
            "currency": offer.currency or tender.currency,
            "price_in_tender_currency": prices[offer.id],
            "compliant": check.compliant,
            "compliance": check.verdict,
            "reasons": check.reasons,
            "warnings": [{"code": w.code, "field": w.field, "message": w.message} for w in check.warnings],
        })
    return {
        "tender": {"id": tender.id, "reference": tender.reference, "title": tender.title, "currency": tender.currency,
                   "exchange_rates": dict(tender.exchange_rates or {})},
        "lot": {name: getattr(lot, name) for name in _LOT_FIELDS},
        "cost_basis": {
            "id": revision.cost_basis_id,
            "name": revision.cost_basis.name,
            "revision": revision.revision,
            "method": revision.method,
            "inputs": revision.inputs,
            "priced_inputs": priced.model_dump(),
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


@dataclass
class AwardPlan:
    """An award as it would be made now: the chosen offer, its margin, and what must be acknowledged.

    ``margin_per_unit`` is the best other compliant offer's TOC minus the chosen offer's
    [currency per unit]: positive when the chosen offer costs least (how far ahead it is),
    negative when another offer costs less (how much more the chosen one costs).
    """

    lot: Lot
    inputs: dict[str, Any]
    ranking: list[dict[str, Any]]
    chosen: dict[str, Any]
    warnings: list[dict[str, Any]] = field(default_factory=list)

    @property
    def lowest(self) -> dict[str, Any]:
        return self.ranking[0]

    @property
    def is_lowest(self) -> bool:
        return self.chosen["offer_id"] == self.lowest["offer_id"]

    @property
    def next_best(self) -> dict[str, Any] | None:
        """The best compliant offer other than the chosen one."""
        return next((row for row in self.ranking if row["offer_id"] != self.chosen["offer_id"]), None)

    @property
    def margin_per_unit(self) -> float | None:
        other = self.next_best
        return None if other is None else other["toc_per_unit"] - self.chosen["toc_per_unit"]

    @property
    def margin_pct(self) -> float | None:
        margin = self.margin_per_unit
        toc = self.chosen["toc_per_unit"]
        return None if margin is None or toc == 0 else 100.0 * margin / toc

    def decision(self, data: schemas.AwardIn, who: str) -> dict[str, Any]:
        other = self.next_best
        margin = self.margin_per_unit
        return {
            "offer_id": self.chosen["offer_id"], "bidder": self.chosen["bidder"], "rank": self.chosen["rank"],
            "toc_per_unit": self.chosen["toc_per_unit"],
            "lowest_offer_id": self.lowest["offer_id"], "lowest_bidder": self.lowest["bidder"],
            "is_lowest_toc": self.is_lowest,
            "next_offer_id": other["offer_id"] if other else None, "next_bidder": other["bidder"] if other else None,
            "margin_per_unit": margin, "margin_total": None if margin is None else margin * self.inputs["lot"]["quantity"],
            "margin_pct": self.margin_pct,
            "reason_kind": data.reason_kind,
            "reason": data.reason or None, "note": data.note or None,
            "warnings": self.warnings, "warnings_acknowledged": bool(self.warnings) and data.acknowledge_warnings,
            "acknowledged_by": who if self.warnings else None, "decided_by": who,
            "cost_basis_revision": self.inputs["cost_basis"]["revision"], "tie_order": schemas.TIE_ORDER,
        }


def _award_warnings(inputs: dict[str, Any], chosen_id: int) -> list[dict[str, Any]]:
    """The chosen offer's own warnings, then every other offer left out only on unverified rules."""
    out = []
    for offer in inputs["offers"]:
        for warning in offer.get("warnings", []):
            if offer["id"] == chosen_id or warning["code"] == "excluded_on_unverified_rule":
                out.append({**warning, "offer_id": offer["id"], "bidder": offer["bidder"]})
    return out


def plan_award(session: Session, lot_id: int, offer_id: int | None = None) -> AwardPlan:
    """What an award of ``offer_id`` (default: the lowest total owning cost) would record; nothing is stored."""
    lot = get_lot(session, lot_id)
    ensure_open(session, lot)
    inputs = freeze_inputs(session, lot)
    ranking = rank_frozen(inputs)
    if not ranking:
        raise InvalidField("lot", "has no compliant offers to award.")
    chosen_id = ranking[0]["offer_id"] if offer_id is None else offer_id
    chosen = next((row for row in ranking if row["offer_id"] == chosen_id), None)
    if chosen is None:
        offer = next((o for o in inputs["offers"] if o["id"] == chosen_id), None)
        if offer is None:
            raise InvalidField("offer_id", f"offer {chosen_id} is not an offer of lot '{lot.name}'.")
        raise InvalidField("offer_id", f"the offer from {offer['bidder']} is not compliant and cannot be awarded: "
                                       + "; ".join(offer["reasons"]))
    return AwardPlan(lot, inputs, ranking, chosen, _award_warnings(inputs, chosen_id))


def award_lot(session: Session, lot_id: int, data: schemas.AwardIn | None = None) -> EvaluationRecord:
    """Award the lot and freeze the evaluation.

    The lowest total owning cost wins unless the approver names another compliant offer with a
    reason; any warning on the chosen offer (or an offer left out on an unverified rule) must be
    acknowledged, else 409 lists them and nothing is stored. The lot keeps the revision that
    priced the award while the award stands.
    """
    data = data or schemas.AwardIn()
    plan = plan_award(session, lot_id, data.offer_id)
    if not plan.is_lowest and (data.reason_kind is None or not data.reason):
        field_name = "reason_kind" if data.reason_kind is None else "reason"
        raise InvalidField(field_name, f"the offer from {plan.chosen['bidder']} is not the lowest total owning cost "
                                       f"({plan.lowest['bidder']} is): say why it wins (delivery, technical "
                                       "deviation, clarification or other) and give the justification.")
    if plan.warnings and not data.acknowledge_warnings:
        raise Conflict(
            f"The award to {plan.chosen['bidder']} has {len(plan.warnings)} warning(s) to acknowledge; nothing was "
            "stored. Check each one, then award again with acknowledge_warnings set.",
            warnings=plan.warnings,
        )
    lot = plan.lot
    who = audit.get_actor(session).username
    decision = plan.decision(data, who)
    material = sealed_material(plan.inputs, decision)
    keys = get_settings().seal_key_map()
    key_id = next(iter(keys), None)
    lot.cost_basis_revision = lot.pricing_revision
    # Computed before the record is written: the database refuses any later change to it.
    robustness = award_robustness(session, lot.id)
    record = EvaluationRecord(
        lot=lot,
        awarded_by=who,
        awarded_offer_id=plan.chosen["offer_id"],
        software_version=VERSION,
        inputs=plan.inputs,
        ranking=plan.ranking,
        decision=decision,
        robustness=robustness,
        sha256=canonical_hash(material),
        seal_key_id=key_id,
        seal_hmac=seal_signature(material, keys[key_id]) if key_id else None,
    )
    session.add(record)
    session.flush()
    summary = f"awarded lot '{lot.name}' to {plan.chosen['bidder']} (record {record.id})"
    if not plan.is_lowest:
        summary += f", not the lowest total owning cost ({decision['reason_kind']}: {decision['reason']})"
    if decision["warnings_acknowledged"]:
        summary += f"; {len(plan.warnings)} warning(s) acknowledged"
    if data.note:
        summary += f": {data.note}"
    audit.record(session, "award", "lot", lot.id, summary[:300],
                 after={"evaluation_record": record.id, "sha256": record.sha256, "offer_id": record.awarded_offer_id,
                        "is_lowest_toc": plan.is_lowest, "reason_kind": decision["reason_kind"],
                        "reason": decision["reason"], "margin_per_unit": decision["margin_per_unit"],
                        "warnings_acknowledged": [w["code"] for w in plan.warnings] if plan.warnings else [],
                        "cost_basis_revision": decision["cost_basis_revision"]})
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
    # The lot follows its tender's revision again: a new award will be priced on it.
    lot.cost_basis_revision = None
    audit.record(session, "reopen", "lot", lot.id, f"reopened lot '{lot.name}': {reason}"[:300],
                 before={"evaluation_record": record.id},
                 after={"cost_basis_revision": lot.tender.cost_basis_revision.revision})
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


def verify_record(session: Session, record: EvaluationRecord) -> dict[str, Any]:
    """Check a record against itself, against the audit trail, and against the live data.

    - the SHA-256 of the frozen inputs and decision, recomputed, against the record's;
    - the SHA-256 the award wrote in the append-only audit trail, against the recomputed one
      (a record altered together with its own hash still differs from the trail);
    - the server-key signature, when the record has one and its key is configured;
    - ranking the frozen inputs again, against the frozen ranking;
    - while the award stands (the lot is locked), freezing the live offers, lot, rates and
      compliance again, against the frozen copy: any difference is a change made around the
      application, and each is named.
    """
    material = sealed_material(record.inputs, record.decision)
    recomputed = canonical_hash(material)
    hash_ok = recomputed == record.sha256
    differences: list[str] = []
    if not hash_ok:
        differences.append("the frozen inputs or decision no longer give the record's SHA-256")
    trail = _awarded_hash(session, record)
    audit_ok = trail is not None and trail == recomputed
    if trail is None:
        differences.append("the audit trail holds no award event for this record")
    elif not audit_ok:
        differences.append(f"the SHA-256 written in the audit trail at award time was {trail}")
    signature_ok = _signature_check(record, material)
    if signature_ok is False:
        differences.append("the server-key signature does not match the record")
    again = rank_frozen(record.inputs)
    order_ok = [r["offer_id"] for r in again] == [r["offer_id"] for r in record.ranking]
    values_ok = order_ok and all(
        math.isclose(a["toc_per_unit"], b["toc_per_unit"], rel_tol=1e-12, abs_tol=1e-9)
        for a, b in zip(again, record.ranking, strict=True)
    )
    if not values_ok:
        differences.append("ranking the frozen inputs again gives another order or other totals")
    live = live_differences(session, record) if record.reopened_at is None else []
    differences += live
    return {
        "record_id": record.id,
        "hash_matches": hash_ok,
        "audit_hash_matches": audit_ok,
        "signature_matches": signature_ok,
        "ranking_matches": values_ok,
        "live_checked": record.reopened_at is None,
        "live_matches": not live,
        "differences": differences,
        "verified": hash_ok and audit_ok and values_ok and signature_ok is not False and not live,
        "sha256": record.sha256,
        "recomputed_sha256": recomputed,
    }


def _awarded_hash(session: Session, record: EvaluationRecord) -> str | None:
    """The SHA-256 the award of ``record`` wrote in the audit trail, or None."""
    events = session.scalars(select(AuditEvent).where(
        AuditEvent.action == "award", AuditEvent.object_type == "lot", AuditEvent.object_id == record.lot_id))
    for event in events:
        after = event.after or {}
        if after.get("evaluation_record") == record.id:
            return after.get("sha256")
    return None


def _signature_check(record: EvaluationRecord, material: dict[str, Any]) -> bool | None:
    if not record.seal_hmac:
        return None
    secret = get_settings().seal_key_map().get(record.seal_key_id or "")
    if secret is None:
        return None  # signed with a key this server does not hold: nothing to check it with
    return hmac.compare_digest(seal_signature(material, secret), record.seal_hmac)


def _differs(then: Any, now: Any) -> bool:
    if isinstance(then, int | float) and isinstance(now, int | float) and not isinstance(then, bool):
        return not math.isclose(then, now, rel_tol=1e-9, abs_tol=1e-9)
    return then != now


def live_differences(session: Session, record: EvaluationRecord) -> list[str]:
    """What in the live offers, lot, rates and compliance differs from the record's frozen copy.

    Only what the record froze is compared (a record from an older version has fewer fields);
    warnings are left out, as a newer version may word or add them.
    """
    frozen = record.inputs
    now = freeze_inputs(session, record.lot)
    out = []
    for name, value in frozen["lot"].items():
        if name in now["lot"] and _differs(value, now["lot"][name]):
            out.append(f"lot {name}: {value!r} in the record, {now['lot'][name]!r} now")
    for name in ("currency", "exchange_rates"):
        if _differs(frozen["tender"].get(name), now["tender"].get(name)):
            out.append(f"tender {name}: {frozen['tender'].get(name)!r} in the record, {now['tender'].get(name)!r} now")
    basis_then, basis_now = frozen["cost_basis"], now["cost_basis"]
    for name in ("id", "revision", "method", "inputs", "no_load_rate_per_kw", "load_rate_per_kw", "aux_rate_per_kw"):
        if name in basis_then and _differs(basis_then[name], basis_now.get(name)):
            out.append(f"cost basis {name}: {basis_then[name]!r} in the record, {basis_now.get(name)!r} now")
    offers_now = {o["id"]: o for o in now["offers"]}
    for offer in frozen["offers"]:
        live = offers_now.pop(offer["id"], None)
        label = f"offer {offer['id']} ({offer['bidder']})"
        if live is None:
            out.append(f"{label}: in the record, no longer stored")
            continue
        for name in (*_OFFER_FIELDS, "currency", "price_in_tender_currency", "compliant"):
            if name in offer and _differs(offer[name], live.get(name)):
                what = "compliance" if name == "compliant" else name
                then_text = ("compliant" if offer[name] else "not compliant") if name == "compliant" else repr(offer[name])
                now_text = ("compliant" if live[name] else "not compliant") if name == "compliant" else repr(live.get(name))
                out.append(f"{label}: {what} {then_text} in the record, {now_text} now")
    for offer in offers_now.values():
        out.append(f"offer {offer['id']} ({offer['bidder']}): stored now, not in the record")
    return out
