"""Use cases for compliance: limit tables (built-in and the users' own) and offer checks."""

from __future__ import annotations

from dataclasses import replace

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.limits import (
    BUILT_IN,
    Finding,
    LimitTable,
    OfferLossFigures,
    UnitFacts,
    check_offer,
    is_compliant,
)
from domain.plausibility import offer_warnings
from server import schemas
from server.errors import InvalidField, NotFound
from server.services.common import apply_patch, check_version, commit
from server.storage import audit
from server.storage.models import LimitTableReview, Lot, Offer, UserLimitTable


def _reviews(session: Session) -> dict[str, LimitTableReview]:
    latest: dict[str, LimitTableReview] = {}
    for review in session.scalars(select(LimitTableReview).order_by(LimitTableReview.id)):
        latest[review.key] = review
    return latest


def user_table(row: UserLimitTable) -> LimitTable:
    rows = sorted(row.rows, key=lambda r: r["rating_kva"])
    column = (lambda name: tuple(float(r.get(name) or 0.0) for r in rows))
    return LimitTable(
        key=row.key, name=row.name, source=row.source, status=row.status, kind=row.kind,
        ratings_kva=tuple(float(r["rating_kva"]) for r in rows),
        values=column("min_pct") if row.kind != "max_losses" else (),
        max_no_load_loss_w=column("max_no_load_loss_w") if row.kind == "max_losses" else (),
        max_load_loss_w=column("max_load_loss_w") if row.kind == "max_losses" else (),
        per_unit_load=row.per_unit_load, phases=row.phases, insulation=row.insulation,
    )


def all_tables(session: Session) -> tuple[LimitTable, ...]:
    """Built-in tables (with the status a user gave them on review) and the users' own."""
    reviews = _reviews(session)
    built_in = tuple(replace(t, status=reviews[t.key].status) if t.key in reviews else t for t in BUILT_IN)
    own = tuple(user_table(row) for row in session.scalars(select(UserLimitTable).order_by(UserLimitTable.key)))
    return built_in + own


def known_keys(session: Session) -> set[str]:
    return {t.key for t in all_tables(session)}


def check_keys(session: Session, keys: list[str] | None) -> None:
    if not keys:
        return
    unknown = sorted(set(keys) - known_keys(session))
    if unknown:
        raise InvalidField("limit_tables", f"no limit table with key {', '.join(unknown)}.")


def table_out(table: LimitTable, row: UserLimitTable | None = None) -> schemas.LimitTableOut:
    if table.kind == "max_losses":
        rows = [{"rating_kva": r, "max_no_load_loss_w": p0, "max_load_loss_w": pk}
                for r, p0, pk in zip(table.ratings_kva, table.max_no_load_loss_w, table.max_load_loss_w, strict=True)]
    else:
        rows = [{"rating_kva": r, "min_pct": v} for r, v in zip(table.ratings_kva, table.values, strict=True)]
    return schemas.LimitTableOut(
        key=table.key, name=table.name, source=table.source, status=table.status, kind=table.kind,
        built_in=row is None, id=row.id if row else None, version=row.version if row else None,
        phases=table.phases, insulation=table.insulation, per_unit_load=table.per_unit_load, note=table.note, rows=rows,
    )


def list_tables(session: Session) -> list[schemas.LimitTableOut]:
    own = {row.key: row for row in session.scalars(select(UserLimitTable))}
    return [table_out(t, own.get(t.key)) for t in all_tables(session)]


def _check_rows(kind: str, rows: list[schemas.LimitRow]) -> list[dict]:
    ratings = [r.rating_kva for r in rows]
    if len(set(ratings)) != len(ratings):
        raise InvalidField("rows", "each rating may appear only once.")
    for index, r in enumerate(rows):
        if kind == "max_losses" and (r.max_no_load_loss_w is None or r.max_load_loss_w is None):
            raise InvalidField(f"rows.{index}", "a maximum-loss table needs max_no_load_loss_w and max_load_loss_w.")
        if kind != "max_losses" and r.min_pct is None:
            raise InvalidField(f"rows.{index}", "an efficiency or PEI table needs min_pct.")
    return [r.model_dump(exclude_none=True) for r in sorted(rows, key=lambda r: r.rating_kva)]


def create_table(session: Session, data: schemas.LimitTableCreate) -> UserLimitTable:
    if data.key in known_keys(session):
        raise InvalidField("key", f"a limit table with key '{data.key}' already exists.")
    row = UserLimitTable(**data.model_dump(exclude={"rows"}), rows=_check_rows(data.kind, data.rows))
    session.add(row)
    commit(session, "limit table", unique_field="key")
    return row


def get_user_table(session: Session, key: str) -> UserLimitTable:
    row = session.scalar(select(UserLimitTable).where(UserLimitTable.key == key))
    if row is None:
        if any(t.key == key for t in BUILT_IN):
            raise InvalidField("key", "built-in tables cannot be edited; review them or define your own.")
        raise NotFound(f"No limit table '{key}'.")
    return row


def patch_table(session: Session, key: str, patch: schemas.LimitTablePatch) -> UserLimitTable:
    row = get_user_table(session, key)
    check_version(row, patch.version, "limit table")
    rows = _check_rows(row.kind, patch.rows) if patch.rows is not None else None
    apply_patch(row, patch, {"name", "source", "status", "per_unit_load"}, skip={"rows"})
    if rows is not None:
        row.rows = rows
    commit(session, "limit table")
    return row


def review_built_in(session: Session, key: str, data: schemas.TableReviewIn) -> schemas.LimitTableOut:
    """A user confirms (or withdraws confirmation of) a built-in table after checking it."""
    if not any(t.key == key for t in BUILT_IN):
        raise NotFound(f"No built-in limit table '{key}'.")
    actor = audit.get_actor(session)
    session.add(LimitTableReview(key=key, status=data.status, note=data.note, reviewed_by=actor.username))
    audit.record(session, "review", "limit_table", None, f"marked built-in table '{key}' {data.status}: {data.note}"[:300],
                 after={"key": key, "status": data.status})
    commit(session, "limit table")
    return next(t for t in list_tables(session) if t.key == key)


def _unit(lot: Lot) -> UnitFacts:
    return UnitFacts(lot.rating_kva, lot.phases, lot.insulation, lot.hv_kv, lot.lv_kv, lot.reference_temp_c)


def offer_findings(lot: Lot, offer: Offer, tables: tuple[LimitTable, ...]) -> list[Finding]:
    figures = OfferLossFigures(offer.no_load_loss_w, offer.load_loss_w, offer.aux_loss_w, offer.impedance_pct)
    return check_offer(_unit(lot), figures, tuple(lot.limit_tables or ()), lot.max_no_load_loss_w,
                       lot.max_load_loss_w, lot.impedance_pct, tables)


def finding_out(finding: Finding) -> schemas.FindingOut:
    return schemas.FindingOut(rule=finding.rule, limit=finding.limit, value=finding.value, unit=finding.unit,
                              source=finding.source, passed=finding.passed, note=finding.note)


def reason(finding: Finding) -> str:
    """A failed finding in one line: the rule, the value and the limit."""
    space = "" if finding.unit == "%" else " "
    return f"{finding.rule}: {finding.value:g}{space}{finding.unit} against {finding.limit:g}{space}{finding.unit}"


def lot_compliance(session: Session, lot: Lot, offers: list[Offer] | None = None) -> list[schemas.OfferComplianceOut]:
    tables = all_tables(session)
    offers = offers if offers is not None else list(
        session.scalars(select(Offer).where(Offer.lot_id == lot.id).order_by(Offer.id))
    )
    out = []
    for offer in offers:
        findings = offer_findings(lot, offer, tables)
        warnings = offer_warnings(lot.rating_kva, offer.no_load_loss_w, offer.load_loss_w, offer.impedance_pct)
        out.append(schemas.OfferComplianceOut(
            offer_id=offer.id, bidder=offer.bidder, compliant=is_compliant(findings),
            findings=[finding_out(f) for f in findings],
            warnings=[schemas.WarningOut(field=w.field, message=w.message) for w in warnings],
        ))
    return out


def import_table(session: Session, meta: dict, filename: str, content: bytes) -> UserLimitTable:
    """A user table from CSV/XLSX columns rating_kva and max_no_load_loss_w/max_load_loss_w or min_pct."""
    from pydantic import ValidationError

    from server.errors import ImportRefused
    from server.tabular import read_table

    header, rows = read_table(filename, content)
    wanted = ("rating_kva", "max_no_load_loss_w", "max_load_loss_w", "min_pct")
    unknown = [c for c in header if c not in wanted]
    if "rating_kva" not in header or unknown:
        raise ImportRefused("The header needs rating_kva and the limit columns.",
                            [{"rows": [1], "column": c, "message": "unknown column"} for c in unknown]
                            or [{"rows": [1], "column": "rating_kva", "message": "missing column"}])
    parsed = [{name: row[i] for i, name in enumerate(header) if i < len(row) and row[i] not in (None, "")}
              for row in rows]
    try:
        data = schemas.LimitTableCreate(**meta, rows=parsed)
    except ValidationError as exc:
        problems = []
        for err in exc.errors(include_url=False):
            loc = err["loc"]
            if loc and loc[0] == "rows" and len(loc) > 1:
                problems.append({"rows": [int(loc[1]) + 2], "column": str(loc[2]) if len(loc) > 2 else None,
                                 "message": err["msg"]})
            else:
                problems.append({"rows": [], "column": ".".join(map(str, loc)), "message": err["msg"]})
        raise ImportRefused("The table has problems; nothing was stored.", problems) from exc
    return create_table(session, data)
