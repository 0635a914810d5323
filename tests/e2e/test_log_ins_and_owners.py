"""Log-in abuse and who may see what, through HTTP in one process (the races themselves, with
several workers, are in test_races.py).

- A name of any length answers 401; what is stored of it is 64 characters and a hash.
- Failures count per account (by the whole name's hash) and per address; a success frees
  its place; a window's end starts the count again.
- Only administrators read the name and address of a failed log-in.
- A staged import is the business of its uploader and the administrators: 404 for others.
- One offer per bidder and lot, whatever the case and spacing of the name.
"""

from __future__ import annotations

import csv
import hashlib
import io
from datetime import timedelta

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, select, update

from server.app import create_app
from server.settings import Settings
from server.storage.models import LoginAttempt, LoginCounter, utcnow
from tests import factories as f
from tests.conftest import TEST_PASSWORD, add_user_with_token, auth
from tests.e2e.test_fleet import FLEET, HEADER
from tests.e2e.test_pages import log_in

LOCKED = "Too many failed log-ins"


def _token(client, name: str, password: str = "wrong password!"):
    return client.post("/api/v1/token", data={"username": name, "password": password})


def _attempts(db_url: str) -> list[tuple[str, str]]:
    engine = create_engine(db_url)
    try:
        with engine.connect() as conn:
            return list(conn.execute(select(LoginAttempt.username, LoginAttempt.username_hash)).all())
    finally:
        engine.dispose()


# --- names of any length -------------------------------------------------------------------------

@pytest.mark.parametrize("length", [65, 1_000_000])
def test_a_long_name_is_refused_and_stored_cut_with_its_hash(anon_client, db_url, length):
    typed = "n" * (length - 1) + "!"
    assert _token(anon_client, typed).status_code == 401
    page = anon_client.post("/login", data={"username": typed, "password": "wrong password!"})
    assert page.status_code == 401 and typed not in page.text and "n" * 64 in page.text
    stored = _attempts(db_url)
    assert [(len(name), digest) for name, digest in stored] == [
        (64, hashlib.sha256(typed.encode()).hexdigest())] * 2


def test_names_alike_in_their_first_64_characters_are_counted_apart(anon_client):
    first, second = "p" * 64 + "first", "p" * 64 + "second"
    for _ in range(10):
        assert _token(anon_client, first).json()["detail"] == "Wrong user name or password."
    assert _token(anon_client, first).json()["detail"].startswith(LOCKED)
    assert _token(anon_client, second).json()["detail"] == "Wrong user name or password."


# --- counting ------------------------------------------------------------------------------------

def test_a_success_frees_its_place_and_the_limit_still_holds(anon_client):
    for _ in range(9):
        assert _token(anon_client, "planner").status_code == 401
    assert _token(anon_client, "planner", TEST_PASSWORD).status_code == 200  # counts no failure
    assert _token(anon_client, "planner").json()["detail"] == "Wrong user name or password."  # the tenth
    assert _token(anon_client, "planner", TEST_PASSWORD).json()["detail"].startswith(LOCKED)


def test_the_count_starts_again_when_the_window_has_passed(anon_client, db_url):
    for _ in range(10):
        _token(anon_client, "approver")
    assert _token(anon_client, "approver", TEST_PASSWORD).json()["detail"].startswith(LOCKED)
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:  # as if the 15 minutes had gone by
            conn.execute(update(LoginCounter).values(window_started_at=utcnow() - timedelta(minutes=16)))
    finally:
        engine.dispose()
    assert _token(anon_client, "approver", TEST_PASSWORD).status_code == 200


def test_an_address_is_locked_after_its_own_limit(db_url):
    settings = Settings(database_url=db_url, env="test", address_lockout_failures=3)
    with TestClient(create_app(settings)) as client:
        for name in ("someone", "someone else", "a third"):
            assert _token(client, name).json()["detail"] == "Wrong user name or password."
        # A different account from the same address, with its right password: refused unchecked.
        assert _token(client, "buyer", TEST_PASSWORD).json()["detail"].startswith(LOCKED)
        events = client.get("/api/v1/audit", headers=auth("tester")).json()
        assert any(e["action"] == "lockout" and "testclient locked out" in e["summary"] for e in events)


# --- who reads failed log-ins --------------------------------------------------------------------

TYPED = "my-secret-password-typed-as-a-name"


def test_only_administrators_read_who_failed_and_from_where(client):
    client.post("/api/v1/token", data={"username": TYPED, "password": "wrong password!"}, headers={})
    admin = [e for e in client.get("/api/v1/audit").json() if e["action"] == "login_failed"]
    assert [(e["actor"], e["address"]) for e in admin] == [(TYPED, "testclient")]
    viewer = auth("viewer")
    shown = [e for e in client.get("/api/v1/audit", headers=viewer).json() if e["action"] == "login_failed"]
    assert [(e["actor"], e["address"], e["summary"]) for e in shown] == [("(hidden)", None, "a log-in failed")]
    # Filtering by the typed name tells a non-administrator nothing either.
    assert client.get("/api/v1/audit", params={"actor": TYPED}, headers=viewer).json() == []
    assert TYPED not in client.get("/api/v1/audit.csv", headers=viewer).text
    assert TYPED in client.get("/api/v1/audit.csv").text


def test_the_audit_page_hides_a_failed_log_in_from_a_viewer(page_client):
    page_client.post("/login", data={"username": TYPED, "password": "wrong password!"})
    log_in(page_client, "viewer")
    page = page_client.get("/audit").text
    assert "a log-in failed" in page and TYPED not in page
    log_in(page_client, "tester")
    assert TYPED in page_client.get("/audit").text


# --- staged imports belong to their uploader -----------------------------------------------------

def _staged_offer_import(client) -> int:
    """An offer import staged by "buyer" (the set-up made by "tester", an administrator)."""
    admin = auth("tester")
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis(), headers=admin).json()["id"]
    tender_id = client.post("/api/v1/tenders", json=f.tender(basis_id), headers=admin).json()["id"]
    content = "lot,bidder,unit_price,no_load_loss_w,load_loss_w,impedance_pct\n400 kVA ground-mounted,A,100,400,4000,4\n"
    staged = client.post(f"/api/v1/tenders/{tender_id}/offer-imports", files={"file": ("o.csv", content)},
                         headers=auth("buyer"))
    assert staged.status_code == 201, staged.text
    return staged.json()["id"]


def test_an_offer_import_is_read_and_committed_by_its_uploader_and_administrators_only(client, db_url):
    import_id = _staged_offer_import(client)
    other_buyer = add_user_with_token(db_url, "other-buyer", ["buyer"])
    for headers in (other_buyer, auth("viewer"), auth("planner")):
        assert client.get(f"/api/v1/offer-imports/{import_id}", headers=headers).status_code == 404
    refused = client.post(f"/api/v1/offer-imports/{import_id}/commit", headers=other_buyer)
    assert refused.status_code == 404 and refused.json()["detail"] == f"Offer import {import_id} does not exist."
    assert client.get(f"/api/v1/offer-imports/{import_id}", headers=auth("buyer")).status_code == 200
    assert client.get(f"/api/v1/offer-imports/{import_id}").status_code == 200  # tester is an administrator
    assert client.post(f"/api/v1/offer-imports/{import_id}/commit", headers=auth("buyer")).status_code == 200


def test_the_offer_import_page_is_not_found_for_another_user(page_client):
    import_id = _staged_offer_import(page_client)
    log_in(page_client, "viewer")
    assert page_client.get(f"/offer-imports/{import_id}").status_code == 404


def _fleet_csv() -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(HEADER)
    writer.writerows(FLEET)
    return out.getvalue().encode()


def test_a_fleet_import_is_read_and_committed_by_its_uploader_and_administrators_only(client, db_url):
    staged = client.post("/api/v1/fleet/import", data={"commit": "false"}, headers=auth("planner"),
                         files={"file": ("fleet.csv", _fleet_csv(), "text/csv")})
    import_id = staged.json()["id"]
    other_planner = add_user_with_token(db_url, "other-planner", ["planner"])
    for headers in (other_planner, auth("viewer")):
        assert client.get(f"/api/v1/fleet/imports/{import_id}", headers=headers).status_code == 404
    assert client.post(f"/api/v1/fleet/imports/{import_id}/commit", headers=other_planner).status_code == 404
    assert client.get(f"/api/v1/fleet/imports/{import_id}").status_code == 200
    committed = client.post(f"/api/v1/fleet/imports/{import_id}/commit", headers=auth("planner"))
    assert committed.status_code == 200 and committed.json()["committed_at"]
    again = client.post(f"/api/v1/fleet/imports/{import_id}/commit", headers=auth("planner"))
    assert again.status_code == 409 and again.json()["current"]["committed_at"] == committed.json()["committed_at"]


# --- one offer per bidder and lot ----------------------------------------------------------------

def test_a_second_offer_of_one_bidder_in_a_lot_is_refused(client):
    _, _, lot_id = f.setup_lot(client)
    first = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Bidder One")).json()
    again = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="  BIDDER   one "))
    assert again.status_code == 409
    other = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Bidder Two")).json()
    renamed = client.patch(f"/api/v1/offers/{other['id']}", json={"version": other["version"], "bidder": "bidder one"})
    assert renamed.status_code == 409
    assert [o["bidder"] for o in client.get(f"/api/v1/lots/{lot_id}/offers").json()] == [first["bidder"], "Bidder Two"]
