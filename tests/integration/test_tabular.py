"""Reading uploaded tables for every import: the whole table, or the same rows a chunk at a time."""

from __future__ import annotations

import io

import pytest
from openpyxl import Workbook

from server import tabular
from server.errors import ImportRefused
from server.tabular import read_table, read_table_chunks

CSV = "\ufeff Asset_ID ,Rating_kVA\nA-1,400\n\n,\nA-2, 250 \n\"A,3\",\"1\n00\"\nA-4\n".encode()
ROWS = [["A-1", "400"], ["A-2", " 250 "], ["A,3", "1\n00"], ["A-4"]]


def test_csv_rows_whole_and_in_chunks():
    # Byte-order mark, header lower-cased and stripped, quoted commas and line breaks kept,
    # wholly empty rows (a blank line, a line of commas) dropped, short rows left short.
    assert read_table("fleet.csv", CSV) == (["asset_id", "rating_kva"], ROWS)
    header, chunks = read_table_chunks("fleet.csv", CSV, 3)
    assert header == ["asset_id", "rating_kva"]
    assert list(chunks) == [ROWS[:3], ROWS[3:]]


def test_workbook_rows_whole_and_in_chunks():
    book = Workbook()
    sheet = book.active
    for row in (["Asset_ID", "Rating_kVA"], ["A-1", 400], [None, "  "], [1234, None], ["A-3", 630.5]):
        sheet.append(row)
    buffer = io.BytesIO()
    book.save(buffer)
    header, rows = read_table("fleet.xlsx", buffer.getvalue())
    assert header == ["asset_id", "rating_kva"]
    assert [[cell for cell in row if cell != ""] for row in rows] == [["A-1", 400], [1234], ["A-3", 630.5]]
    chunks = list(read_table_chunks("fleet.xlsx", buffer.getvalue(), 2)[1])
    assert [len(chunk) for chunk in chunks] == [2, 1] and chunks[0] + chunks[1] == rows


def test_too_long_a_file_is_refused_whole_and_in_chunks(monkeypatch):
    monkeypatch.setattr(tabular, "MAX_ROWS", 4)  # the header and three data rows
    content = b"asset_id\n" + b"".join(f"A-{k}\n".encode() for k in range(3))
    assert len(read_table("fleet.csv", content)[1]) == 3
    assert sum(len(chunk) for chunk in read_table_chunks("fleet.csv", content, 2)[1]) == 3
    content += b"A-4\n"
    with pytest.raises(ImportRefused, match="too long"):
        read_table("fleet.csv", content)
    with pytest.raises(ImportRefused, match="too long"):
        list(read_table_chunks("fleet.csv", content, 2)[1])


@pytest.mark.parametrize(("filename", "content", "words"), [
    ("fleet.csv", b"\n,,\n", "empty"),
    ("fleet.csv", b"asset_id\n\xff\n", "not UTF-8"),
    ("fleet.pdf", b"asset_id\n", "Upload a .csv or .xlsx"),
    ("fleet.xlsx", b"not a workbook", "cannot be read"),
])
def test_unreadable_files_are_refused_before_any_row(filename, content, words):
    for read in (lambda: read_table(filename, content), lambda: read_table_chunks(filename, content, 10)):
        with pytest.raises(ImportRefused, match=words):
            read()


def test_header_only_gives_no_rows():
    assert read_table("fleet.csv", b"asset_id,rating_kva\n") == (["asset_id", "rating_kva"], [])
    assert list(read_table_chunks("fleet.csv", b"asset_id,rating_kva\n", 10)[1]) == []
