"""The audit trail records every change with before and after values; awards freeze a lot."""

from __future__ import annotations

import csv
import io
import json

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.exc import DBAPIError

from tests import factories as f
from tests.conftest import auth


def _events(client, **params):
    return client.get("/api/v1/audit", params=params).json()


def test_changes_are_audited_with_before_and_after(client):
    basis_id, tender_id, lot_id = f.setup_lot(client)
    offer = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer()).json()
    client.patch(f"/api/v1/offers/{offer['id']}", json={"version": 1, "unit_price": 9999})
    client.delete(f"/api/v1/offers/{offer['id']}")
    history = _events(client, object_type="offer", object_id=offer["id"])
    assert [e["action"] for e in history] == ["delete", "update", "create"]
    update = history[1]
    assert update["actor"] == "tester"
    assert update["before"]["unit_price"] == 12000.0 and update["after"]["unit_price"] == 9999
    assert history[2]["after"]["bidder"] == "Bidder One"
    assert history[0]["before"]["unit_price"] == 9999
    kinds = {e["object_type"] for e in _events(client)}
    assert {"cost_basis", "cost_basis_revision", "tender", "lot", "offer"} <= kinds


def test_cost_basis_revision_and_user_changes_are_audited(client):
    basis = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    client.patch(f"/api/v1/cost-bases/{basis['id']}", json=f.revision(1, load_rate_per_kw=1234))
    revisions = _events(client, object_type="cost_basis_revision")
    assert len(revisions) == 2 and revisions[0]["after"]["load_rate_per_kw"] == 1234
    created = client.post("/api/v1/users", json={"username": "ivy", "password": "y" * 12, "roles": ["viewer"]})
    event = _events(client, object_type="user", object_id=created.json()["id"])[0]
    assert event["action"] == "create" and event["after"]["password_hash"] == "(hidden)"


def test_audit_filters_and_csv(client):
    f.setup_lot(client)
    assert _events(client, actor="nobody-at-all") == []
    assert all(e["object_type"] == "tender" for e in _events(client, object_type="tender"))
    assert _events(client, since="2999-01-01T00:00:00Z") == []
    r = client.get("/api/v1/audit.csv")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == len(_events(client)) and rows[0]["actor"] == "tester"


def test_the_audit_trail_cannot_be_altered(client, db_url):
    f.setup_lot(client)
    engine = create_engine(db_url)
    try:
        for statement in ("UPDATE audit_events SET actor = 'mallory'", "DELETE FROM audit_events"):
            with pytest.raises(DBAPIError), engine.begin() as conn:
                conn.execute(text(statement))
        with engine.connect() as conn:
            assert conn.execute(text("SELECT count(*) FROM audit_events WHERE actor = 'tester'")).scalar() > 0
    finally:
        engine.dispose()


def _lot_with_offers(client):
    _, tender_id, lot_id = f.setup_lot(client)
    for bidder, price, p0 in [("Lean", 12000, 300), ("Cheap", 10000, 700)]:
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder=bidder, unit_price=price, no_load_loss_w=p0))
    return tender_id, lot_id


def test_award_freezes_and_locks_the_lot(client):
    tender_id, lot_id = _lot_with_offers(client)
    assert client.post(f"/api/v1/lots/{lot_id}/award", json={}, headers=auth("buyer")).status_code == 403
    r = client.post(f"/api/v1/lots/{lot_id}/award", json={"note": "board minute 12"}, headers=auth("approver"))
    assert r.status_code == 201, r.text
    record = r.json()
    assert record["awarded_by"] == "approver" and len(record["sha256"]) == 64
    assert record["ranking"][0]["bidder"] == "Lean"
    assert record["inputs"]["cost_basis"]["no_load_rate_per_kw"] == 6000.0
    assert client.get(f"/api/v1/tenders/{tender_id}").json()["status"] == "awarded"

    offers = client.get(f"/api/v1/lots/{lot_id}/offers").json()
    refused = [
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Late")),
        client.patch(f"/api/v1/offers/{offers[0]['id']}", json={"version": 1, "unit_price": 1}),
        client.delete(f"/api/v1/offers/{offers[0]['id']}"),
        client.patch(f"/api/v1/lots/{lot_id}", json={"version": 1, "quantity": 99}),
        client.patch(f"/api/v1/tenders/{tender_id}", json={"version": 2, "exchange_rates": {"USD": 0.9}}),
        client.delete(f"/api/v1/tenders/{tender_id}"),
        client.post(f"/api/v1/lots/{lot_id}/award", json={}),
    ]
    for response in refused:
        assert response.status_code == 409, response.text
    assert "reopen" in refused[0].json()["detail"] or "awarded" in refused[0].json()["detail"]
    assert client.get(f"/api/v1/offers/{offers[0]['id']}").json()["unit_price"] == offers[0]["unit_price"]

    verification = client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()
    assert verification["verified"] and verification["hash_matches"] and verification["ranking_matches"]


def test_reopen_needs_a_reason_and_unlocks(client):
    _, lot_id = _lot_with_offers(client)
    client.post(f"/api/v1/lots/{lot_id}/award", json={})
    assert client.post(f"/api/v1/lots/{lot_id}/reopen", json={"reason": "  "}).status_code == 422
    r = client.post(f"/api/v1/lots/{lot_id}/reopen", json={"reason": "bidder withdrew"}, headers=auth("approver"))
    assert r.status_code == 200 and r.json()["reopen_reason"] == "bidder withdrew"
    assert client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Late")).status_code == 201
    actions = [e["action"] for e in _events(client, object_type="lot", object_id=lot_id)]
    assert "award" in actions and "reopen" in actions
    assert client.post(f"/api/v1/lots/{lot_id}/reopen", json={"reason": "again"}).status_code == 409


def _without_triggers(conn) -> None:
    """Let a test tamper as someone with direct database access could: triggers off for this
    transaction (PostgreSQL, as a replica would apply rows) or dropped (SQLite)."""
    if conn.dialect.name == "postgresql":
        conn.execute(text("SET LOCAL session_replication_role = replica"))
    else:
        for name in ("evaluation_records_sealed", "audit_events_no_update"):
            conn.execute(text(f"DROP TRIGGER IF EXISTS {name}"))


def test_the_database_refuses_changes_to_a_record_and_to_the_trail(client, db_url):
    _, lot_id = _lot_with_offers(client)
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    engine = create_engine(db_url)
    try:
        statements = ["UPDATE evaluation_records SET sha256 = '00'", "DELETE FROM evaluation_records",
                      "UPDATE evaluation_records SET inputs = '{}'"]
        if engine.dialect.name == "postgresql":
            statements += ["TRUNCATE audit_events", "TRUNCATE evaluation_records CASCADE"]
        else:
            statements += ["INSERT OR REPLACE INTO audit_events (id, at, actor, action, object_type, summary) "
                           "SELECT id, at, 'mallory', action, object_type, 'rewritten' FROM audit_events "
                           "WHERE action = 'award'",
                           "INSERT OR REPLACE INTO evaluation_records SELECT * FROM evaluation_records"]
        for statement in statements:
            with pytest.raises(DBAPIError), engine.begin() as conn:
                conn.execute(text(statement))
        with engine.begin() as conn:  # reopening a standing award, once, is the one change allowed
            conn.execute(text("UPDATE evaluation_records SET reopened_at = CURRENT_TIMESTAMP, reopened_by = 'x', "
                              "reopen_reason = 'y'"))
        with pytest.raises(DBAPIError), engine.begin() as conn:
            conn.execute(text("UPDATE evaluation_records SET reopen_reason = 'changed later'"))
    finally:
        engine.dispose()
    assert client.get(f"/api/v1/evaluation-records/{record['id']}").json()["sha256"] == record["sha256"]


def test_tampered_record_fails_verification(client, db_url):
    _, lot_id = _lot_with_offers(client)
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:
            _without_triggers(conn)
            conn.execute(text("UPDATE evaluation_records SET sha256 = :h"), {"h": "0" * 64})
    finally:
        engine.dispose()
    verification = client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()
    assert not verification["verified"] and not verification["hash_matches"]


def test_a_record_altered_with_its_own_hash_still_differs_from_the_audit_trail(client, db_url):
    from server.services.awards import canonical_hash, sealed_material

    _, lot_id = _lot_with_offers(client)
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    inputs = record["inputs"]
    inputs["offers"][0]["unit_price"] = 1.0
    forged = canonical_hash(sealed_material(inputs, record["decision"]))
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:
            _without_triggers(conn)
            conn.execute(text("UPDATE evaluation_records SET inputs = :i, sha256 = :h"),
                         {"i": json.dumps(inputs), "h": forged})
    finally:
        engine.dispose()
    verification = client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()
    assert verification["hash_matches"] and not verification["audit_hash_matches"] and not verification["verified"]
    assert any("audit trail at award time" in d for d in verification["differences"])


@pytest.mark.parametrize("tamper", ["price", "rate", "compliance"])
def test_live_data_tampered_in_sql_fails_verification_and_says_what(client, db_url, tamper):
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    body = f.tender(basis_id, lots=[f.lot(max_no_load_loss_w=800)])
    lot_id = client.post("/api/v1/tenders", json=body).json()["lots"][0]["id"]
    for bidder, price, p0 in [("Lean", 12000, 300), ("Cheap", 10000, 700)]:
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder=bidder, unit_price=price, no_load_loss_w=p0))
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    assert client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()["verified"]
    statement = {
        "price": "UPDATE offers SET unit_price = unit_price * 10 WHERE bidder = 'Lean'",
        "rate": "UPDATE cost_basis_revisions SET no_load_rate_per_kw = 1000",
        "compliance": "UPDATE lots SET max_no_load_loss_w = 500",
    }[tamper]
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:
            conn.execute(text(statement))
    finally:
        engine.dispose()
    verification = client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()
    assert not verification["verified"] and not verification["live_matches"]
    assert verification["hash_matches"] and verification["audit_hash_matches"]  # the record itself is intact
    said = " ".join(verification["differences"])
    expected = {"price": "offer", "rate": "no_load_rate_per_kw",
                "compliance": "(Cheap): compliance compliant in the record, not compliant now"}[tamper]
    assert expected in said, said
    if tamper == "price":
        assert "(Lean): unit_price 12000" in said and "120000" in said


def test_a_record_signed_with_a_server_key_verifies_and_detects_a_forgery(db_url, monkeypatch):
    from server.settings import get_settings
    from tests.conftest import make_client

    monkeypatch.setenv("LOSSLEDGER_SEAL_KEYS", "2026a=" + "k" * 40 + ",2025b=" + "o" * 40)
    get_settings.cache_clear()
    try:
        with make_client(db_url) as client:
            client.headers.update(auth("tester"))
            _, lot_id = _lot_with_offers(client)
            record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
            engine = create_engine(db_url)
            try:
                with engine.connect() as conn:
                    key_id, signature = conn.execute(text("SELECT seal_key_id, seal_hmac FROM evaluation_records")).one()
            finally:
                engine.dispose()
            assert key_id == "2026a" and len(signature) == 64
            assert client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()["signature_matches"]
    finally:
        get_settings.cache_clear()


def test_award_of_empty_lot_is_refused(client):
    _, _, lot_id = f.setup_lot(client)
    r = client.post(f"/api/v1/lots/{lot_id}/award", json={})
    assert r.status_code == 422


def test_award_follows_the_live_ranking_rules(client):
    """A non-compliant offer with the lowest TOC is not awarded; converted prices are frozen."""
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    body = f.tender(basis_id, lots=[f.lot(max_no_load_loss_w=400)], exchange_rates={"USD": 0.5})
    lot_id = client.post("/api/v1/tenders", json=body).json()["lots"][0]["id"]
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Over the cap", unit_price=1000, no_load_loss_w=450))
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Dollars", unit_price=22000, currency="USD",
                                                                no_load_loss_w=390))
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Euros", unit_price=12000, no_load_loss_w=390))
    live = client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"]
    assert live[0]["bidder"] == "Dollars"  # 22,000 USD at 0.5 = 11,000 EUR
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    assert record["ranking"][0]["bidder"] == "Dollars"
    assert [r["bidder"] for r in record["ranking"]] == [r["bidder"] for r in live]
    frozen = {o["bidder"]: o for o in record["inputs"]["offers"]}
    assert not frozen["Over the cap"]["compliant"] and frozen["Dollars"]["price_in_tender_currency"] == 11000
    assert client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()["verified"]
