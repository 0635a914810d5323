"""Reading uploaded tables (CSV or XLSX) into a header and rows, for every import."""

from __future__ import annotations

import csv
import gc
import io
import math
from collections.abc import Iterator
from contextlib import contextmanager
from itertools import chain, islice
from typing import Any

from server.errors import ImportRefused
from server.schemas import CONTROL_CHARACTERS

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
    with gc_paused():
        header, chunks = read_table_chunks(filename, content, MAX_ROWS)
        return header, list(chain.from_iterable(chunks))


def read_table_chunks(filename: str, content: bytes, rows_per_chunk: int) -> tuple[list[str], Iterator[list[list[Any]]]]:
    """As ``read_table``, with the data rows handed out ``rows_per_chunk`` at a time as they are read.

    Work done on a chunk finds its cells still in the processor's cache, and the memory of a
    chunk's cells is used again for the next; walking whole columns of a large file, whose cells
    lie a row apart, is several times slower. A file that is too long is refused when its last
    allowed chunk has been handed out.
    """
    name = (filename or "").lower()
    if name.endswith((".xlsx", ".xlsm", ".xls", ".ods")):
        rows: Iterator[list[Any]] = (row for row in _read_workbook(content) if any(_present(cell) for cell in row))
    elif name.endswith((".csv", ".txt")) or not name:
        rows = filter(any, _read_csv(content))  # CSV cells are strings: an empty row has none
    else:
        raise ImportRefused("Upload a .csv or .xlsx file.", [{"rows": [], "column": None, "message": f"unknown file type: {filename}"}])
    first = next(rows, None)
    if first is None:
        raise ImportRefused("The file is empty.", [{"rows": [], "column": None, "message": "no header row"}])
    header = [str(cell).strip().lower() if cell is not None else "" for cell in first]
    return header, _chunks(rows, rows_per_chunk)


def _chunks(rows: Iterator[list[Any]], rows_per_chunk: int) -> Iterator[list[list[Any]]]:
    count = 1  # the header
    while chunk := list(islice(rows, rows_per_chunk)):
        count += len(chunk)
        if count > MAX_ROWS:
            raise ImportRefused("The file is too long.", [{"rows": [], "column": None, "message": f"more than {MAX_ROWS:,} rows"}])
        yield chunk


def cell_text(value: Any) -> str:
    """A cell as the text the user typed, for identifiers such as serial numbers.

    CSV cells are text already and only lose the whitespace around them. A spreadsheet keeps a
    number typed into a cell as a float, so 12345 arrives as 12345.0: an integer-valued float
    becomes its integer text ("12345"); any other value is its plain text ("10.05"). An empty
    cell (None) is "". Leading zeros a spreadsheet dropped from a number cannot be recovered:
    they survive only in a cell formatted as text.
    """
    if value is None:
        return ""
    if isinstance(value, float) and math.isfinite(value) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _present(cell: Any) -> bool:
    return cell is not None and not (isinstance(cell, str) and not cell.strip())


def strip_control(text: str) -> str:
    """``text`` without control characters (tab and line breaks kept).

    Uploaded cells are cleaned, where typed input is refused (``server.schemas``): a spreadsheet
    carries characters nobody can see in it (pasted from a PDF or another system's export), the
    preview shows each cell as it will be stored before anything is committed, and a refusal
    would send someone hunting through a 100,000-row file for an invisible character. Tab and
    line breaks are ordinary whitespace that every store and export takes.
    """
    return CONTROL_CHARACTERS.sub("", text) if CONTROL_CHARACTERS.search(text) else text


def _read_csv(content: bytes) -> Iterator[list[str]]:
    try:
        text = content.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ImportRefused(
            "The file is not UTF-8 text.", [{"rows": [], "column": None, "message": f"byte {exc.start} cannot be read"}]
        ) from exc
    # One pass over the whole text: the characters removed never separate cells or rows.
    return csv.reader(io.StringIO(strip_control(text)))


def _read_workbook(content: bytes) -> list[list[Any]]:
    from python_calamine import CalamineWorkbook

    try:
        workbook = CalamineWorkbook.from_filelike(io.BytesIO(content))
        rows = workbook.get_sheet_by_index(0).to_python(skip_empty_area=False)
    except Exception as exc:  # the reader raises several types for a damaged file
        raise ImportRefused(
            "The workbook cannot be read.", [{"rows": [], "column": None, "message": str(exc)[:200]}]
        ) from exc
    for row in rows:
        for index, cell in enumerate(row):
            if type(cell) is str and CONTROL_CHARACTERS.search(cell):
                row[index] = CONTROL_CHARACTERS.sub("", cell)
    return rows


def rows_text(rows: list[int], limit: int = 12) -> str:
    """'rows 4, 9 and 12' (spreadsheet numbering, the header being row 1)."""
    if not rows:
        return "no rows"
    shown = [str(r) for r in rows[:limit]]
    more = f" and {len(rows) - limit} more" if len(rows) > limit else ""
    if len(shown) == 1 and not more:
        return f"row {shown[0]}"
    return "rows " + (", ".join(shown[:-1]) + " and " + shown[-1] if not more else ", ".join(shown) + more)
