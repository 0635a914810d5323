"""Spreadsheet-safe CSV writing of the ranking."""

from __future__ import annotations

import csv
import io
import re
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
    "rank", "offer_id", "bidder", "unit_price", "offer_currency", "offer_unit_price",
    "no_load_loss_w", "load_loss_w", "aux_loss_w",
    "capitalised_no_load", "capitalised_load", "capitalised_aux", "toc_per_unit", "toc_total",
    "efficiency_50_pct", "compliant", "compliance", "reasons", "warnings",
)
BASIS_COLUMNS = (
    "currency", "cost_basis", "cost_basis_revision",
    "no_load_rate_per_kw", "load_rate_per_kw", "aux_rate_per_kw",
)


def ranking_csv(ranking: schemas.RankingOut) -> str:
    """The ranking rows, each carrying the cost basis and rates it was made with."""
    basis = (
        ranking.currency, ranking.cost_basis_name, ranking.cost_basis_revision,
        round(ranking.no_load_rate_per_kw, 4), round(ranking.load_rate_per_kw, 4), round(ranking.aux_rate_per_kw, 4),
    )
    return write_csv(RANKING_COLUMNS + BASIS_COLUMNS, [[*cells, *basis] for cells in ranking_cells(ranking)])


def ranking_cells(ranking: schemas.RankingOut) -> list[list[object]]:
    """One list of cells per ranking row, in RANKING_COLUMNS order (shared by CSV and XLSX)."""
    money = {"unit_price", "offer_unit_price", "capitalised_no_load", "capitalised_load", "capitalised_aux",
             "toc_per_unit", "toc_total"}
    rows = []
    for row in ranking.rows:
        values = row.model_dump()
        values["rank"] = "" if row.rank is None else row.rank
        values["compliant"] = "yes" if row.compliant else "no"
        values["reasons"] = "; ".join(row.reasons)
        values["warnings"] = "; ".join(f"[{w.code}] {w.message}" for w in row.warnings)
        rows.append([
            round(values[c], 2) if c in money else round(values[c], 4) if c == "efficiency_50_pct" else values[c]
            for c in RANKING_COLUMNS
        ])
    return rows


# XML 1.0, and so a workbook, cannot hold these; text stored before they were refused (or
# arriving by another way) must still export. Each becomes its visible Unicode picture (U+2400
# onwards: NUL shows as a symbol for NUL), so the reader sees that something was there.
_NOT_IN_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f]")


def xlsx_text(value: str) -> str:
    """``value`` with every character a workbook cannot hold shown as its control picture."""
    return _NOT_IN_XML.sub(lambda found: chr(0x2400 + ord(found.group())), value)


def _text_cell(cell, value: str) -> None:
    """Store text as text: openpyxl would otherwise turn a leading '=' into a formula."""
    cell.value = xlsx_text(value)
    cell.data_type = "s"


def write_xlsx(sheets: list[tuple[str, list[str], list[list[object]]]]) -> bytes:
    """A workbook with one sheet per (title, header, rows); numbers as numbers, no formulas."""
    from openpyxl import Workbook
    from openpyxl.styles import Font

    book = Workbook()
    book.remove(book.active)
    for title, header, rows in sheets:
        sheet = book.create_sheet(title[:31])
        for column, name in enumerate(header, start=1):
            cell = sheet.cell(row=1, column=column)
            _text_cell(cell, name)
            cell.font = Font(bold=True)
        for r, row in enumerate(rows, start=2):
            for column, value in enumerate(row, start=1):
                cell = sheet.cell(row=r, column=column)
                if isinstance(value, str):
                    _text_cell(cell, value)
                else:
                    cell.value = value
        for column, name in enumerate(header, start=1):
            sheet.column_dimensions[sheet.cell(row=1, column=column).column_letter].width = max(12, min(40, len(name) + 2))
        sheet.freeze_panes = "A2"
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


LOADING_INPUTS = ("loss_factor", "peak_load_pu", "load_growth_pct")


def ranking_xlsx(ranking: schemas.RankingOut, basis_inputs: dict, method: str) -> bytes:
    """The ranking with its breakdown and compliance, and a sheet with the cost basis and rates.

    ``basis_inputs`` are the inputs that priced the lot: where the lot sets its own loading,
    its loss factor, peak and growth replace the basis's (``server.services.loading.lot_inputs``),
    and the sheet says which loading they came from.
    """
    basis_rows: list[list[object]] = [
        ["cost basis", ranking.cost_basis_name],
        ["revision", ranking.cost_basis_revision],
        ["method", method],
        ["currency", ranking.currency],
        ["no_load_rate_per_kw (A)", ranking.no_load_rate_per_kw],
        ["load_rate_per_kw (B)", ranking.load_rate_per_kw],
        ["aux_rate_per_kw (C)", ranking.aux_rate_per_kw],
        ["loading", ranking.loading.note],
        ["limit tables", ", ".join(ranking.limit_tables) or "none"],
    ]
    if ranking.loading.load_shape_name:
        basis_rows.append(["load shape", ranking.loading.load_shape_name])
    for key, value in sorted(basis_inputs.items()):
        if key == "method" or value is None:
            continue
        label = f"{key} (this lot's own)" if key in LOADING_INPUTS and ranking.loading.source == "lot" else key
        basis_rows.append([label, ", ".join(map(str, value)) if isinstance(value, list) else value])
    return write_xlsx([
        ("Ranking", list(RANKING_COLUMNS), ranking_cells(ranking)),
        ("Cost basis", ["item", "value"], basis_rows),
    ])
