"""What the planner's pages show: load shapes, the loading of lots, and cost basis revisions
(compared, previewed on open lots, and their workings), gathered from the services' reads.

Nothing here writes; routes call one service for a change and one of these to show it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pydantic import ValidationError
from sqlalchemy.orm import Session

from domain.rates import carbon_cost_per_kwh
from server import schemas
from server.pages.basis_form import method_boxes
from server.pages.forms import full_inputs
from server.pages.shape_charts import (
    MONTH_NAMES,
    daily_curves_chart,
    duration_curve_chart,
    monthly_average_day_chart,
    unit_label,
)
from server.pages.templating import DASH, METHOD_NAMES, fmt_number, fmt_plain, fmt_rate, input_value
from server.services import cost_bases, load_shapes, pages_planning

# --- load shapes ------------------------------------------------------------------------------


def shape_choices(session: Session) -> list[schemas.LoadShapeOut]:
    """Every load shape, for the lot forms' select."""
    return [load_shapes.load_shape_out(s) for s in load_shapes.list_load_shapes(session)]


def shape_list(session: Session) -> dict[str, Any]:
    return {"shapes": shape_choices(session)}


def months_text(months: list[int]) -> str:
    return ", ".join(MONTH_NAMES[m - 1] for m in sorted(months))


def shape_detail(session: Session, shape_id: int) -> dict[str, Any]:
    """A load shape's figures, its two charts and the lots that use it."""
    shape = load_shapes.get_load_shape(session, shape_id)
    out = load_shapes.load_shape_out(shape)
    values = load_shapes.load_shape_values(shape)
    if out.kind == "daily" and out.seasons:
        day_chart = daily_curves_chart(out.seasons, out.unit)
        day_caption = "Typical days of each season (solid: weekdays, dashed: Saturdays and Sundays)"
    else:
        day_chart = monthly_average_day_chart(values.values, out.year, out.unit)
        day_caption = "The average day of each month"
    return {
        "shape": out,
        "unit": unit_label(out.unit),
        "seasons": [(s["name"], months_text(s["months"])) for s in out.seasons or []],
        "day_chart": day_chart,
        "day_caption": day_caption,
        "duration_chart": duration_curve_chart(values.duration_curve, out.unit),
        "lots": pages_planning.lots_using_shape(session, shape_id),
    }


# --- the loading of lots ------------------------------------------------------------------------


def lot_loading(session: Session) -> dict[str, Any]:
    """What the lot page's loading form needs besides the lot."""
    return {"shapes": shape_choices(session)}


def tender_loadings(session: Session, tender_id: int) -> dict[str, Any]:
    """Each lot's loading, and whether the lots differ (the lots table then says which is which)."""
    loadings = pages_planning.tender_loadings(session, tender_id)
    kinds = {(x.source, x.load_shape_id, x.loss_factor, x.peak_load_pu, x.load_growth_pct) for x in loadings.values()}
    return {"loadings": loadings, "loadings_differ": len(kinds) > 1, "shapes": shape_choices(session)}


# --- warnings beside a cost basis's inputs ---------------------------------------------------------


def typed_warnings(values: dict[str, Any], currency: str) -> list[dict[str, str]]:
    """What in a method's inputs as typed (every box, as ``full_inputs`` gives them, and the
    method) is worth a second look; none while they do not yet read as inputs."""
    try:
        inputs = cost_bases.parse_inputs(values)
    except ValidationError:
        return []
    return cost_bases.basis_warnings(inputs, currency)


def with_warnings(boxes: dict[str, Any]) -> dict[str, Any]:
    """A method's boxes (``views.method_inputs``) with the warnings of their values beside the
    derived rates; while the rates cannot be derived, the problems come first and no warning shows."""
    preview = boxes["preview"]
    warnings: list[dict[str, str]] = []
    if preview.get("rates") is not None:
        method = boxes["method"]
        # The boxes hold what was typed or stored; read them as the preview of the rates did.
        typed = {k: input_value(v) for k, v in boxes["values"].items()}
        warnings = typed_warnings(full_inputs(typed, schemas.METHOD_MODELS[method]) | {"method": method},
                                  boxes["currency"])
    return boxes | {"preview": preview | {"warnings": warnings}}


# --- cost basis revisions -----------------------------------------------------------------------

RATE_LABELS = {
    "no_load_rate_per_kw": "A, no-load rate",
    "load_rate_per_kw": "B, load rate",
    "aux_rate_per_kw": "C, auxiliary rate",
}


def _wording(currency: str) -> dict[str, tuple[str, str]]:
    """Label and unit of every input of every method."""
    found: dict[str, tuple[str, str]] = {}
    for method in METHOD_NAMES:
        for box in method_boxes(method, currency):
            found.setdefault(box.name, (box.label, box.unit))
    return found


def shown_value(field: str, value: Any) -> str:
    """A stored input or rate as the pages write it."""
    if value is None:
        return DASH
    if field == "method":
        return METHOD_NAMES.get(value, str(value))
    if isinstance(value, list):
        return ", ".join(fmt_plain(v) for v in value) if value else DASH
    if field in RATE_LABELS and isinstance(value, int | float):
        return fmt_rate(value)
    if isinstance(value, int | float) and not isinstance(value, bool):
        return fmt_plain(round(value, 9))
    return str(value)


def _change(field: str, before: Any, after: Any) -> str:
    numbers = all(isinstance(v, int | float) and not isinstance(v, bool) for v in (before, after))
    if not numbers:
        return ""
    delta = after - before
    size = fmt_rate(abs(delta)) if field in RATE_LABELS else fmt_plain(round(abs(delta), 9))
    text = ("+" if delta > 0 else "\u2212" if delta < 0 else "") + size
    if before:
        text += f" ({'+' if delta > 0 else chr(0x2212) if delta < 0 else ''}{fmt_number(abs(delta) / abs(before) * 100, 1)} %)"
    return text


@dataclass(frozen=True)
class DiffRow:
    field: str
    label: str
    unit: str
    before: str
    after: str
    change: str
    is_rate: bool


def diff_rows(diff: schemas.RevisionDiffOut, basis: schemas.CostBasisDetailOut) -> list[DiffRow]:
    """The changed inputs, then the rates that changed with them (a direct basis's rates are
    its inputs, so they are listed once)."""
    currency = basis.currency
    wording = _wording(currency)
    input_names = {name for r in basis.revisions if r.revision in (diff.revision, diff.against) for name in r.inputs}
    seen: set[tuple[str, str, str]] = set()
    inputs, rates = [], []
    for change in diff.changes:
        key = (change.field, repr(change.before), repr(change.after))
        if key in seen:
            continue
        seen.add(key)
        is_rate = change.field in RATE_LABELS and change.field not in input_names
        if change.field == "method":
            label, unit = "Method", ""
        elif is_rate:
            label, unit = RATE_LABELS[change.field], f"{currency}/kW"
        else:
            label, unit = wording.get(change.field, (change.field.replace("_", " ").capitalize(), ""))
            unit = "" if unit == "0 to 1" else unit  # a range, not a unit: the values say enough here
        row = DiffRow(change.field, label, unit, shown_value(change.field, change.before),
                      shown_value(change.field, change.after), _change(change.field, change.before, change.after), is_rate)
        (rates if is_rate else inputs).append(row)
    return inputs + rates


def revision_numbers(basis: schemas.CostBasisDetailOut) -> list[int]:
    return [r.revision for r in basis.revisions]


def compare_choice(basis: schemas.CostBasisDetailOut, typed: dict[str, str]) -> tuple[dict[str, str], dict[str, str]]:
    """The two revisions to compare as chosen (default: the latest against the one before),
    and a message for a choice that names no revision of this basis."""
    numbers = revision_numbers(basis)
    latest = numbers[-1]
    chosen = {
        "revision": typed.get("revision") or str(latest),
        "against": typed.get("against") or str(numbers[-2] if len(numbers) > 1 else latest),
    }
    errors = {
        name: "choose one of this basis's revisions"
        for name, value in chosen.items()
        if not value.isdigit() or int(value) not in numbers
    }
    return chosen, errors


def change_reasons(basis: schemas.CostBasisDetailOut, revision: int, against: int) -> list[tuple[int, str]]:
    """The reasons given for the revisions that lead from one of two revisions to the other
    (each after the earlier, up to the later); an empty text where none was recorded."""
    low, high = sorted((revision, against))
    return [(r.revision, r.change_reason or "") for r in basis.revisions if low < r.revision <= high]


def revision_by_number(basis: schemas.CostBasisDetailOut, number: int) -> schemas.CostBasisRevisionOut | None:
    return next((r for r in basis.revisions if r.revision == number), None)


def preview_summary(preview: schemas.RevisionPreviewOut) -> dict[str, int]:
    return {
        "lots": len(preview.lots),
        "order_changes": len(preview.changed_lot_ids),
        "leader_changes": sum(1 for lot in preview.lots if lot.leader_changes),
    }


# --- workings ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class InputRow:
    name: str
    label: str
    unit: str
    value: str
    note: str = ""


def workings_inputs(out: schemas.WorkingsOut) -> list[InputRow]:
    """The revision's inputs in the editor's order, in words, with their units."""
    path = out.inputs.get("energy_price_path_per_kwh")
    rows = []
    for box in method_boxes(out.method, out.currency):
        value = out.inputs.get(box.name, box.default)
        note = "not used: the price path replaces it" if path and box.name in (
            "energy_price_per_kwh", "energy_escalation_pct") else ""
        rows.append(InputRow(box.name, box.label, box.unit, shown_value(box.name, value), note))
    return rows


_COMPONENT_NAMES = {"capacity": "Capacity", "energy": "Energy", "carbon": "Carbon", "entered": "Entered"}
_RATE_NAMES = {"A": "A, no-load", "B": "B, load", "C": "C, auxiliary"}
_RATE_FIELDS = {"A": "no_load_rate_per_kw", "B": "load_rate_per_kw", "C": "aux_rate_per_kw"}


def formula_text(formula: str) -> str:
    """The service's plain-text formula with the multiplication sign and sum set properly."""
    text = formula.replace(" x ", " \u00d7 ")
    return "\u03a3 " + text[4:] if text.startswith("sum ") else text


@dataclass(frozen=True)
class TermGroup:
    rate: str
    name: str
    total: float
    terms: list[tuple[str, str, float]]  # component, formula, value per kW


def term_groups(out: schemas.WorkingsOut) -> list[TermGroup]:
    """Each rate with its terms; the terms add up to the stored rate."""
    groups = []
    for rate in ("A", "B", "C"):
        terms = [(_COMPONENT_NAMES.get(t.component, t.component.capitalize()), formula_text(t.formula), t.value_per_kw)
                 for t in out.terms if t.rate == rate]
        groups.append(TermGroup(rate, _RATE_NAMES[rate], getattr(out, _RATE_FIELDS[rate]), terms))
    return groups


@dataclass(frozen=True)
class Column:
    key: str
    label: str
    decimals: int


# How the year-by-year table's columns read; money columns are per kW of guaranteed loss.
_FIRST_COLUMNS = {
    "year": ("Year t", 0),
    "discount_factor": ("Discount factor 1/(1+i)^t", 4),
    "energy_price_per_kwh": ("Energy price", 4),
    "carbon_cost_per_kwh": ("Carbon cost", 4),
    "peak_load_pu": ("Peak loading", 3),
}
_PART_NAMES = {"capacity": "Capacity", "energy": "Energy", "carbon": "Carbon", "term": "Year's term"}


def workings_table(out: schemas.WorkingsOut) -> dict[str, Any]:
    """The year-by-year table: leading columns, the money columns grouped by rate, and totals."""
    leading, groups = [], []
    for key in out.table_columns:
        if key in _FIRST_COLUMNS:
            label, decimals = _FIRST_COLUMNS[key]
            unit = {"energy_price_per_kwh": f"{out.currency}/kWh", "carbon_cost_per_kwh": f"{out.currency}/kWh",
                    "peak_load_pu": "pu"}.get(key, "")
            leading.append(Column(key, label + (f" ({unit})" if unit else ""), decimals))
    for prefix, rate in (("no_load", "A"), ("load", "B"), ("aux", "C")):
        columns = [Column(f"{prefix}_{part}", name, 1) for part, name in _PART_NAMES.items()
                   if f"{prefix}_{part}" in out.table_columns]
        if columns:
            groups.append((_RATE_NAMES[rate], columns))
    index = {key: k for k, key in enumerate(out.table_columns)}
    money = [c for _, columns in groups for c in columns]
    # A rate's first column opens its group; its year's term (the sum of the parts) stands out.
    css = {c.key: " ".join(filter(None, ("group-start" if c is columns[0] else "", "strong" if c.key.endswith("_term") else "")))
           for _, columns in groups for c in columns}
    totals = {c.key: sum(row[index[c.key]] for row in out.table) for c in money}
    return {
        "leading": leading,
        "groups": groups,
        "rows": [
            {"leading": [fmt_number(row[index[c.key]], c.decimals) for c in leading],
             "money": [(fmt_number(row[index[c.key]], c.decimals), css[c.key]) for c in money]}
            for row in out.table
        ],
        "totals": [(fmt_number(totals[c.key], 1), css[c.key]) for c in money],
    }


def workings_symbols(out: schemas.WorkingsOut) -> list[tuple[str, str, str]]:
    """The symbols of the formulas with what they stand for and their value in this revision."""
    cur = out.currency
    inputs = out.inputs

    def value(name: str, unit: str = "") -> str:
        shown = shown_value(name, inputs.get(name))
        return f"{shown} {unit}".strip() if shown != DASH else DASH

    carbon = carbon_cost_per_kwh(inputs.get("carbon_price_per_t") or 0.0, inputs.get("emission_factor_t_per_mwh") or 0.0)
    carbon_row = ("carbon", "carbon price × grid emission factor",
                  f"{fmt_plain(round(carbon, 9))} {cur}/kWh")
    if out.method == "present_worth":
        path = inputs.get("energy_price_path_per_kwh")
        price = ("the explicit price of year t (the price path)" if path
                 else "energy price × (1 + e)^(t − 1), e = " + value("energy_escalation_pct", "% a year"))
        return [
            ("t", "year, 1 to n", f"n = {value('years', 'years')}"),
            ("i", "discount rate", value("discount_rate_pct", "% a year")),
            ("price_t", price, value("energy_price_per_kwh", f"{cur}/kWh in year 1") if not path else f"{len(path)} prices"),
            carbon_row,
            ("SC", "capacity cost", value("capacity_cost_per_kw_year", f"{cur}/kW a year")),
            ("RF", "responsibility factor", value("responsibility_factor")),
            ("LsF", "loss factor", value("loss_factor")),
            ("peak_t", "peak loading × (1 + g)^(t − 1), g = " + value("load_growth_pct", "% a year"),
             value("peak_load_pu", "pu in year 1")),
            ("hours", "hours a year", "8,760"),
            ("cooling hours", "hours a year the cooling runs", value("cooling_hours_per_year", "h")),
        ]
    if out.method == "fixed_charge_rate":
        return [
            ("FCR", "fixed charge rate", value("fixed_charge_rate_pct", "% a year")),
            ("SC", "system capacity cost", value("system_capacity_cost_per_kw_year", f"{cur}/kW a year")),
            ("EC", "energy cost", value("energy_cost_per_kwh", f"{cur}/kWh")),
            carbon_row,
            ("RF", "responsibility factor", value("responsibility_factor")),
            ("PL", "peak loading (levelised)", value("peak_load_pu", "pu")),
            ("LsF", "loss factor", value("loss_factor")),
            ("cooling hours", "hours a year the cooling runs", value("cooling_hours_per_year", "h")),
        ]
    return []
