"""Spreadsheet-safe CSV writing of the ranking."""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Sequence

from server import schemas

# OWASP CSV-injection guidance: a text cell starting with one of these may be read as a
# formula by a spreadsheet; a leading apostrophe makes it plain text.
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r", "\n", "\uff1d", "\uff0b", "\uff0d", "\uff20")


def safe_text(value: str) -> str:
    """Neutralise a text cell that a spreadsheet could run as a formula."""
    if value.startswith(_FORMULA_STARTS):
        return "'" + value
    return value


def _cell(value: object) -> object:
    if isinstance(value, str):
        return safe_text(value)
    return value


def write_csv(header: Sequence[str], rows: Iterable[Sequence[object]]) -> str:
    """CSV text with numbers left as numbers and text cells neutralised."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([_cell(v) for v in row])
    return buffer.getvalue()


RANKING_COLUMNS = (
    "rank", "offer_id", "bidder", "unit_price", "no_load_loss_w", "load_loss_w", "aux_loss_w",
    "capitalised_no_load", "capitalised_load", "capitalised_aux", "toc_per_unit", "toc_total",
    "efficiency_50_pct",
)
BASIS_COLUMNS = (
    "currency", "cost_basis", "cost_basis_revision",
    "no_load_rate_per_kw", "load_rate_per_kw", "aux_rate_per_kw",
)


def ranking_csv(ranking: schemas.RankingOut) -> str:
    """The ranking rows, each carrying the cost basis and rates it was made with."""
    money = {"unit_price", "capitalised_no_load", "capitalised_load", "capitalised_aux", "toc_per_unit", "toc_total"}
    basis = (
        ranking.currency, ranking.cost_basis_name, ranking.cost_basis_revision,
        round(ranking.no_load_rate_per_kw, 4), round(ranking.load_rate_per_kw, 4), round(ranking.aux_rate_per_kw, 4),
    )
    rows = []
    for row in ranking.rows:
        values = row.model_dump()
        cells = [
            round(values[c], 2) if c in money else round(values[c], 4) if c == "efficiency_50_pct" else values[c]
            for c in RANKING_COLUMNS
        ]
        rows.append([*cells, *basis])
    return write_csv(RANKING_COLUMNS + BASIS_COLUMNS, rows)
