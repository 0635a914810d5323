"""The fleet import service: the file is read in chunks, and nothing it finds or writes may
depend on where the chunks end."""

from __future__ import annotations

import csv
import io

import numpy as np
import pytest
from sqlalchemy import select

from server.errors import Conflict
from server.services import fleet
from server.storage.audit import Actor, set_actor
from server.storage.database import Database
from server.storage.models import AuditEvent
from tests.e2e.test_fleet import FLEET, HEADER


@pytest.fixture
def db(db_url):
    database = Database(db_url)
    yield database
    database.dispose()


def _csv(rows) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(HEADER)
    writer.writerows(rows)
    return out.getvalue().encode()


def _messy() -> list[list]:
    """Every kind of cell the checks look at, spread over 11 rows."""
    rows = [list(r) for r in FLEET] + [list(r) for r in FLEET]
    for k, r in enumerate(rows[4:], start=5):
        r[0] = f"A-{k}"
    rows[1][3] = "big"  # text
    rows[2][10] = "inf"  # not finite
    rows[3][0] = "A-1"  # twice
    rows[4][5] = "oil"  # no such insulation
    rows[5][0] = ""  # missing id
    rows[6][4] = 2  # phases
    rows[7][12], rows[7][11] = "No such shape", ""
    rows.append(["A-9", " Quay Road ", "South", 400, "", "", 2001, "", "  ", "", 0.9, 0.3])  # short row
    rows.append(["x" * 65, "", "", 100, 3, "liquid", 1899, -1, 5000, "", 6, 1.5, ""])
    rows.append(["A-11", "", "", 100, 3, "DRY", 2001, 200, 2000, 80, "", 0.3, ""])
    return rows


@pytest.mark.parametrize("rows_per_chunk", [1, 2, 3, 5])
def test_problems_and_values_do_not_depend_on_the_chunks(db, monkeypatch, rows_per_chunk):
    messy, clean = _csv(_messy()), _csv([r for k, r in enumerate(_messy()) if k in (0, 8, 10)] + [FLEET[3]])
    with db.session() as session:
        whole = [fleet.parse_inventory(session, "fleet.csv", content) for content in (messy, clean)]
        monkeypatch.setattr(fleet, "_ROWS_PER_CHUNK", rows_per_chunk)
        chunked = [fleet.parse_inventory(session, "fleet.csv", content) for content in (messy, clean)]
    assert len(whole[0].problems) == 15  # each check above finds its row
    assert chunked[0].problems == whole[0].problems and chunked[0].rows == whole[0].rows == 11
    assert not whole[1].problems and (whole[1].estimated_no_load, whole[1].estimated_load) == (2, 2)
    assert chunked[1].columns.keys() == whole[1].columns.keys()
    for name, values in whole[1].columns.items():
        np.testing.assert_array_equal(chunked[1].columns[name], values, err_msg=name)
    assert whole[1].columns["site"][1] == "Quay Road"
    assert list(whole[1].columns["insulation"]) == ["liquid", "liquid", "dry", "liquid"]


def test_commit_now_stores_the_file_committed_with_its_units_and_audit_event(db):
    with db.session() as session:
        set_actor(session, Actor("tester"))
        import_id = fleet.stage_import(session, "fleet.csv", _csv(FLEET), commit_now=True).id
    with db.session() as session:
        stored = fleet.get_import(session, import_id)
        assert stored.committed_at is not None and stored.summary["creates"] == 4
        assert fleet.list_units(session)[0] == 4
        event = session.scalars(select(AuditEvent).where(AuditEvent.object_type == "fleet")).one()
        assert (event.action, event.object_id, event.actor) == ("import", import_id, "tester")
        assert event.summary == "imported 4 new and 0 updated fleet units from fleet.csv"
        with pytest.raises(Conflict, match="committed already"):
            fleet.commit_import(session, import_id)
