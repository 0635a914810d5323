"""Use cases for compliance: limit tables (built-in and the users' own) and offer checks."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

from sqlalchemy import select
from sqlalchemy.orm import Session

from domain.limits import (
    BUILT_IN,
    Finding,
    LimitTable,
    OfferLossFigures,
    UnitFacts,
    Verdict,
    assess,
    check_offer,
    excluded_on_unverified,
)
from domain.plausibility import PlausibilityWarning, offer_warnings, price_warnings
from domain.rules import TOLERANCE_RULES, unverified
from server import schemas
from server.errors import InvalidField, NotFound
from server.services.common import apply_patch, check_version, commit
from server.storage import audit
from server.storage.models import LimitTableReview, Lot, Offer, UserLimitTable


def _reviews(session: Session) -> dict[str, list[LimitTableReview]]:
    """Every review of each built-in rule, by rule id, newest first."""
    by_rule: dict[str, list[LimitTableReview]] = {}
    for review in session.scalars(select(LimitTableReview).order_by(LimitTableReview.id.desc())):
        by_rule.setdefault(review.key, []).append(review)
    return by_rule


def rule_statuses(session: Session) -> dict[str, str]:
    """The reviewed status of each built-in rule that a planner has reviewed, by rule id."""
    return {rule_id: reviews[0].status for rule_id, reviews in _reviews(session).items()}


def user_table(row: UserLimitTable) -> LimitTable:
    rows = sorted(row.rows, key=lambda r: r["rating_kva"])

    def column(name: str) -> tuple[float, ...]:
        return tuple(float(r.get(name) or 0.0) for r in rows)

    return LimitTable(
        key=row.key, name=row.name, source=row.source, status=row.status, kind=row.kind,
        ratings_kva=tuple(float(r["rating_kva"]) for r in rows),
        values=column("min_pct") if row.kind != "max_losses" else (),
        max_no_load_loss_w=column("max_no_load_loss_w") if row.kind == "max_losses" else (),
        max_load_loss_w=column("max_load_loss_w") if row.kind == "max_losses" else (),
        per_unit_load=row.per_unit_load, phases=row.phases, insulation=row.insulation,
    )


def all_tables(session: Session, statuses: dict[str, str] | None = None) -> tuple[LimitTable, ...]:
    """Built-in tables (with the status a planner's review gave each) and the users' own."""
    statuses = rule_statuses(session) if statuses is None else statuses
    built_in = tuple(replace(t, status=statuses[t.table_id]) if t.table_id in statuses else t for t in BUILT_IN)
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
    reference = table.reference
    return schemas.LimitTableOut(
        key=table.key, table_id=table.table_id, name=table.name, source=table.source, status=table.status,
        kind=table.kind, built_in=row is None, id=row.id if row else None, version=row.version if row else None,
        phases=table.phases, insulation=table.insulation, per_unit_load=table.per_unit_load, note=table.note, rows=rows,
        document=reference.document if reference else None, edition=reference.edition if reference else None,
        clause=reference.clause if reference else None, page=reference.page if reference else None,
        reference_temp_c=table.reference_temp_c,
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


def _built_in_rules() -> dict[str, tuple[str, object]]:
    """Every built-in rule by id: ("limit table", LimitTable) or ("tolerance", Rule)."""
    rules: dict[str, tuple[str, object]] = {t.table_id: ("limit table", t) for t in BUILT_IN}
    rules.update({r.id: ("tolerance", r) for r in TOLERANCE_RULES})
    return rules


def _review_out(review: LimitTableReview) -> schemas.RuleReviewOut:
    return schemas.RuleReviewOut(status=review.status, document=review.document, note=review.note,
                                 reviewed_by=review.reviewed_by, reviewed_at=review.reviewed_at)


def list_rules(session: Session) -> list[schemas.RuleOut]:
    """Every built-in rule (limit tables, tolerances and constants) with its source, status and reviews."""
    reviews = _reviews(session)
    out = []
    for rule_id, (kind, rule) in _built_in_rules().items():
        reference = rule.reference
        history = [_review_out(r) for r in reviews.get(rule_id, [])]
        out.append(schemas.RuleOut(
            id=rule_id, kind=kind, family=getattr(rule, "key", None), name=rule.name,
            document=reference.document, edition=reference.edition, clause=reference.clause, page=reference.page,
            shipped_status=rule.status, status=history[0].status if history else rule.status,
            note=rule.note, reviews=history,
        ))
    return out


def get_rule(session: Session, rule_id: str) -> schemas.RuleOut:
    found = next((r for r in list_rules(session) if r.id == rule_id), None)
    if found is None:
        raise NotFound(f"There is no built-in rule '{rule_id}'.")
    return found


def review_rule(session: Session, rule_id: str, data: schemas.RuleReviewIn) -> schemas.RuleOut:
    """A planner records that a built-in rule was checked against a document (or withdraws that)."""
    rules = _built_in_rules()
    if rule_id not in rules:
        raise NotFound(f"There is no built-in rule '{rule_id}'.")
    _add_review(session, [rule_id], data)
    commit(session, "rule")
    return get_rule(session, rule_id)


def _add_review(session: Session, rule_ids: Sequence[str], data: schemas.RuleReviewIn) -> None:
    actor = audit.get_actor(session)
    for rule_id in rule_ids:
        session.add(LimitTableReview(key=rule_id, status=data.status, note=data.note, document=data.document,
                                     reviewed_by=actor.username))
        audit.record(session, "review", "rule", None,
                     f"marked built-in rule '{rule_id}' {data.status} against {data.document}: {data.note}"[:300],
                     after={"rule": rule_id, "status": data.status, "document": data.document, "note": data.note})


def review_built_in(session: Session, key: str, data: schemas.RuleReviewIn,
                    table_id: str | None = None) -> schemas.LimitTableOut:
    """Review one built-in table of family ``key`` (``table_id``), or every table of the family."""
    family = [t.table_id for t in BUILT_IN if t.key == key]
    if not family:
        raise NotFound(f"No built-in limit table '{key}'.")
    if table_id is not None and table_id not in family:
        raise InvalidField("table_id", f"is not one of the tables of '{key}'.")
    _add_review(session, [table_id] if table_id else family, data)
    commit(session, "limit table")
    chosen = table_id or family[0]
    return next(t for t in list_tables(session) if t.table_id == chosen)


def unit_facts(lot: Lot) -> UnitFacts:
    """The lot's unit as the limit checks see it."""
    return UnitFacts(lot.rating_kva, lot.phases, lot.insulation, lot.hv_kv, lot.lv_kv, lot.reference_temp_c,
                     lot.conductor_material, lot.bil_kv)


def offer_figures(offer: Offer) -> OfferLossFigures:
    share = None if offer.i2r_share_pct is None else offer.i2r_share_pct / 100.0
    return OfferLossFigures(offer.no_load_loss_w, offer.load_loss_w, offer.aux_loss_w, offer.impedance_pct, share)


def offer_findings(lot: Lot, offer: Offer, tables: tuple[LimitTable, ...],
                   statuses: dict[str, str] | None = None) -> list[Finding]:
    return check_offer(unit_facts(lot), offer_figures(offer), tuple(lot.limit_tables or ()), lot.max_no_load_loss_w,
                       lot.max_load_loss_w, lot.impedance_pct, tables, statuses)


@dataclass(frozen=True)
class OfferAssessment:
    """What the product says of one offer before ranking it: the rules checked and their
    verdict, and what looks wrong (the warnings a buyer must see, and acknowledge to award)."""

    offer_id: int
    findings: list[Finding]
    verdict: Verdict
    unverified_exclusion: bool
    warnings: list[PlausibilityWarning]

    @property
    def compliant(self) -> bool:
        return self.verdict != "not compliant"

    @property
    def reasons(self) -> list[str]:
        return [reason(f) for f in self.findings if f.passed is False]


def _verdict_warnings(findings: list[Finding], verdict: str, unverified_exclusion: bool) -> list[PlausibilityWarning]:
    out = []
    if verdict == "not assessed":
        out.append(PlausibilityWarning(
            "limit_tables", "Not assessed: none of the limit tables the lot names covers a unit of this kind, "
            "so no regulation judged this offer.", "not_assessed"))
    if unverified_exclusion:
        rules = sorted({f.rule_id for f in findings if f.passed is False})
        out.append(PlausibilityWarning(
            "limit_tables", "Left out only on rules nobody has verified against the published text "
            f"({', '.join(rules)}, from memory).", "excluded_on_unverified_rule"))
    return out


def assess_offers(session: Session, lot: Lot, offers: Sequence[Offer],
                  prices: dict[int, float] | None = None) -> dict[int, OfferAssessment]:
    """Findings, verdict and warnings for each of the lot's offers, by offer id.

    ``prices`` are the offers' prices in the tender's currency (for the lot's median-price
    check); without them the price check is skipped.
    """
    statuses = rule_statuses(session)
    tables = all_tables(session, statuses)
    priced = price_warnings([prices[o.id] for o in offers], lot.tender.currency) if prices else [[] for _ in offers]
    out = {}
    for offer, price_flags in zip(offers, priced, strict=True):
        findings = offer_findings(lot, offer, tables, statuses)
        verdict = assess(findings)
        on_unverified = excluded_on_unverified(findings)
        warnings = (offer_warnings(lot.rating_kva, offer.no_load_loss_w, offer.load_loss_w, offer.impedance_pct)
                    + price_flags + _verdict_warnings(findings, verdict, on_unverified))
        out[offer.id] = OfferAssessment(offer.id, findings, verdict, on_unverified, warnings)
    return out


def warning_out(warning: PlausibilityWarning) -> schemas.WarningOut:
    return schemas.WarningOut(code=warning.code, field=warning.field, message=warning.message)


def finding_out(finding: Finding) -> schemas.FindingOut:
    return schemas.FindingOut(rule=finding.rule, limit=finding.limit, value=finding.value, unit=finding.unit,
                              source=finding.source, passed=finding.passed, note=finding.note,
                              rule_id=finding.rule_id, status=finding.status, unverified=unverified(finding.status))


def reason(finding: Finding) -> str:
    """A failed finding in one line: the rule, the value and the limit, and how sure the rule is."""
    space = "" if finding.unit == "%" else " "
    unsure = " (rule from memory, unverified)" if unverified(finding.status) else ""
    return (f"{finding.rule}: {finding.value:g}{space}{finding.unit} against "
            f"{finding.limit:g}{space}{finding.unit}{unsure}")


def lot_compliance(session: Session, lot: Lot, offers: list[Offer] | None = None,
                   prices: dict[int, float] | None = None) -> list[schemas.OfferComplianceOut]:
    offers = offers if offers is not None else list(
        session.scalars(select(Offer).where(Offer.lot_id == lot.id).order_by(Offer.id))
    )
    assessed = assess_offers(session, lot, offers, prices)
    return [
        schemas.OfferComplianceOut(
            offer_id=offer.id, bidder=offer.bidder, compliant=assessed[offer.id].compliant,
            verdict=assessed[offer.id].verdict, findings=[finding_out(f) for f in assessed[offer.id].findings],
            warnings=[warning_out(w) for w in assessed[offer.id].warnings],
        )
        for offer in offers
    ]


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
