"""Pages: limit tables (the built-in regulatory ones and the users' own), a table's rows, a
planner's own tables typed in or imported, and the review of a built-in table."""

from __future__ import annotations

import re
from typing import Any

from fastapi import APIRouter, Request
from pydantic import ValidationError

from server import schemas
from server.auth import ANY_ROLE, PLANNER
from server.deps import SessionDep
from server.errors import Conflict, ImportRefused, InvalidField, NotFound
from server.pages import intake_views, views
from server.pages.forms import FormDep, FormValues, field_errors, plain_message
from server.pages.intake import UploadDep
from server.pages.templating import input_value, render, see_other
from server.services import compliance, pages_intake

router = APIRouter()

# The columns of a table's rows, by kind, in the order the rows box takes them.
ROW_COLUMNS = {
    "max_losses": ("rating_kva", "max_no_load_loss_w", "max_load_loss_w"),
    "min_efficiency": ("rating_kva", "min_pct"),
    "min_pei": ("rating_kva", "min_pct"),
}
KIND_CHOICES = [(kind, name) for kind, name in intake_views.KIND_NAMES.items()]
NEW_DEFAULTS = {"kind": "max_losses", "per_unit_load": "0.5", "phases": "", "insulation": ""}
_SPLIT = re.compile(r"[,;\t ]+")
_META = ("key", "name", "source", "kind", "phases", "insulation", "per_unit_load")


class RowsText(ValueError):
    """The rows box cannot be read; the message names the line."""


def parse_rows(text: str, kind: str) -> tuple[list[dict[str, str]], list[int]]:
    """The rows box: one rating a line, its values separated by commas, spaces or tabs.

    Returns the rows as column -> number text (the schema checks the numbers) and the line
    each came from. A first line of column names, as copied from a spreadsheet, is skipped.
    """
    columns = ROW_COLUMNS.get(kind, ROW_COLUMNS["max_losses"])
    rows, lines = [], []
    for number, line in enumerate(text.splitlines(), start=1):
        values = [v for v in _SPLIT.split(line.strip()) if v]
        if not values or (not rows and values[0].lower().startswith("rating")):
            continue
        if len(values) != len(columns):
            raise RowsText(f"line {number}: give {len(columns)} numbers, {', '.join(columns)}")
        rows.append(dict(zip(columns, values, strict=True)))
        lines.append(number)
    return rows, lines


def rows_text(table: schemas.LimitTableOut) -> str:
    """A table's rows as the rows box shows them."""
    columns = ROW_COLUMNS.get(table.kind, ROW_COLUMNS["max_losses"])
    return "\n".join(", ".join(input_value(row.get(c)) for c in columns) for row in table.rows)


def _errors(exc: ValidationError, lines: list[int]) -> dict[str, str]:
    """Schema messages by box; a bad row names its line and column."""
    errors: dict[str, str] = {}
    for error in exc.errors(include_url=False):
        loc = error.get("loc", ())
        if loc == ("rows",):
            errors.setdefault("rows", "give at least one rating" if not lines else plain_message(error))
        elif loc and loc[0] == "rows" and len(loc) > 1 and isinstance(loc[1], int):
            line = lines[loc[1]] if loc[1] < len(lines) else loc[1] + 1
            column = f" {loc[2]}" if len(loc) > 2 else ""
            errors.setdefault("rows", f"line {line}:{column} {plain_message(error)}")
    row_columns = {c for columns in ROW_COLUMNS.values() for c in columns}
    others = {k: v for k, v in field_errors(exc).items() if k not in row_columns and k != "rows"}
    return others | errors


def _service_error(exc: InvalidField, lines: list[int]) -> dict[str, str]:
    """A service's refusal beside its box; "rows.3" is the fourth row, named by its line."""
    field, _, index = exc.field.partition(".")
    if field == "rows" and index.isdigit() and int(index) < len(lines):
        return {"rows": f"line {lines[int(index)]}: {exc.detail}"}
    return {field: exc.detail}


def _meta(form: FormValues) -> dict[str, Any]:
    """The table's describing boxes; "any" phases or insulation is no value."""
    data: dict[str, Any] = {name: form.get(name, "") for name in _META}
    for name in ("phases", "insulation", "per_unit_load"):
        if data[name] == "":
            data.pop(name)
    return data | _phases(form)


def _phases(form: FormValues) -> dict[str, Any]:
    """Phases as the schema's whole-number choice (a form posts text); "any" is no value."""
    value = form.get("phases", "")
    if not value:
        return {}
    return {"phases": int(value) if value.isdigit() else value}


def _list_page(session, **extra: Any) -> dict[str, Any]:
    tables = compliance.list_tables(session)
    return {
        "tables": tables,
        "reviews": pages_intake.latest_reviews(session),
        "kinds": intake_views.KIND_NAMES,
        "kind_choices": KIND_CHOICES,
        "new_form": NEW_DEFAULTS,
        "new_errors": {},
        "import_form": NEW_DEFAULTS,
        "import_errors": {},
        "import_refused": None,
    } | extra


@router.get("/limit-tables", dependencies=[ANY_ROLE])
def limit_table_list(request: Request, session: SessionDep):
    return render(request, "limit_tables/list.html", _list_page(session))


@router.post("/limit-tables", dependencies=[PLANNER])
def create_limit_table(request: Request, session: SessionDep, form: FormDep):
    """A table typed in: its description and one line per rating."""
    lines: list[int] = []
    try:
        rows, lines = parse_rows(form.get("rows", ""), form.get("kind", ""))
        row = compliance.create_table(session, schemas.LimitTableCreate.model_validate(_meta(form) | {"rows": rows}))
    except RowsText as exc:
        errors = {"rows": str(exc)}
    except ValidationError as exc:
        errors = _errors(exc, lines)
    except InvalidField as exc:
        views.discard(session)
        errors = _service_error(exc, lines)
    else:
        return see_other(request, f"/limit-tables/{row.key}")
    return render(request, "limit_tables/list.html", _list_page(session, new_form=form, new_errors=errors), 422)


@router.post("/limit-tables/import", dependencies=[PLANNER])
def import_limit_table(request: Request, session: SessionDep, form: FormDep, upload: UploadDep):
    """A table from a CSV or XLSX file with a rating_kva column and the limit columns."""
    try:
        if upload is None:
            raise ImportRefused("Choose a CSV or XLSX file to upload.", [])
        row = compliance.import_table(session, _meta(form), upload.filename, upload.content)
    except ImportRefused as exc:
        views.discard(session)
        context = _list_page(session, import_form=form, import_refused=exc)
    except InvalidField as exc:
        views.discard(session)
        context = _list_page(session, import_form=form, import_errors={exc.field: exc.detail})
    else:
        return see_other(request, f"/limit-tables/{row.key}")
    return render(request, "limit_tables/list.html", context, 422)


def _detail(session, key: str, **extra: Any) -> dict[str, Any]:
    """Every table under one key (a key may hold one for each kind of unit) and their forms."""
    tables = [t for t in compliance.list_tables(session) if t.key == key]
    if not tables:
        raise NotFound(f"There is no limit table '{key}'.")
    first = tables[0]
    edit_form = {
        "version": first.version, "name": first.name, "source": first.source, "phases": first.phases or "",
        "insulation": first.insulation or "", "per_unit_load": first.per_unit_load, "rows": rows_text(first),
    }
    return {
        "key": key,
        "tables": tables,
        "first": first,
        "rules": {rule.id: rule for rule in compliance.list_rules(session)},
        "review_table": None,
        "kinds": intake_views.KIND_NAMES,
        "columns": ROW_COLUMNS.get(first.kind, ()),
        "edit_form": edit_form,
        "edit_errors": {},
        "conflict": None,
        "review_form": {},
        "review_errors": {},
        "saved": None,
    } | extra


@router.get("/limit-tables/{key}", dependencies=[ANY_ROLE])
def limit_table(request: Request, key: str, session: SessionDep, saved: str | None = None):
    return render(request, "limit_tables/detail.html", _detail(session, key, saved=saved))


@router.post("/limit-tables/{key}/edit", dependencies=[PLANNER])
def save_limit_table(request: Request, key: str, session: SessionDep, form: FormDep):
    """Save one of the users' own tables against the version in the form."""
    lines: list[int] = []
    conflict, status = None, 422
    try:
        rows, lines = parse_rows(form.get("rows", ""), form.get("kind", ""))
        data = {name: form.get(name, "") for name in ("version", "name", "source", "per_unit_load")}
        if not data["per_unit_load"]:
            data.pop("per_unit_load")  # kept as stored
        data |= {"phases": None, "insulation": form.get("insulation") or None} | _phases(form) | {"rows": rows}
        compliance.patch_table(session, key, schemas.LimitTablePatch.model_validate(data))
    except RowsText as exc:
        errors = {"rows": str(exc)}
    except ValidationError as exc:
        errors = _errors(exc, lines)
    except InvalidField as exc:
        views.discard(session)
        errors = _service_error(exc, lines)
    except Conflict as exc:
        views.discard(session)
        errors, status, conflict = {}, 409, exc.message
    else:
        return see_other(request, f"/limit-tables/{key}?saved=table")
    context = _detail(session, key)
    typed = dict(form) | {"version": context["edit_form"]["version"] if conflict else form.get("version", "")}
    return render(request, "limit_tables/detail.html",
                  context | {"edit_form": typed, "edit_errors": errors, "conflict": conflict}, status)


@router.post("/limit-tables/{key}/review", dependencies=[PLANNER])
def review_limit_table(request: Request, key: str, session: SessionDep, form: FormDep):
    """Mark one built-in table verified against a named document (or withdraw that)."""
    table_id = form.get("table_id") or None
    try:
        compliance.review_built_in(session, key, review_data(form), table_id)
    except ValidationError as exc:
        errors = field_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {exc.field: exc.detail}
    else:
        return see_other(request, f"/limit-tables/{key}?saved=review#{table_id or ''}")
    context = _detail(session, key) | {"review_table": table_id, "review_form": form, "review_errors": errors}
    return render(request, "limit_tables/detail.html", context, 422)


def review_data(form: FormValues) -> schemas.RuleReviewIn:
    return schemas.RuleReviewIn.model_validate(
        {"status": form.get("status", ""), "document": form.get("document", ""), "note": form.get("note", "")})


@router.get("/rules", dependencies=[ANY_ROLE])
def rule_list(request: Request, session: SessionDep, saved: str | None = None):
    """Every built-in rule: limit tables, tolerances and constants, with source, status and reviews."""
    return render(request, "limit_tables/rules.html", _rules_page(session, saved=saved))


def _rules_page(session, **extra: Any) -> dict[str, Any]:
    rules = compliance.list_rules(session)
    return {
        "table_rules": [r for r in rules if r.kind == "limit table"],
        "tolerance_rules": [r for r in rules if r.kind == "tolerance"],
        "review_table": None, "review_form": {}, "review_errors": {}, "saved": None,
    } | extra


@router.post("/rules/{rule_id}/review", dependencies=[PLANNER])
def review_rule(request: Request, rule_id: str, session: SessionDep, form: FormDep):
    """Mark a built-in tolerance or constant verified against a named document (or withdraw that)."""
    try:
        compliance.review_rule(session, rule_id, review_data(form))
    except ValidationError as exc:
        errors = field_errors(exc)
    else:
        return see_other(request, f"/rules?saved={rule_id}#{rule_id}")
    context = _rules_page(session, review_table=rule_id, review_form=form, review_errors=errors)
    return render(request, "limit_tables/rules.html", context, 422)
