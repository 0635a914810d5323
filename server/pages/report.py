"""The award report: what a frozen evaluation record says, gathered for one printable page.

Everything here reads the record's frozen inputs and ranking only, never the live tender,
so the report shows what was decided even after the lot has changed again.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from domain.limits import OfferLossFigures, UnitFacts, check_lot_rules
from server.pages.basis_form import input_label, method_boxes
from server.pages.templating import DASH, fmt_plain
from server.services.compliance import reason

# The lot's stated limits, as the report names them.
_LIMITS = (
    ("max_no_load_loss_w", "most no-load loss"),
    ("max_load_loss_w", "most load loss"),
    ("impedance_pct", "impedance asked (IEC 60076-1 tolerance, from memory, verify against the standard)"),
)


def compliance_flags(lot: Mapping[str, Any], offer: Mapping[str, Any]) -> list[str]:
    """The reasons frozen with the offer when the lot was awarded.

    The award freezes each offer's verdict against the lot's caps, its required impedance and
    the limit tables it names (``server.services.awards.freeze_inputs``). A record written
    before verdicts were frozen is checked again here against the lot's own caps and impedance,
    with the same domain rules.
    """
    if "reasons" in offer:
        return list(offer["reasons"])
    unit = UnitFacts(lot.get("rating_kva", 0.0), lot.get("phases", 3), lot.get("insulation", "liquid"),
                     lot.get("hv_kv", 0.0), lot.get("lv_kv", 0.0))
    figures = OfferLossFigures(offer["no_load_loss_w"], offer["load_loss_w"], offer.get("aux_loss_w", 0.0),
                               offer.get("impedance_pct"))
    findings = check_lot_rules(unit, figures, lot.get("max_no_load_loss_w"), lot.get("max_load_loss_w"),
                               lot.get("impedance_pct"))
    return [reason(f) for f in findings if f.passed is False]


def _shown(value: Any) -> str:
    if isinstance(value, list):
        return ", ".join(_shown(v) for v in value)
    if isinstance(value, int | float) and not isinstance(value, bool):
        return fmt_plain(value)
    return DASH if value is None else str(value)


LOADING_INPUTS = ("loss_factor", "peak_load_pu", "load_growth_pct")


def priced_inputs(basis: Mapping[str, Any]) -> tuple[dict[str, Any], set[str]]:
    """The inputs that priced the lot and the names the lot's own loading replaced.

    Records keep the inputs as they priced the lot (``priced_inputs``); older ones keep the
    revision's inputs and the loading used, which is laid over them here.
    """
    loading = basis.get("loading") or {}
    inputs = dict(basis.get("priced_inputs") or basis.get("inputs") or {})
    if loading.get("source") != "lot":
        return inputs, set()
    own = {name for name in LOADING_INPUTS if loading.get(name) is not None and name in inputs}
    for name in own:
        inputs[name] = loading[name]
    return inputs, own


def basis_inputs(basis: Mapping[str, Any], currency: str) -> list[tuple[str, str, str]]:
    """The inputs that priced the lot as (label, value as text, unit), in the editor's order; where the
    lot set its own loading, those values replace the basis's and their label says so."""
    inputs, own = priced_inputs(basis)
    # An optional input left empty (None) took no part in the rates: leave it out.
    stored = {k: v for k, v in inputs.items() if k != "method" and v is not None}
    try:
        boxes = method_boxes(basis["method"], currency)
    except KeyError:  # a method this version no longer knows: show the inputs as stored
        boxes = []

    def label(name: str, text: str) -> str:
        return f"{text} (this lot's own)" if name in own else text

    rows = [(label(box.name, box.label), _shown(stored.pop(box.name)), box.unit) for box in boxes if box.name in stored]
    rows += [(label(name, input_label(name)), _shown(value), "") for name, value in stored.items()]
    shape = (basis.get("loading") or {}).get("load_shape_name")
    if own and shape:
        rows.append(("Load shape (this lot's own)", str(shape), ""))
    return rows


def report_view(record: Any, verification: Mapping[str, Any]) -> dict[str, Any]:
    """The report's context from one evaluation record and its live verification."""
    inputs = record.inputs
    lot = inputs["lot"]
    currency = inputs["tender"]["currency"]
    offers = {offer["id"]: offer for offer in inputs["offers"]}
    rows = [row | {"offer": offers.get(row["offer_id"], {})} for row in record.ranking]
    checked_offers = [
        {"bidder": offer["bidder"], "offer": offer, "flags": compliance_flags(lot, offer)} for offer in inputs["offers"]
    ]
    awarded = next((row for row in rows if row["offer_id"] == record.awarded_offer_id), rows[0] if rows else None)
    checked = [label for name, label in _LIMITS if lot.get(name) is not None]
    checked += [f"limit table {key}" for key in lot.get("limit_tables") or []]
    return {
        "record": record,
        "tender": inputs["tender"],
        "lot": lot,
        "basis": inputs["cost_basis"],
        "basis_inputs": basis_inputs(inputs["cost_basis"], currency),
        "currency": currency,
        "rows": rows,
        "awarded": awarded,
        "limits_checked": checked,
        "checked_offers": checked_offers,
        "flagged": sum(1 for row in checked_offers if row["flags"]),
        "verification": verification,
    }
