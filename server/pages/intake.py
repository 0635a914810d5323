"""Pages: offer imports (upload, preview, commit), a tender's currencies, and the lot page's
compliance and efficiency sections that htmx fetches again when an offer changes."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from fastapi.responses import RedirectResponse
from pydantic import ValidationError
from starlette.datastructures import UploadFile

from server import schemas
from server.auth import ANY_ROLE, BUYER
from server.deps import SessionDep
from server.errors import Conflict, ImportRefused, InvalidField
from server.pages import intake_views, views
from server.pages.forms import FormDep, FormListsDep, FormValues, conflict_errors, field_errors, plain_message
from server.pages.templating import is_htmx, page_or_partial, render, see_other
from server.services import offer_imports, pages_intake, tenders

router = APIRouter()


@dataclass(frozen=True)
class Upload:
    filename: str
    content: bytes


async def read_upload(request: Request) -> Upload | None:
    """The file posted in the form's ``file`` box, or None when none was chosen."""
    form = await request.form()
    file = form.get("file")
    if not isinstance(file, UploadFile) or not file.filename:
        return None
    return Upload(file.filename, await file.read())


UploadDep = Annotated[Upload | None, Depends(read_upload)]
NO_FILE = "Choose a CSV or XLSX file to upload."


# --- offer imports --------------------------------------------------------------------------

def _tender_page(session, tender_id: int, **extra: Any) -> dict[str, Any]:
    """The tender page's context with its forms at their stored values."""
    context = views.tender_detail(session, tender_id)
    return context | {"form": views.tender_form(context["tender"]), "lot_form": views.LOT_DEFAULTS} | extra


@router.post("/tenders/{tender_id:int}/offer-imports", dependencies=[BUYER])
def upload_offers(request: Request, tender_id: schemas.PathId, session: SessionDep, upload: UploadDep):
    """Check every row of the file and show the preview; nothing is applied yet."""
    try:
        if upload is None:
            raise ImportRefused(NO_FILE, [])
        staged = offer_imports.stage_import(session, tender_id, upload.filename, upload.content)
    except ImportRefused as exc:
        views.discard(session)
        context = _tender_page(session, tender_id, import_refused=exc)
        return page_or_partial(request, "tenders/detail.html", "tenders/_import.html", context, 422)
    return see_other(request, f"/offer-imports/{staged.id}")


@dataclass(frozen=True)
class Cell:
    column: str
    value: Any
    errors: list[str]
    warnings: list[str]


PREVIEW_COLUMNS = (
    ("lot", "Lot"), ("bidder", "Bidder"), ("unit_price", "Unit price"), ("currency", "Currency"),
    ("no_load_loss_w", "No-load loss (W)"), ("load_loss_w", "Load loss (W)"), ("aux_loss_w", "Auxiliary loss (W)"),
    ("impedance_pct", "Impedance (%)"), ("no_load_current_pct", "No-load current (%)"),
    ("delivery_weeks", "Delivery (weeks)"), ("notes", "Notes"),
)


NUMERIC_COLUMNS = {"unit_price", "no_load_loss_w", "load_loss_w", "aux_loss_w", "impedance_pct",
                   "no_load_current_pct", "delivery_weeks"}


def _as_read(name: str, value: Any) -> Any:
    """A refused row keeps its cells as the file had them: a number written as text is shown
    as a number like the others, anything else exactly as written."""
    if name in NUMERIC_COLUMNS and isinstance(value, str):
        try:
            return float(value)
        except ValueError:
            return value
    return value


def preview_cells(row: schemas.ImportRowOut) -> tuple[list[Cell], list[str], list[str]]:
    """A preview row's cells, each with the errors and warnings about its column; and the
    messages about no column shown (they go beside the row number)."""
    shown = {name for name, _ in PREVIEW_COLUMNS}
    cells = []
    for name, _ in PREVIEW_COLUMNS:
        value = row.lot if name == "lot" else row.values.get(name, row.bidder if name == "bidder" else None)
        cells.append(Cell(
            name, _as_read(name, value),
            [e.message for e in row.errors if e.column == name],
            [w.message for w in row.warnings if w.column == name],
        ))
    other_errors = [f"{e.column}: {e.message}" if e.column else e.message for e in row.errors if e.column not in shown]
    other_warnings = [w.message for w in row.warnings if w.column not in shown]
    return cells, other_errors, other_warnings


def preview_view(session, import_id: int, problems_only: bool) -> dict[str, Any]:
    part = pages_intake.import_preview(session, import_id, problems_only, intake_views.PREVIEW_ROWS)
    tender = tenders.get_tender(session, part.staged.tender_id)
    return {
        "staged": part.staged,
        "matching": part.matching,
        "problems_only": problems_only,
        "limit": intake_views.PREVIEW_ROWS,
        "tender": tender,
        "columns": PREVIEW_COLUMNS,
        "numeric": NUMERIC_COLUMNS,
        "cells": preview_cells,
        "commit_error": None,
    }


@router.get("/offer-imports/{import_id:int}", dependencies=[ANY_ROLE])
def offer_import(request: Request, import_id: schemas.PathId, session: SessionDep, problems: bool = False):
    """The preview: counts over every row, then the rows (all, or those with problems)."""
    context = preview_view(session, import_id, problems)
    return page_or_partial(request, "imports/detail.html", "imports/_rows.html", context)


@router.post("/offer-imports/{import_id:int}/commit", dependencies=[BUYER])
def commit_offer_import(request: Request, import_id: schemas.PathId, session: SessionDep):
    """Apply every row at once and go back to the tender; a preview with errors applies nothing."""
    try:
        staged = offer_imports.commit_import(session, import_id)
    except (InvalidField, Conflict) as exc:
        views.discard(session)
        message = exc.detail if isinstance(exc, InvalidField) else exc.message
        context = preview_view(session, import_id, False) | {"commit_error": message}
        return render(request, "imports/detail.html", context, exc.status_code)
    return see_other(request, f"/tenders/{staged.tender_id}?imported={staged.id}#offer-import")


# --- currencies -----------------------------------------------------------------------------

_RATE_LINE = re.compile(r"^(?:1\s+)?([A-Za-z]{3})\s*[=:]?\s*(\S+?)(?:\s+[A-Za-z]{3})?$")


class RatesText(ValueError):
    """The exchange rates box cannot be read; the message names the line."""


def parse_rates(text: str) -> dict[str, str]:
    """One rate a line, "USD = 0.92" (also "USD 0.92" or "1 USD = 0.92 EUR"), as code -> number text.

    Blank lines are skipped; the numbers are checked by the schema.
    """
    rates: dict[str, str] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        line = line.strip()
        if not line:
            continue
        found = _RATE_LINE.match(line)
        if found is None:
            raise RatesText(f"line {number}: write it as a code and a rate, such as USD = 0.92")
        code, rate = found.group(1).upper(), found.group(2)
        if code in rates:
            raise RatesText(f"line {number}: {code} has a rate already")
        if "," in rate:
            raise RatesText(f"line {number}: write the rate with a decimal point, such as 0.92")
        rates[code] = rate
    return rates


def _currency_errors(exc: ValidationError) -> dict[str, str]:
    """Schema messages for the currencies box, naming the currency a bad rate belongs to."""
    errors: dict[str, str] = {}
    for error in exc.errors(include_url=False):
        loc = [str(part) for part in error.get("loc", ())]
        if loc and loc[0] == "exchange_rates":
            code = loc[1] if len(loc) > 1 else ""
            message = "is not a three-letter currency code" if "[key]" in loc else plain_message(error)
            errors.setdefault("exchange_rates", f"{code} {message}".strip())
        else:
            errors.update({k: v for k, v in field_errors(exc).items() if k not in errors})
    return errors


def _currency_patch(form: FormValues) -> dict[str, Any]:
    return {
        "version": form.get("version", ""),
        "bid_opening_date": form.get("bid_opening_date") or None,
        "exchange_rates": parse_rates(form.get("exchange_rates", "")),
    }


@router.post("/tenders/{tender_id:int}/currencies", dependencies=[BUYER])
def save_currencies(request: Request, tender_id: schemas.PathId, session: SessionDep, form: FormDep):
    """The bid opening date and the exchange rates fixed at it, saved against the tender's version."""
    conflict, status = None, 422
    try:
        tenders.patch_tender(session, tender_id, schemas.TenderPatch.model_validate(_currency_patch(form)))
    except RatesText as exc:
        errors = {"exchange_rates": str(exc)}
    except ValidationError as exc:
        errors = _currency_errors(exc)
    except InvalidField as exc:
        views.discard(session)
        errors = {exc.field: exc.detail}
    except Conflict as exc:
        views.discard(session)
        errors, status, conflict = conflict_errors(exc), 409, exc.current
    else:
        if not is_htmx(request):
            return see_other(request, f"/tenders/{tender_id}?saved=1")
        return render(request, "tenders/_header.html", _tender_page(session, tender_id, currencies_saved=True))
    context = _tender_page(session, tender_id)
    typed = dict(form)
    if conflict is not None:
        # Keep what was typed, against the stored version: saving again is a deliberate overwrite.
        typed["version"] = str(context["tender"].version)
    context |= {"currency_form": typed, "currency_errors": errors, "currency_conflict": conflict}
    return page_or_partial(request, "tenders/detail.html", "tenders/_header.html", context, status)


# --- the lot page's compliance and efficiency sections ---------------------------------------

@router.post("/lots/{lot_id:int}/limit-tables", dependencies=[BUYER])
def save_lot_tables(request: Request, lot_id: schemas.PathId, session: SessionDep, form: FormDep, lists: FormListsDep):
    """The limit tables a lot names, saved against the lot's version; the whole page follows,
    since the ranking, the compliance and the chart all change."""
    try:
        patch = schemas.LotPatch.model_validate(
            {"version": form.get("version", ""), "limit_tables": lists.get("limit_tables", [])}
        )
        tenders.patch_lot(session, lot_id, patch)
    except ValidationError as exc:
        message, status = "; ".join(f"{k}: {v}" for k, v in field_errors(exc).items()), 422
    except (InvalidField, Conflict) as exc:
        views.discard(session)
        message, status = exc.message, exc.status_code
    else:
        return see_other(request, f"/lots/{lot_id}#compliance")
    context = views.lot_detail(session, lot_id) | {"tables_error": message}
    return render(request, "lots/detail.html", context, status)


@router.get("/lots/{lot_id:int}/compliance", dependencies=[ANY_ROLE])
def lot_compliance(request: Request, lot_id: schemas.PathId, session: SessionDep):
    """The compliance section alone, fetched again by htmx whenever an offer changes."""
    if not is_htmx(request):
        return RedirectResponse(f"/lots/{lot_id}#compliance", status_code=303)
    return render(request, "lots/_compliance.html", intake_views.compliance_view(session, lot_id))


@router.get("/lots/{lot_id:int}/curves", dependencies=[ANY_ROLE])
def lot_curves(request: Request, lot_id: schemas.PathId, session: SessionDep):
    """The efficiency chart alone, fetched again by htmx whenever an offer changes."""
    if not is_htmx(request):
        return RedirectResponse(f"/lots/{lot_id}#curves", status_code=303)
    return render(request, "lots/_curves.html", intake_views.curves_view(session, lot_id))
