"""Use case: import a tender's offers from CSV or XLSX, previewed first, committed all at once."""

from __future__ import annotations

from typing import Any

from pydantic import ValidationError
from sqlalchemy import select, update
from sqlalchemy.orm import Session
from sqlalchemy.orm.attributes import set_committed_value

from domain.plausibility import offer_warnings, price_warnings
from server import schemas
from server.errors import Conflict, ImportRefused, InvalidField
from server.exports import write_csv
from server.services.common import commit, get_or_404, get_owned_or_404
from server.services.locks import ensure_open
from server.services.tenders import get_tender
from server.storage import audit, generation
from server.storage.models import Offer, OfferImport, bidder_key, utcnow
from server.tabular import read_table

OFFER_FIELDS = (
    "bidder", "unit_price", "currency", "no_load_loss_w", "load_loss_w", "aux_loss_w",
    "impedance_pct", "no_load_current_pct", "delivery_weeks", "notes",
)
TEMPLATE_COLUMNS = ("lot", *OFFER_FIELDS)
COMPARED = ("unit_price", "currency", "no_load_loss_w", "load_loss_w", "aux_loss_w", "impedance_pct",
            "no_load_current_pct", "delivery_weeks", "notes")
_MESSAGES = {
    "missing": "fill this in",
    "greater_than_equal": "must be {ge} or more",
    "greater_than": "must be more than {gt}",
    "less_than_equal": "must be {le} or less",
    "float_parsing": "must be a number",
    "int_parsing": "must be a whole number",
    "string_pattern_mismatch": "must be a three-letter currency code",
    "finite_number": "must be a finite number",
}


def template_csv(session: Session, tender_id: int) -> str:
    """The columns to fill, one example row per lot (invented values to overwrite)."""
    tender = get_tender(session, tender_id)
    rows = [[lot.name, "", "", tender.currency, "", "", 0, "", "", "", ""] for lot in tender.lots]
    return write_csv(TEMPLATE_COLUMNS, rows)


def _plain_message(error: dict) -> str:
    template = _MESSAGES.get(error["type"])
    if template:
        return template.format(**(error.get("ctx") or {}))
    return error.get("msg", "invalid")


def _cell(value: Any) -> Any:
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    if isinstance(value, float) and value.is_integer() and abs(value) < 2**53:
        return value  # keep floats as floats; pydantic turns 12.0 into an int where needed
    return value.strip() if isinstance(value, str) else value


def _key(lot_id: int, bidder: str) -> tuple[int, str]:
    return lot_id, bidder_key(bidder)


def _preview(session: Session, tender, header: list[str], data_rows: list[list[Any]]) -> list[dict]:
    lots_by_name = {lot.name.casefold(): lot for lot in tender.lots}
    lots_by_id = {str(lot.id): lot for lot in tender.lots}
    existing = {
        _key(o.lot_id, o.bidder): o
        for o in session.scalars(select(Offer).where(Offer.lot_id.in_([lot.id for lot in tender.lots])))
    }
    unknown_columns = [c for c in header if c and c not in (*TEMPLATE_COLUMNS, "lot_id")]
    if "lot" not in header and "lot_id" not in header:
        raise ImportRefused("The header needs a 'lot' column (the lot's name) or 'lot_id'.",
                            [{"rows": [1], "column": "lot", "message": "missing column"}])
    if unknown_columns:
        raise ImportRefused("The header has columns this import does not know; nothing was read.",
                            [{"rows": [1], "column": c, "message": "unknown column"} for c in unknown_columns])
    index = {name: i for i, name in enumerate(header)}
    seen: dict[tuple[int, str], int] = {}
    preview = []
    for number, row in enumerate(data_rows, start=2):
        raw = {name: _cell(row[i]) if i < len(row) else None for name, i in index.items()}
        errors: list[dict] = []
        lot_label = str(raw.get("lot") or raw.get("lot_id") or "")
        lot = lots_by_id.get(str(raw.get("lot_id") or "").split(".")[0]) if raw.get("lot_id") else None
        lot = lot or lots_by_name.get(lot_label.casefold())
        if lot is None:
            errors.append({"column": "lot", "message": f"no lot '{lot_label}' in this tender"})
        values = {f: raw.get(f) for f in OFFER_FIELDS if raw.get(f) is not None}
        if values.get("currency") == tender.currency:
            values.pop("currency")
        if "aux_loss_w" not in values:
            values["aux_loss_w"] = 0.0
        try:
            offer = schemas.OfferCreate(**values)
        except ValidationError as exc:
            offer = None
            for err in exc.errors(include_url=False):
                errors.append({"column": str(err["loc"][0]) if err["loc"] else "", "message": _plain_message(err)})
        if offer is not None and offer.currency and offer.currency not in (tender.exchange_rates or {}):
            errors.append({"column": "currency", "message": f"the tender has no exchange rate for {offer.currency}"})
        warnings = []
        action = "refused"
        bidder = str(raw.get("bidder") or "")
        if lot is not None and offer is not None:
            key = _key(lot.id, offer.bidder)
            if key in seen:
                errors.append({"column": "bidder", "message": f"the same lot and bidder as row {seen[key]}"})
            seen.setdefault(key, number)
            warnings = [{"column": w.field, "message": w.message, "code": w.code} for w in offer_warnings(
                lot.rating_kva, offer.no_load_loss_w, offer.load_loss_w, offer.impedance_pct)]
            current = existing.get(key)
            fields = offer.model_dump()
            if current is None:
                action = "create"
            elif any(getattr(current, f) != fields[f] for f in COMPARED):
                action = "update"
            else:
                action = "unchanged"
            values = fields
        preview.append({
            "row": number, "lot": lot.name if lot else lot_label, "lot_id": lot.id if lot else None,
            "bidder": bidder, "action": "refused" if errors else action, "values": _jsonable(values),
            "errors": errors, "warnings": warnings,
        })
    _flag_prices(tender, existing, preview)
    return preview


def _flag_prices(tender, existing: dict[tuple[int, str], Offer], preview: list[dict]) -> None:
    """Each row's price against the median of its lot as the commit would leave it (the file's rows
    and the lot's offers the file does not replace), in the tender's currency."""
    rates = {tender.currency: 1.0, **(tender.exchange_rates or {})}

    def in_tender_currency(price: float, currency: str | None) -> float | None:
        rate = rates.get(currency or tender.currency)
        return None if rate is None else price * rate

    for lot in tender.lots:
        rows = [r for r in preview if r["lot_id"] == lot.id and not r["errors"]]
        replaced = {_key(lot.id, r["values"]["bidder"]) for r in rows}
        kept = [in_tender_currency(o.unit_price, o.currency) for key, o in existing.items()
                if key[0] == lot.id and key not in replaced]
        priced = [in_tender_currency(r["values"]["unit_price"], r["values"].get("currency")) for r in rows]
        flags = price_warnings([p for p in priced + kept if p is not None], tender.currency)
        usable = [r for r, p in zip(rows, priced, strict=True) if p is not None]
        for row, found in zip(usable, flags, strict=False):
            row["warnings"] += [{"column": w.field, "message": w.message, "code": w.code} for w in found]


def _jsonable(values: dict) -> dict:
    return {k: (v if isinstance(v, (int, float, str, bool)) or v is None else str(v)) for k, v in values.items()}


def stage_import(session: Session, tender_id: int, filename: str, content: bytes) -> OfferImport:
    """Read and check every row; store the preview (nothing is applied yet)."""
    tender = get_tender(session, tender_id)
    header, rows = read_table(filename, content)
    staged = OfferImport(
        tender_id=tender.id, created_by=audit.get_actor(session).username, filename=(filename or "upload")[:200],
        rows=_preview(session, tender, header, rows),
    )
    session.add(staged)
    commit(session, "offer import")
    return staged


def get_import(session: Session, import_id: int) -> OfferImport:
    """A staged import, for the user who uploaded it and administrators; 404 for anyone else."""
    return get_owned_or_404(session, OfferImport, import_id, "Offer import")


def import_out(staged: OfferImport, rows_limit: int | None = None) -> schemas.OfferImportOut:
    rows = staged.rows
    errors = sum(1 for r in rows if r["errors"])
    return schemas.OfferImportOut(
        id=staged.id, tender_id=staged.tender_id, filename=staged.filename, created_by=staged.created_by,
        created_at=staged.created_at, committed_at=staged.committed_at, rows_total=len(rows),
        rows_with_errors=errors, rows_with_warnings=sum(1 for r in rows if r["warnings"]),
        creates=sum(1 for r in rows if r["action"] == "create"),
        updates=sum(1 for r in rows if r["action"] == "update"),
        unchanged=sum(1 for r in rows if r["action"] == "unchanged"),
        can_commit=errors == 0 and staged.committed_at is None and bool(rows),
        rows=[schemas.ImportRowOut(**r) for r in (rows if rows_limit is None else rows[:rows_limit])],
    )


def _committed_already(staged: OfferImport) -> Conflict:
    """409 carrying what the commit that went first did (the import's counts)."""
    return Conflict(f"Offer import {staged.id} was committed already.",
                    current=import_out(staged, rows_limit=0).model_dump(mode="json"))


def _claim(session: Session, staged: OfferImport) -> None:
    """Mark the import committed, if no other commit has: one conditional UPDATE, in the
    transaction that then writes the offers. A second commit at the same moment waits on the
    row (PostgreSQL's row lock, SQLite's write lock) until the first ends, then matches nothing."""
    # The data version's lock first, as every writer takes it (server.storage.generation.bump):
    # a tender deleted meanwhile takes it before this import's row too, and neither waits in a circle.
    generation.bump(session)
    now = utcnow()
    claimed = session.execute(
        update(OfferImport).where(OfferImport.id == staged.id, OfferImport.committed_at.is_(None))
        .values(committed_at=now).execution_options(synchronize_session=False)
    ).rowcount
    if claimed != 1:
        session.rollback()
        raise _committed_already(get_or_404(session, OfferImport, staged.id, "Offer import"))
    set_committed_value(staged, "committed_at", now)


def commit_import(session: Session, import_id: int) -> OfferImport:
    """Apply every row of a clean preview in one transaction, or none of them; once only.

    The second of two commits answers 409 with the first one's result, and the database's
    one-offer-per-bidder-and-lot rule refuses a duplicate whatever writes at the same moment."""
    staged = get_import(session, import_id)
    if staged.committed_at is not None:
        raise _committed_already(staged)
    bad = [r["row"] for r in staged.rows if r["errors"]]
    if bad:
        raise InvalidField("rows", f"{len(bad)} rows have errors (first: row {bad[0]}); fix the file and upload it again.")
    tender = get_tender(session, staged.tender_id)
    lots = {lot.id: lot for lot in tender.lots}
    for lot_id in {r["lot_id"] for r in staged.rows}:
        if lot_id not in lots:
            raise Conflict("A lot of this import no longer exists; upload the file again.")
        ensure_open(session, lots[lot_id])
    _claim(session, staged)
    # Read once the import is claimed, so the offers any earlier commit wrote are seen.
    existing = {
        _key(o.lot_id, o.bidder): o
        for o in session.scalars(select(Offer).where(Offer.lot_id.in_(list(lots))))
    }
    for row in staged.rows:
        values = dict(row["values"])
        current = existing.get(_key(row["lot_id"], values["bidder"]))
        if current is None:
            session.add(Offer(lot=lots[row["lot_id"]], **values))
        else:
            for field in COMPARED:
                if getattr(current, field) != values.get(field):
                    setattr(current, field, values.get(field))
    audit.record(session, "import", "tender", tender.id,
                 f"imported {len(staged.rows)} offer rows from {staged.filename} (import {staged.id})")
    commit(session, "offer import")
    return staged


