"""What the fleet pages show: the fleet's losses at a cost basis with its charts and loading
findings, an inventory import's preview, the replacement shortlist's form and result, and the
typical-loss table as text.

Nothing here writes; the form helpers are pure and tested on their own.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Annotated, Any, Literal
from urllib.parse import urlencode

from pydantic import BaseModel, ConfigDict, Field, ValidationError
from sqlalchemy.orm import Session

from domain.fleet import DRY, LIQUID
from server import schemas
from server.pages.fleet_charts import loss_split_chart, pareto_chart, top_groups
from server.pages.forms import FormValues, field_errors, plain_message
from server.pages.shape_form import problem_rows
from server.pages.templating import input_value
from server.services import compliance, cost_bases, pages_fleet
from server.services import fleet as service

GROUPINGS = [("region", "Region"), ("site", "Site"), ("rating", "Rating"), ("vintage", "Decade installed"),
             ("insulation", "Insulation")]
# A page shows this many shortlist rows; the CSV holds every unit on the shortlist.
SHORTLIST_ROWS = 500
SHORTLIST_CSV_ROWS = 100_000


# --- the fleet page ---------------------------------------------------------------------------------

class FleetView(BaseModel):
    """The fleet page's choices, from its address: which prices, which grouping, which loadings."""

    model_config = ConfigDict(extra="ignore")

    cost_basis_id: Annotated[int, Field(ge=1)] | None = None
    by: Literal["region", "site", "rating", "vintage", "insulation"] = "region"
    max_loading_pu: Annotated[float, Field(gt=0, le=5)] = 1.0
    min_loading_pu: Annotated[float, Field(ge=0, le=5)] = 0.3
    limit: Annotated[int, Field(ge=1, le=1000)] = 20


@dataclass(frozen=True)
class BasisChoice:
    id: int
    name: str
    currency: str
    method: str

    @property
    def priced(self) -> bool:
        """Whether the basis has the energy prices a fleet costing needs."""
        return self.method != "direct"


_METHOD_ORDER = {"present_worth": 0, "fixed_charge_rate": 1}


def basis_choices(session: Session) -> list[BasisChoice]:
    """Every cost basis: present worth first (it carries a discount rate for the shortlist), then
    fixed charge rate, then the direct-rates ones, which have no energy price."""
    choices = [BasisChoice(b.id, b.name, b.currency, b.latest.method) for b in cost_bases.list_cost_bases(session)]
    return sorted(choices, key=lambda c: _METHOD_ORDER.get(c.method, 2))


def fleet_view(query: FormValues, bases: list[BasisChoice]) -> tuple[FleetView, dict[str, str], dict[str, str]]:
    """The choices asked in the address (a bad one falls back to its default and gets a message),
    the boxes as shown, and the messages. With no basis asked, the first with energy prices."""
    asked = {k: v for k, v in query.items() if v != ""}
    errors: dict[str, str] = {}
    try:
        view = FleetView.model_validate(asked)
    except ValidationError as exc:
        errors = field_errors(exc)
        view = FleetView.model_validate({k: v for k, v in asked.items() if k not in errors})
    if view.cost_basis_id is None:
        first = next((b for b in bases if b.priced), None)
        view = view.model_copy(update={"cost_basis_id": first.id if first else None})
    shown = {name: input_value(getattr(view, name)) for name in FleetView.model_fields} | {
        k: v for k, v in asked.items() if k in errors}
    return view, shown, errors


def fleet_page(session: Session, query: FormValues, **extra: Any) -> dict[str, Any]:
    """The fleet's losses, charts and loading findings as the address asks, and the import form."""
    bases = basis_choices(session)
    view, shown, errors = fleet_view(query, bases)
    overview = pages_fleet.fleet_overview(session, view.cost_basis_id, view.by, view.max_loading_pu,
                                          view.min_loading_pu, view.limit)
    basis = next((b for b in bases if b.id == view.cost_basis_id), None)
    currency = basis.currency if basis else ""
    bars = top_groups(overview.groups.groups) if overview.groups else []
    return {
        "view": view,
        "view_form": shown,
        "view_errors": errors,
        "bases": bases,
        "basis": basis,
        "currency": currency,
        "groupings": GROUPINGS,
        "grouping_name": dict(GROUPINGS)[view.by],
        "overview": overview,
        "bars": bars,
        "pareto_chart": pareto_chart(bars, currency) if bars else None,
        "split_chart": loss_split_chart(bars) if bars else None,
        "units_csv": f"/api/v1/fleet/units.csv?{urlencode({'cost_basis_id': view.cost_basis_id})}"
                     if overview.summary else None,
        "import_form": {},
        "import_errors": {},
        "import_refused": None,
        "imported": None,
    } | extra


def import_default_loss_factor(form: FormValues) -> tuple[float | None, dict[str, str]]:
    """The import form's default loss factor: empty is none; otherwise 0 to 1."""
    text = form.get("default_loss_factor", "")
    if text == "":
        return None, {}
    try:
        value = float(text)
    except ValueError:
        return None, {"default_loss_factor": "must be a number"}
    if not 0 <= value <= 1:
        return None, {"default_loss_factor": "must be between 0 and 1"}
    return value, {}


def import_preview(session: Session, import_id: int, **extra: Any) -> dict[str, Any]:
    staged = service.import_out(service.get_import(session, import_id))
    return {"staged": staged, "problems": problem_rows([p.model_dump() for p in staged.problems]),
            "commit_error": None} | extra


# --- the shortlist -----------------------------------------------------------------------------------

SHORTLIST_BOXES = ("cost_basis_id", "candidate", "limit_table", "replacement_cost_per_kva", "replacement_cost_fixed",
                   "installation_cost", "salvage_value", "service_life_years", "sizing_years", "load_growth_pct",
                   "max_loading_pu", "discount_rate_pct", "reference_year", "region", "min_npv")


def shortlist_defaults(bases: list[BasisChoice]) -> dict[str, str]:
    """The schema's defaults as the form shows them, with the first basis that has energy prices."""
    defaults = {name: input_value(field.default) for name, field in schemas.ShortlistIn.model_fields.items()
                if name in SHORTLIST_BOXES and not field.is_required()}
    first = next((b for b in bases if b.priced), None)
    return defaults | {"cost_basis_id": str(first.id) if first else "", "discount_rate_pct": "",
                       "reference_year": "", "region": ""}


def shortlist_data(form: FormValues, limit: int) -> dict[str, Any]:
    """The shortlist form as ``schemas.ShortlistIn`` takes it; empty optional boxes are left out."""
    data: dict[str, Any] = {name: form.get(name, "") for name in SHORTLIST_BOXES}
    for name in SHORTLIST_BOXES:
        if data[name] == "" and not schemas.ShortlistIn.model_fields[name].is_required():
            data.pop(name)
    return data | {"limit": limit}


def shortlist_choices(session: Session) -> dict[str, Any]:
    """The form's choices: cost bases, maximum-loss tables by key, and the fleet's regions."""
    keys: dict[str, str] = {}
    for table in compliance.list_tables(session):
        if table.kind == "max_losses":
            keys.setdefault(table.key, table.name)
    bases = basis_choices(session)
    return {
        "bases": bases,
        "basis_options": [(str(b.id), b.name + ("" if b.priced else " (direct rates: no energy price)")) for b in bases],
        "table_keys": [(key, f"{key}: {name}") for key, name in keys.items()],
        "region_options": [("", "Every region")] + [(r, r) for r in pages_fleet.fleet_regions(session)],
    }


def shortlist_csv_url(form: FormValues) -> str:
    return "/fleet/shortlist.csv?" + urlencode({k: v for k, v in form.items() if k in SHORTLIST_BOXES})


# --- the typical-loss table ---------------------------------------------------------------------------

_SPLIT = re.compile(r"[,;\t ]+")
INSULATION_CODES = {"liquid": LIQUID, "dry": DRY, str(LIQUID): LIQUID, str(DRY): DRY}
TYPICAL_COLUMNS = ("insulation", "from_year", "to_year", "rating_kva", "no_load_loss_w", "load_loss_w")


class RowsText(ValueError):
    """The rows box cannot be read; the message names the line."""


def parse_typical_rows(text: str) -> tuple[list[list[Any]], list[int]]:
    """One row a line: insulation (liquid or dry), from year, to year, rating [kVA], no-load and load
    loss [W], separated by commas, spaces or tabs. A first line of column names is skipped.
    Returns the rows (numbers as text, the schema checks them) and the line each came from."""
    rows, lines = [], []
    for number, line in enumerate(text.splitlines(), start=1):
        values = [v for v in _SPLIT.split(line.strip()) if v]
        if not values or (not rows and values[0].lower().startswith("insulation")):
            continue
        if len(values) != len(TYPICAL_COLUMNS):
            raise RowsText(f"line {number}: give {len(TYPICAL_COLUMNS)} values, {', '.join(TYPICAL_COLUMNS)}")
        code = INSULATION_CODES.get(values[0].lower())
        if code is None:
            raise RowsText(f"line {number}: insulation must be liquid or dry")
        rows.append([code, *values[1:]])
        lines.append(number)
    return rows, lines


def typical_rows_text(table: dict[str, Any]) -> str:
    """The stored rows as the rows box shows them."""
    names = {LIQUID: "liquid", DRY: "dry"}
    return "\n".join(
        ", ".join([names.get(int(row[0]), str(row[0]))] + [input_value(v) for v in row[1:]]) for row in table["rows"])


def typical_errors(exc: ValidationError, lines: list[int]) -> dict[str, str]:
    """Schema messages by box; a bad row names its line and column."""
    errors: dict[str, str] = {}
    for error in exc.errors(include_url=False):
        loc = error.get("loc", ())
        if loc and loc[0] == "rows" and len(loc) > 2 and isinstance(loc[1], int):
            line = lines[loc[1]] if loc[1] < len(lines) else loc[1] + 1
            column = TYPICAL_COLUMNS[loc[2]] if isinstance(loc[2], int) and loc[2] < len(TYPICAL_COLUMNS) else ""
            errors.setdefault("rows", f"line {line}, {column}: {plain_message(error)}")
    boxes = field_errors(exc)
    if "rows" not in errors and "rows" in boxes:
        errors["rows"] = "give at least one row" if not lines else boxes["rows"]
    return {k: v for k, v in boxes.items() if k != "rows"} | errors


_ROW_PROBLEM = re.compile(r"^rows\[(\d+)\]\.?(\w*):?\s*(.*)$", re.S)


def typical_service_error(detail: str, lines: list[int]) -> dict[str, str]:
    """The table's refusal of a row ("rows[3].no_load_loss_w: must be >= 0") named by its line."""
    found = _ROW_PROBLEM.match(detail)
    if found is None or int(found.group(1)) >= len(lines):
        return {"rows": detail}
    column = f", {found.group(2)}" if found.group(2) else ""
    return {"rows": f"line {lines[int(found.group(1))]}{column}: {found.group(3).rstrip('.')}"}


def typical_page(session: Session, **extra: Any) -> dict[str, Any]:
    table = service.typical_losses_out(service.typical_losses(session))
    return {
        "table": table,
        "insulation_names": {LIQUID: "Liquid-immersed", DRY: "Dry-type"},
        # Rows changed from the illustrative defaults are no longer what their source describes:
        # the planner says where the new numbers come from.
        "edit_form": {"name": table["name"], "source": "" if table["status"] == "illustrative" else table["source"],
                      "rows": typical_rows_text(table)},
        "edit_errors": {},
        "saved": False,
    } | extra
