"""What the offer intake, compliance and currency parts of the pages show, gathered from the
services' read functions (``server.pages.views`` calls these for the tender and lot pages).

Nothing here writes; the functions without a session are pure and tested on their own.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy.orm import Session

from domain.limits import tables_for
from server import schemas
from server.pages.charts import efficiency_curves_chart
from server.services import compliance, locks, pages_intake, ranking, tenders
from server.services.efficiency_curves import lot_efficiency_curves

# The preview shows this many rows of an import; the counts always cover every row.
PREVIEW_ROWS = 500
# More lines than this make the efficiency chart unreadable: the lowest total owning costs are drawn.
MAX_CURVES = 12

KIND_NAMES = {
    "max_losses": "Maximum losses",
    "min_efficiency": "Minimum efficiency",
    "min_pei": "Minimum peak efficiency index",
}


@dataclass(frozen=True)
class TableChoice:
    """The limit tables under one key, as a lot chooses them (one key may hold a table for each
    kind of unit, for example liquid-immersed and dry-type)."""

    key: str
    names: tuple[str, ...]
    source: str
    status: str
    built_in: bool

    @property
    def unverified(self) -> bool:
        return self.built_in and self.status == "from memory"


def table_choices(tables: list[schemas.LimitTableOut]) -> list[TableChoice]:
    """One choice per key, in the order the tables are listed."""
    grouped: dict[str, list[schemas.LimitTableOut]] = {}
    for table in tables:
        grouped.setdefault(table.key, []).append(table)
    return [
        TableChoice(key, tuple(t.name for t in group), group[0].source, group[0].status, group[0].built_in)
        for key, group in grouped.items()
    ]


def lot_form_extras(session: Session) -> dict[str, Any]:
    """What the lot boxes need beyond the lot: the limit tables a lot may name."""
    return {"table_choices": table_choices(compliance.list_tables(session))}


# --- the ranking's non-compliant offers -----------------------------------------------------

def excluded_view(full: schemas.RankingOut, show_excluded: bool) -> dict[str, Any]:
    """From a ranking that lists every offer: the compliant ranking (what the award follows),
    the rows the table shows, the offers left out, and the one left out that would otherwise
    have the lowest total owning cost."""
    ranked = full.model_copy(update={"rows": [r for r in full.rows if r.compliant]})
    left_out = [r for r in full.rows if not r.compliant]
    lowest = min(full.rows, key=lambda r: r.toc_per_unit, default=None)
    return {
        "ranking": ranked,
        "shown_rows": full.rows if show_excluded else ranked.rows,
        "left_out": left_out,
        "show_excluded": show_excluded,
        "lead_left_out": lowest if lowest is not None and not lowest.compliant else None,
    }


# --- compliance and efficiency curves on the lot page ---------------------------------------

@dataclass(frozen=True)
class LotRule:
    """A limit table key a lot names, and the names of its tables that cover the lot's unit."""

    choice: TableChoice
    applies: tuple[str, ...]


def compliance_view(session: Session, lot_id: int) -> dict[str, Any]:
    """Every offer's findings and plausibility warnings, the rules the lot names, and the form
    that changes which limit tables it names."""
    lot = tenders.get_lot(session, lot_id)
    results = compliance.lot_compliance(session, lot)
    choices = table_choices(compliance.list_tables(session))
    by_key = {c.key: c for c in choices}
    tables = compliance.all_tables(session)
    rules = [
        LotRule(by_key[key], tuple(t.name for t in tables_for(key, compliance.unit_facts(lot), tables)))
        for key in lot.limit_tables or [] if key in by_key
    ]
    return {
        "compliance": results,
        "compliance_lot_id": lot.id,
        "compliance_rules": rules,
        "compliant_count": sum(1 for r in results if r.compliant),
        "compliance_locked": locks.active_record(session, lot.id) is not None,
        "table_choices": choices,
        "tables_form": {"version": lot.version, "limit_tables": list(lot.limit_tables or [])},
        "tables_error": None,
    }


def curves_order(full: schemas.RankingOut) -> list[int]:
    """Offer ids from the lowest total owning cost up, compliant or not."""
    return [row.offer_id for row in sorted(full.rows, key=lambda r: r.toc_per_unit)]


def curves_view(session: Session, lot_id: int, order: list[int] | None = None) -> dict[str, Any]:
    """The efficiency chart's options; with many offers, only the lowest total owning costs."""
    curves = lot_efficiency_curves(session, lot_id)
    total = len(curves.curves)
    if total > MAX_CURVES:
        if order is None:
            order = curves_order(ranking.lot_ranking(session, lot_id, include_non_compliant=True))
        keep = set(order[:MAX_CURVES])
        curves = curves.model_copy(update={"curves": [c for c in curves.curves if c.offer_id in keep]})
    return {
        "curves_lot_id": lot_id,
        "curves_chart": efficiency_curves_chart(curves) if curves.curves else None,
        "curves_shown": len(curves.curves),
        "curves_total": total,
        "reference_points": curves.reference_points,
    }


# --- currencies -----------------------------------------------------------------------------

def currency_choices(currency: str, rates: dict[str, float]) -> list[tuple[str, str]]:
    """The offer form's currency select: the tender's own (stored as no currency) and each
    currency the tender has a rate for."""
    return [("", f"{currency} (the tender's)")] + [
        (code, f"{code} at {rate:g} {currency}") for code, rate in sorted(rates.items())
    ]


def rates_text(rates: dict[str, float]) -> str:
    """Exchange rates as the currencies box shows them, one "USD = 0.92" a line."""
    return "\n".join(f"{code} = {rate:g}" for code, rate in sorted(rates.items()))


def tender_extras(session: Session, tender: schemas.TenderOut) -> dict[str, Any]:
    """The tender page's import section and currencies box."""
    return {
        "recent_imports": pages_intake.recent_imports(session, tender.id),
        "currency_form": {
            "version": tender.version,
            "bid_opening_date": tender.bid_opening_date.isoformat() if tender.bid_opening_date else "",
            "exchange_rates": rates_text(tender.exchange_rates),
        },
        "currency_errors": {},
        "import_refused": None,
    }
