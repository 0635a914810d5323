"""Reading uploaded tables (CSV or XLSX) into a header and rows, for every import."""

from __future__ import annotations

import csv
import gc
import io
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from server.errors import ImportRefused

MAX_ROWS = 1_100_000


@contextmanager
def gc_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while building millions of small objects that
    live on (rows and cells): its passes over them cost more than the parsing itself."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def read_table(filename: str, content: bytes) -> tuple[list[str], list[list[Any]]]:
    """Header (lower-cased, stripped) and data rows of the first sheet or the CSV file.

    CSV text is UTF-8 (a byte-order mark is allowed); XLSX cells keep their types
    (numbers, dates) as python-calamine reads them. Wholly empty rows are dropped.
    """
    name = (filename or "").lower()
    with gc_paused():
        return _read_table(name, filename, content)


def _read_table(name: str, filename: str, content: bytes) -> tuple[list[str], list[list[Any]]]:
    if name.endswith((".xlsx", ".xlsm", ".xls", ".ods")):
        rows = _read_workbook(content)
    elif name.endswith((".csv", ".txt")) or not name:
        rows = _read_csv(content)
    else:
        raise ImportRefused("Upload a .csv or .xlsx file.", [{"rows": [], "column": None, "message": f"unknown file type: {filename}"}])
    if name.endswith((".xlsx", ".xlsm", ".xls", ".ods")):
        rows = [row for row in rows if any(_present(cell) for cell in row)]
    else:
        rows = [row for row in rows if any(row)]  # CSV cells are strings: an empty row has none
    if not rows:
        raise ImportRefused("The file is empty.", [{"rows": [], "column": None, "message": "no header row"}])
    if len(rows) > MAX_ROWS:
        raise ImportRefused("The file is too long.", [{"rows": [], "column": None, "message": f"more than {MAX_ROWS:,} rows"}])
    header = [str(cell).strip().lower() if cell is not None else "" for cell in rows[0]]
    return header, rows[1:]


def _present(cell: Any) -> bool:
    return cell is not None and not (isinstance(cell, str) and not cell.strip())


def _read_csv(content: bytes) -> list[list[Any]]:
    try:
        text = content.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ImportRefused(
            "The file is not UTF-8 text.", [{"rows": [], "column": None, "message": f"byte {exc.start} cannot be read"}]
        ) from exc
    return list(csv.reader(io.StringIO(text)))


def _read_workbook(content: bytes) -> list[list[Any]]:
    from python_calamine import CalamineWorkbook

    try:
        workbook = CalamineWorkbook.from_filelike(io.BytesIO(content))
        return workbook.get_sheet_by_index(0).to_python(skip_empty_area=False)
    except Exception as exc:  # the reader raises several types for a damaged file
        raise ImportRefused(
            "The workbook cannot be read.", [{"rows": [], "column": None, "message": str(exc)[:200]}]
        ) from exc


def rows_text(rows: list[int], limit: int = 12) -> str:
    """'rows 4, 9 and 12' (spreadsheet numbering, the header being row 1)."""
    if not rows:
        return "no rows"
    shown = [str(r) for r in rows[:limit]]
    more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    if len(shown) == 1 and not more:
        return f"row {shown[0]}"
    return "rows " + (", ".join(shown[:-1]) + " and " + shown[-1] if not more else ", ".join(shown) + more)
