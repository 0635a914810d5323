"""No 500 from user input: ids past the column range, control characters, text stored before
it was refused, lots kept for the record, unique clashes, and unhandled errors answered with
the security headers on a connection that stays open."""

from __future__ import annotations

import http.client
import io
import re
import socket
import threading
import time
from datetime import datetime

import pytest
from fastapi.testclient import TestClient
from openpyxl import load_workbook
from sqlalchemy import create_engine, text

from server import schemas
from server.app import create_app
from server.errors import Conflict
from server.services.common import commit
from server.settings import Settings
from server.storage.database import Database
from server.storage.models import CostBasis
from tests import factories as f
from tests.conftest import TEST_PASSWORD, auth

TOO_BIG = (2**31, 2**63, 2**64)


def _fields(response) -> list[str]:
    return [str(part) for error in response.json()["detail"] for part in error["loc"]]


def _bounds(field) -> tuple[int | None, int | None]:
    ge = next((m.ge for m in field.field_info.metadata if hasattr(m, "ge")), None)
    le = next((m.le for m in field.field_info.metadata if hasattr(m, "le")), None)
    return ge, le


# --- ids -------------------------------------------------------------------------------------

def test_every_id_in_a_route_is_held_to_the_column_range(sqlite_url):
    """A route table walk: a new route with an unbounded id fails here."""
    from tests.e2e.test_access import _flatten

    app = create_app(Settings(database_url=sqlite_url, env="test"))
    checked = 0
    for path, route in _flatten(app.routes):
        ids = [p for p in route.dependant.path_params if p.field_info.annotation in (int, int | None)]
        ids += [p for p in route.dependant.query_params
                if p.name.endswith("_id") and p.field_info.annotation in (int, int | None)]
        for param in ids:
            assert _bounds(param) == (1, schemas.MAX_ID), f"{path}: {param.name} is not a bounded id"
            checked += 1
    assert checked > 100


def test_ids_past_the_column_range_are_422_on_every_api_route(client):
    """Every operation of the OpenAPI document with an id in its path, each id too large for
    PostgreSQL's integer (2^31), SQLite's (2^63) and any 64-bit one (2^64)."""
    document = client.app.openapi()
    seen = 0
    for path, operations in document["paths"].items():
        names = re.findall(r"\{(\w+)\}", path)
        for method, operation in operations.items():
            kinds = {p["name"]: p["schema"].get("type") for p in operation.get("parameters", []) if p["in"] == "path"}
            for name in names:
                if kinds.get(name) != "integer":
                    continue
                for value in TOO_BIG:
                    url = path
                    for other in names:
                        url = url.replace("{" + other + "}", str(value) if other == name else "1")
                    response = client.request(method.upper(), url)
                    assert response.status_code == 422, f"{method.upper()} {url}: {response.status_code}"
                    assert name in _fields(response)
                seen += 1
    assert seen > 40


def test_ids_past_the_column_range_are_422_on_pages(page_client):
    from tests.e2e.test_pages import log_in, setup_lot

    log_in(page_client)
    for url in ("/tenders/2147483648", "/lots/9223372036854775808", "/cost-bases/18446744073709551616",
                "/lots/1/robustness?run=2147483648", "/fleet?imported=2147483648"):
        assert page_client.get(url).status_code == 422, url
    # The award review takes its offer as text (an empty choice is the default offer).
    _, _, lot_id = setup_lot(page_client)
    page_client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(), headers=auth("tester"))
    assert page_client.get(f"/lots/{lot_id}/award/review?offer_id=9223372036854775808").status_code == 200


def test_query_ids_past_the_range_are_422(client):
    r = client.get("/api/v1/audit", params={"object_id": 2**63})
    assert r.status_code == 422 and "object_id" in _fields(r)
    assert client.get("/api/v1/fleet/summary", params={"cost_basis_id": 2**31}).status_code == 422


# --- control characters ----------------------------------------------------------------------

def test_control_characters_in_text_are_refused_naming_the_field(client):
    basis_id, tender_id, lot_id = f.setup_lot(client)
    for bidder in ("Evil\x07Co", "Evil\x00Co", "Two\nlines", "Tab\tbed", "Del\x7f"):
        r = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder=bidder))
        assert r.status_code == 422 and "bidder" in _fields(r), bidder
    r = client.post("/api/v1/tenders", json=f.tender(basis_id, reference="NUL\x00"))
    assert r.status_code == 422 and "reference" in _fields(r)
    r = client.patch(f"/api/v1/lots/{lot_id}", json={"version": 1, "limit_tables": ["x\x00"]})
    assert r.status_code == 422 and "limit_tables" in _fields(r)
    r = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(notes="bell\x07"))
    assert r.status_code == 422 and "notes" in _fields(r)
    # Notes are the multi-line field: tabs and line breaks are the trade's own.
    r = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(notes="delivery:\n\t12 weeks\r\nex works"))
    assert r.status_code == 201 and r.json()["notes"] == "delivery:\n\t12 weeks\r\nex works"
    assert len(client.get(f"/api/v1/lots/{lot_id}/offers").json()) == 1


def test_control_characters_in_addresses_and_forms_are_refused(client):
    r = client.get("/api/v1/audit", params={"actor": "x\x00"})
    assert r.status_code == 422 and _fields(r) == ["query", "actor"]
    assert client.get("/api/v1/fleet/units", params={"region": "North\nSouth"}).status_code == 422
    assert client.get("/api/v1/limit-tables/a%00b").status_code == 422
    r = client.post("/api/v1/token", data={"username": "tester\x00", "password": TEST_PASSWORD})
    assert r.status_code == 422 and _fields(r) == ["body", "username"]
    r = client.post("/login", data={"username": "tester\x00", "password": TEST_PASSWORD})
    assert r.status_code == 422


def test_control_characters_in_uploaded_cells_are_removed(client):
    _, tender_id, lot_id = f.setup_lot(client)
    content = (b"lot,bidder,unit_price,no_load_loss_w,load_loss_w,impedance_pct\n"
               b"400 kVA ground-mounted,Ev\x07il\x00 Co,12000,430,4600,4\n")
    staged = client.post(f"/api/v1/tenders/{tender_id}/offer-imports",
                         files={"file": ("offers.csv", content, "text/csv")})
    assert staged.status_code == 201, staged.text
    assert staged.json()["rows"][0]["bidder"] == "Evil Co"
    assert client.post(f"/api/v1/offer-imports/{staged.json()['id']}/commit").status_code == 200
    assert [o["bidder"] for o in client.get(f"/api/v1/lots/{lot_id}/offers").json()] == ["Evil Co"]


def test_exports_show_control_characters_stored_before_they_were_refused(client, db_url):
    _, _, lot_id = f.setup_lot(client)
    offer_id = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer()).json()["id"]
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:  # as an older version (or another program) could have stored it
            conn.execute(text("UPDATE offers SET bidder = :name WHERE id = :id"), {"name": "Evil\x07Co\x1b", "id": offer_id})
    finally:
        engine.dispose()
    # An audited change moves the data version, so the ranking is made again from the rows.
    assert client.patch(f"/api/v1/lots/{lot_id}", json={"version": 1, "quantity": 2}).status_code == 200
    r = client.get(f"/api/v1/lots/{lot_id}/ranking.xlsx")
    assert r.status_code == 200
    sheet = load_workbook(io.BytesIO(r.content))["Ranking"]
    header = [cell.value for cell in sheet[1]]
    assert sheet.cell(row=2, column=header.index("bidder") + 1).value == "Evil\u2407Co\u241b"
    assert client.get(f"/api/v1/lots/{lot_id}/ranking.csv").status_code == 200


# --- records kept, unique clashes ------------------------------------------------------------

def test_a_lot_awarded_and_reopened_is_kept_for_the_record(client):
    _, tender_id, lot_id = f.setup_lot(client)
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
    other = client.post(f"/api/v1/tenders/{tender_id}/lots", json=f.lot(name="Spare")).json()["id"]
    assert client.post(f"/api/v1/lots/{lot_id}/award", json={}).status_code == 201
    assert client.delete(f"/api/v1/lots/{lot_id}").status_code == 409  # standing award
    assert client.post(f"/api/v1/lots/{lot_id}/reopen", json={"reason": "bidder withdrew"}).status_code == 200
    r = client.delete(f"/api/v1/lots/{lot_id}")
    assert r.status_code == 409 and "kept for the record" in r.json()["detail"]
    assert len(client.get(f"/api/v1/lots/{lot_id}/evaluation-records").json()) == 1
    assert client.delete(f"/api/v1/lots/{other}").status_code == 204  # a lot never awarded goes


def test_a_unique_clash_at_commit_is_409(db_url):
    db = Database(db_url)
    try:
        with db.session() as session:
            session.add(CostBasis(name="Twin", currency="EUR"))
            commit(session, "cost basis", unique_field="name")
            session.add(CostBasis(name="Twin", currency="EUR"))
            with pytest.raises(Conflict) as caught:
                commit(session, "cost basis", unique_field="name")
        assert caught.value.status_code == 409 and caught.value.message.startswith("name:")
    finally:
        db.dispose()


def test_times_carry_their_zone_on_both_engines(client):
    _, tender_id, _ = f.setup_lot(client)
    body = client.get(f"/api/v1/tenders/{tender_id}").json()
    for stamp in (body["created_at"], body["updated_at"], body["lots"][0]["created_at"] if "created_at" in body["lots"][0]
                  else body["created_at"]):
        assert datetime.fromisoformat(stamp).utcoffset() is not None, stamp
    events = client.get("/api/v1/audit").json()
    assert events and all(datetime.fromisoformat(e["at"]).utcoffset() is not None for e in events)


# --- unhandled errors ------------------------------------------------------------------------

def _failing_app(url: str):
    app = create_app(Settings(database_url=url, env="test"))

    @app.get("/api/v1/boom", include_in_schema=False)
    def boom():
        raise RuntimeError("forced for the test")

    @app.get("/boom", include_in_schema=False)
    def boom_page():
        raise RuntimeError("forced for the test")

    return app


def test_an_unhandled_error_is_a_500_with_the_security_headers(sqlite_url, caplog):
    # The client raises any exception that escapes the application: none does.
    with TestClient(_failing_app(sqlite_url)) as client:
        api = client.get("/api/v1/boom", headers={"X-Request-ID": "trace-me-1"})
        page = client.get("/boom")
    assert api.status_code == 500 and api.json() == {"detail": "Internal error; it has been logged."}
    assert page.status_code == 500 and page.headers["content-type"].startswith("text/html")
    for response in (api, page):
        assert response.headers["x-frame-options"] == "DENY"
        assert "default-src 'self'" in response.headers["content-security-policy"]
        assert response.headers["x-content-type-options"] == "nosniff"
        assert response.headers["cache-control"] == "no-store"
        assert response.headers.get("connection", "").lower() != "close"
    assert api.headers["x-request-id"] == "trace-me-1"
    assert any("trace-me-1" in record.getMessage() and record.exc_info for record in caplog.records)


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_an_unhandled_error_keeps_the_connection_open(sqlite_url):
    """Through a real server: after the 500 the same connection answers the next request."""
    import uvicorn

    port = _free_port()
    server = uvicorn.Server(uvicorn.Config(_failing_app(sqlite_url), host="127.0.0.1", port=port,
                                           log_level="critical", access_log=False))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    try:
        for _ in range(200):
            if server.started:
                break
            time.sleep(0.05)
        connection = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
        connection.request("GET", "/api/v1/boom")
        failed = connection.getresponse()
        failed.read()
        assert failed.status == 500 and failed.getheader("X-Frame-Options") == "DENY"
        assert (failed.getheader("Connection") or "").lower() != "close"
        first_socket = connection.sock
        connection.request("GET", "/healthz")
        after = connection.getresponse()
        assert after.status == 200 and after.read()
        assert connection.sock is first_socket  # not reconnected
        connection.close()
    finally:
        server.should_exit = True
        thread.join(timeout=10)
