"""What each page shows, gathered from the services' read functions.

Routes call one service for the change a person asked for and then one of these to
show the result; nothing here writes.
"""

from __future__ import annotations

from typing import Any

from pydantic import ValidationError
from sqlalchemy.orm import Session

from server import schemas
from server.errors import InvalidField
from server.pages import certificate_views, intake_views, planning_views
from server.pages.basis_form import chosen_method, input_label, method_boxes, price_path_coverage
from server.pages.charts import toc_breakdown_chart
from server.pages.forms import field_errors, full_inputs
from server.pages.templating import input_value
from server.services import awards, cost_bases, locks, offers, pages_support, ranking, tenders

# The offer boxes in the order the forms and the offers table show them.
OFFER_FIELDS = [
    "bidder", "unit_price", "currency", "no_load_loss_w", "load_loss_w", "aux_loss_w",
    "impedance_pct", "no_load_current_pct", "i2r_share_pct", "delivery_weeks", "notes",
]
LOT_DEFAULTS = {"phases": "3", "frequency_hz": "50", "insulation": "liquid", "quantity": "1", "reference_temp_c": "75",
                "conductor_material": "copper"}


def basis_choices(session: Session) -> list[schemas.CostBasisDetailOut]:
    """Every cost basis with its revisions, for the cost basis selects."""
    return [cost_bases.cost_basis_out(b, detail=True) for b in cost_bases.list_cost_bases(session)]


def tender_list(session: Session) -> dict[str, Any]:
    return {
        "tenders": [tenders.tender_out(session, t) for t in tenders.list_tenders(session)],
        "bases": basis_choices(session),
    } | intake_views.lot_form_extras(session) | planning_views.lot_loading(session)


def tender_detail(session: Session, tender_id: int) -> dict[str, Any]:
    tender = tenders.tender_out(session, tenders.get_tender(session, tender_id))
    awarded = pages_support.awarded_lot_ids(session, [lot.id for lot in tender.lots])
    return {"tender": tender, "bases": basis_choices(session), "awarded_lots": awarded} | (
        intake_views.lot_form_extras(session) | intake_views.tender_extras(session, tender)
    ) | planning_views.tender_loadings(session, tender_id)


def price_note(result: schemas.RankingOut) -> dict[str, Any] | None:
    """When the cheapest offer to buy is not the cheapest to own: who, and by how much per unit."""
    if len(result.rows) < 2:
        return None
    best = result.rows[0]
    lowest_price = min(row.unit_price for row in result.rows)
    if best.unit_price <= lowest_price:
        return None
    cheapest = next(row for row in result.rows if row.unit_price == lowest_price)
    return {
        "cheapest": cheapest,
        "best": best,
        "extra_price": best.unit_price - cheapest.unit_price,
        "saving": cheapest.toc_per_unit - best.toc_per_unit,
    }


def ranking_view(session: Session, lot_id: int, include_non_compliant: bool = False) -> dict[str, Any]:
    """The compliant offers ranked (what an award follows); the table lists the others after
    them when asked, and says which offers are left out and why."""
    shown = intake_views.excluded_view(ranking.lot_ranking(session, lot_id, include_non_compliant=True),
                                       include_non_compliant)
    result = shown["ranking"]
    return shown | {
        "chart": toc_breakdown_chart(result) if result.rows else None,
        "note": price_note(result),
    }


def award_state(session: Session, lot_id: int) -> dict[str, Any]:
    """The lot's standing award (if any), whom it went to, and the awards reopened since."""
    record = locks.active_record(session, lot_id)
    past = [r for r in awards.list_records(session, lot_id) if r.reopened_at is not None]
    return {
        "award": record,
        "awarded_to": awarded_row(record) if record is not None else None,
        "past_records": [(r, awarded_row(r)) for r in reversed(past)],
        "locked": record is not None,
        "award_form": {},
        "award_errors": {},
    }


REASON_KIND_CHOICES = [("", "Choose why"), ("delivery", "Delivery"), ("technical deviation", "Technical deviation"),
                       ("clarification", "Clarification"), ("other", "Other")]


def award_confirmation(session: Session, lot_id: int, offer_id: int | None,
                       form: dict[str, str] | None = None, errors: dict[str, str] | None = None) -> dict[str, Any]:
    """What an award of ``offer_id`` (default the lowest TOC) would record: the chosen offer, its margin
    to the best other offer, the warnings to acknowledge and, for another than the lowest, the reason boxes."""
    plan = awards.plan_award(session, lot_id, offer_id)
    lot = plan.inputs["lot"]
    chosen = plan.chosen["offer_id"]
    return {
        "confirm": {
            "lot_id": lot_id,
            "chosen": plan.chosen,
            "lowest": plan.lowest,
            "is_lowest": plan.is_lowest,
            "next_best": plan.next_best,
            "margin_per_unit": plan.margin_per_unit,
            "margin_total": None if plan.margin_per_unit is None else plan.margin_per_unit * lot["quantity"],
            "margin_pct": plan.margin_pct,
            "warnings": plan.warnings,
            "currency": plan.inputs["tender"]["currency"],
            "revision": plan.inputs["cost_basis"]["revision"],
            "choices": [(row["offer_id"], row["bidder"], row["toc_per_unit"]) for row in plan.ranking],
        },
        "confirm_form": (form or {}) | {"offer_id": str(chosen)},
        "confirm_errors": errors or {},
        "reason_kinds": REASON_KIND_CHOICES,
    }


def awarded_row(record: Any) -> dict[str, Any]:
    """The frozen ranking row of the offer a record awarded."""
    return next((row for row in record.ranking if row["offer_id"] == record.awarded_offer_id), {})


def lot_detail(session: Session, lot_id: int, include_non_compliant: bool = False) -> dict[str, Any]:
    lot = tenders.get_lot(session, lot_id)
    count = tenders.offer_counts(session, [lot.id]).get(lot.id, 0)
    return {
        "lot": tenders.lot_out(lot, count),
        "tender": lot.tender,
        "currency": lot.tender.currency,
        "editing": {},
        "offer_boxes": OFFER_FIELDS,
        "offers": offers.offers_out(session, offers.list_offers(session, lot_id)),
        "currencies": intake_views.currency_choices(lot.tender.currency, lot.tender.exchange_rates or {}),
        **ranking_view(session, lot_id, include_non_compliant),
        **award_state(session, lot_id),
        **intake_views.compliance_view(session, lot_id),
        **intake_views.curves_view(session, lot_id),
        **planning_views.lot_loading(session),
        **certificate_views.lot_section(session, lot_id),
    }


def offer_values(offer: schemas.OfferOut) -> dict[str, Any]:
    return {name: getattr(offer, name) for name in OFFER_FIELDS} | {"version": offer.version}


def offer_row(session: Session, offer_id: int) -> dict[str, Any]:
    offer = offers.get_offer(session, offer_id)
    return {
        "offer": offers.offer_out(session, offer),
        "currency": offer.lot.tender.currency,
        "currencies": intake_views.currency_choices(offer.lot.tender.currency, offer.lot.tender.exchange_rates or {}),
        "locked": locks.active_record(session, offer.lot_id) is not None,
    }


def offer_edit(
    session: Session,
    offer_id: int,
    form: dict[str, str] | None = None,
    errors: dict[str, str] | None = None,
    conflict: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """The lot page with one offer's row open for editing.

    After a conflict the form keeps what the person typed but carries the stored version,
    so that saving again is a deliberate choice to replace the other person's values.
    """
    # An awarded lot's offer gets no edit form that could never be saved: say why instead.
    locks.ensure_open(session, offers.get_offer(session, offer_id).lot)
    row = offer_row(session, offer_id)
    offer = row["offer"]
    values = dict(form) if form is not None else offer_values(offer)
    if conflict is not None:
        values["version"] = offer.version
    edit = {"form": values, "errors": errors or {}, "conflict": conflict}
    return lot_detail(session, offer.lot_id) | row | {"edit": edit, "editing": {offer.id: edit}}


def cost_basis_list(session: Session) -> dict[str, Any]:
    return {"bases": [cost_bases.cost_basis_out(b) for b in cost_bases.list_cost_bases(session)]}


def cost_basis_detail(session: Session, cost_basis_id: int) -> dict[str, Any]:
    basis = cost_bases.cost_basis_out(cost_bases.get_cost_basis(session, cost_basis_id), detail=True)
    return {"basis": basis}


def discard(session: Session) -> None:
    """Forget a failed service call's unsaved changes before the page reads the data again."""
    session.rollback()


def rates_preview(values: dict[str, Any]) -> dict[str, Any]:
    """A, B, C from a method and its inputs as typed, or what stops them being derived."""
    try:
        rates = cost_bases.rates_for(cost_bases.parse_inputs(values))
    except ValidationError as exc:
        problems = field_errors(exc)
    except InvalidField as exc:
        problems = {exc.field: exc.detail}
    else:
        return {"rates": rates, "problems": [], "path": price_path_coverage(values)}
    # Before a box is filled in, an order to fill it in reads like a reproach.
    wording = {"fill this in": "still to fill in"}
    return {
        "rates": None,
        "problems": [(input_label(name), wording.get(message, message)) for name, message in problems.items()],
        "path": price_path_coverage(values),
    }


def method_inputs(
    method: str, values: dict[str, Any], currency: str, errors: dict[str, str] | None = None
) -> dict[str, Any]:
    """The boxes of one method with their values, and the rates they give."""
    model = schemas.METHOD_MODELS[method]
    inputs = full_inputs({k: input_value(v) for k, v in values.items()}, model) | {"method": method}
    return {
        "method": method,
        "boxes": method_boxes(method, currency),
        "values": values,
        "errors": errors or {},
        "preview": rates_preview(inputs),
        "currency": currency,
    }


def basis_values(method: str, typed: dict[str, str], stored: dict[str, Any] | None = None) -> dict[str, Any]:
    """Values for a method's boxes: what was typed, else what is stored, else the defaults."""
    boxes = method_boxes(method)
    values: dict[str, Any] = {box.name: box.default for box in boxes}
    values |= {k: v for k, v in (stored or {}).items() if k in values}
    values |= {box.name: typed[box.name] for box in boxes if typed.get(box.name, "") != ""}
    return values


def editor_boxes(basis: schemas.CostBasisOut | None, typed: dict[str, str]) -> dict[str, Any]:
    """The method boxes of a basis's editor (or of the new-basis form when ``basis`` is None),
    for the method chosen and keeping whatever was typed before the method changed."""
    method = chosen_method(typed.get("method"), basis.method if basis else "direct")
    stored = basis.inputs if basis is not None and method == basis.method else None
    currency = typed.get("currency") or (basis.currency if basis else "")
    return method_inputs(method, basis_values(method, typed, stored), currency)


def basis_form(basis: schemas.CostBasisOut) -> dict[str, Any]:
    """The editor's header boxes filled from the stored basis."""
    return {
        "name": basis.name,
        "currency": basis.currency,
        "method": basis.method,
        "version": basis.version,
    }


def tender_form(tender: schemas.TenderOut) -> dict[str, Any]:
    """The tender header's boxes filled from the stored tender."""
    return {
        "title": tender.title,
        "status": tender.status,
        "cost_basis": f"{tender.cost_basis_id}:{tender.cost_basis_revision}",
        "version": tender.version,
    }
