"""The pages for people and records: log-in hardening, forged posts, the audit trail and each
object's history, awarding and reopening a lot, the award report, user administration, and
the page for an unknown address."""

from __future__ import annotations

import csv
import html
import io
import re
from datetime import datetime, timedelta

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text

from server.app import create_app
from server.pages.history import as_utc, diff_rows
from server.pages.report import compliance_flags
from server.security import SESSION_COOKIE
from server.settings import Settings
from tests import factories
from tests.conftest import TEST_PASSWORD
from tests.e2e.test_pages import API, HX, api_offer, api_offers, error_beside, log_in, offer_form, setup_lot

EVIL = "https://evil.example"


def _text(page: str) -> str:
    """The page as words: tags dropped, entities decoded, spaces collapsed."""
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", "", page)))


def _set_cookie(response) -> str:
    found = [v for k, v in response.headers.multi_items() if k == "set-cookie" and v.startswith(SESSION_COOKIE)]
    assert len(found) == 1, response.headers
    return found[0]


def _login_form(name: str = "tester") -> dict[str, str]:
    return {"username": name, "password": TEST_PASSWORD, "next": "/tenders"}


def _two_offers(client, lot_id: int) -> tuple[dict, dict]:
    # Direct basis A 6000, B 1500: "Low Loss" owns for less although "Low Price" costs less to buy.
    cheap = api_offer(client, lot_id, bidder="Low Price", unit_price=10000, no_load_loss_w=700, load_loss_w=6000)
    lean = api_offer(client, lot_id, bidder="Low Loss", unit_price=12000, no_load_loss_w=430, load_loss_w=4600)
    return cheap, lean


def _award(client, lot_id: int, note: str = "", acknowledge: bool = False) -> dict:
    """Award through the page as the approver; return the standing record from the API."""
    csrf = log_in(client, "approver")
    data = {"csrf_token": csrf, "note": note} | ({"acknowledge_warnings": "true"} if acknowledge else {})
    response = client.post(f"/lots/{lot_id}/award", data=data, follow_redirects=False)
    assert response.status_code == 303, response.text
    assert response.headers["location"] == f"/lots/{lot_id}"
    records = client.get(f"/api/v1/lots/{lot_id}/evaluation-records", headers=API).json()
    return records[-1]


# --- log-in -----------------------------------------------------------------------------------

def test_the_session_cookie_is_http_only_lax_and_expires(page_client):
    response = page_client.post("/login", data=_login_form(), follow_redirects=False)
    assert response.status_code == 303
    cookie = _set_cookie(response).lower()
    assert "httponly" in cookie
    assert "samesite=lax" in cookie
    assert "max-age=43200" in cookie  # session_max_hours 12
    assert "secure" not in cookie  # plain http in the test client


def test_the_session_cookie_is_secure_over_https(sqlite_url):
    with TestClient(create_app(Settings(database_url=sqlite_url, env="test")), base_url="https://testserver") as client:
        response = client.post("/login", data=_login_form(), follow_redirects=False)
        assert response.status_code == 303
        assert "secure" in _set_cookie(response).lower()


def test_each_log_in_opens_a_new_session_and_ends_the_old_one(page_client):
    page_client.post("/login", data=_login_form(), follow_redirects=False)
    first = page_client.cookies[SESSION_COOKIE]
    page_client.post("/login", data=_login_form(), follow_redirects=False)
    second = page_client.cookies[SESSION_COOKIE]
    assert first != second
    assert page_client.get("/tenders", follow_redirects=False).status_code == 200
    page_client.cookies.set(SESSION_COOKIE, first)
    assert page_client.get("/tenders", follow_redirects=False).status_code == 303  # revoked
    actions = [e["action"] for e in page_client.get("/api/v1/audit", params={"actor": "tester"}, headers=API).json()]
    assert actions[:3] == ["logout", "login", "login"]


@pytest.mark.parametrize("header", ["origin", "referer"])
def test_a_cross_site_log_in_is_refused(page_client, header):
    source = EVIL if header == "origin" else EVIL + "/trap.html"
    response = page_client.post("/login", data=_login_form(), headers={header: source}, follow_redirects=False)
    assert response.status_code == 403
    assert "came from another site" in response.text and "<html" in response.text
    assert SESSION_COOKIE not in response.headers.get("set-cookie", "")
    assert page_client.get("/api/v1/audit", params={"actor": "tester"}, headers=API).json() == []


def test_a_same_site_log_in_with_origin_is_accepted(page_client):
    response = page_client.post("/login", data=_login_form(), headers={"origin": "http://testserver"},
                                follow_redirects=False)
    assert response.status_code == 303


def test_the_lock_out_message_is_shown_as_the_service_words_it(page_client):
    for _ in range(10):
        page_client.post("/login", data=_login_form("planner") | {"password": "wrong password"})
    response = page_client.post("/login", data=_login_form("planner"))
    assert response.status_code == 401
    assert "Too many failed log-ins: try again in 15 minutes, or ask an administrator." in html.unescape(response.text)


# --- forged posts -----------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("token", "headers"),
    [
        (None, {}),  # no token at all
        ("forged-token", {}),  # a token the attacker made up
        ("valid", {"origin": EVIL}),  # the real token, but posted from another site
        ("valid", {"referer": EVIL + "/page"}),
    ],
    ids=["no-token", "wrong-token", "foreign-origin", "foreign-referer"],
)
def test_a_forged_offer_edit_is_refused_and_changes_nothing(page_client, token, headers):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    form = offer_form(csrf, unit_price=1) | {"version": "1"}
    if token is None:
        del form["csrf_token"]
    elif token != "valid":
        form["csrf_token"] = token
    response = page_client.post(f"/offers/{offer['id']}", data=form, headers=headers)
    assert response.status_code == 403
    assert api_offers(page_client, lot_id)[0]["unit_price"] == offer["unit_price"]
    assert api_offers(page_client, lot_id)[0]["version"] == 1


def test_an_htmx_edit_with_the_token_in_its_header_is_saved(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    form = offer_form("", unit_price=11800) | {"version": "1"}
    del form["csrf_token"]
    response = page_client.post(f"/offers/{offer['id']}", data=form,
                                headers=HX | {"X-CSRF-Token": csrf, "origin": "http://testserver"})
    assert response.status_code == 200, response.text
    assert api_offers(page_client, lot_id)[0]["unit_price"] == 11800


# --- audit trail and history -------------------------------------------------------------------

def _edited_offer(client) -> tuple[int, int, dict]:
    """An offer created by the API as tester, then edited on the page by the buyer."""
    _, tender_id, lot_id = setup_lot(client)
    offer = api_offer(client, lot_id)
    csrf = log_in(client, "buyer")
    saved = client.post(f"/offers/{offer['id']}", data=offer_form(csrf, unit_price=11500) | {"version": "1"},
                        headers=HX)
    assert saved.status_code == 200
    return tender_id, lot_id, offer


def test_the_audit_page_shows_an_edit_with_before_and_after(page_client):
    _, _, offer = _edited_offer(page_client)
    page = page_client.get("/audit")
    assert page.status_code == 200
    first = re.search(r'<tr id="event-\d+">(.*?)</tr>\s*(?=<tr id="event-|</tbody>)', page.text, re.S).group(1)
    words = _text(first)
    assert "buyer" in words and "testclient" in words and "changed" in words  # user, address, action
    assert f"Offer {offer['id']}" in words
    assert "changed unit_price of offer Bidder One" in words
    diff = re.search(r'<tr class="changed">\s*<th scope="row">unit_price</th>\s*<td>(.*?)</td>\s*<td>(.*?)</td>', first)
    assert diff and diff.groups() == ("12000", "11500")
    assert re.search(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC", words)
    assert 'href="/api/v1/audit.csv"' in page.text


def test_the_audit_page_links_objects_to_their_pages(page_client):
    _, tender_id, lot_id = setup_lot(page_client)
    log_in(page_client)
    page = page_client.get("/audit").text
    assert f'<a href="/tenders/{tender_id}">Tender {tender_id}</a>' in page
    assert f'<a href="/lots/{lot_id}">Lot {lot_id}</a>' in page
    assert '<a href="/cost-bases/1">Cost basis 1</a>' in page


def test_the_audit_page_filters_by_user_object_and_date(page_client):
    _, lot_id, offer = _edited_offer(page_client)
    by_buyer = page_client.get("/audit", params={"actor": "buyer"}).text
    rows = re.findall(r'<tr id="event-\d+">(.*?)</tr>', by_buyer, re.S)
    assert rows and all("buyer" in _text(row) for row in rows)
    assert not any("created tender" in _text(row) for row in rows)

    by_offer = page_client.get("/audit", params={"object_type": "offer", "object_id": offer["id"]}).text
    words = [_text(row) for row in re.findall(r'<tr id="event-\d+">(.*?)</tr>', by_offer, re.S)]
    assert len(words) == 2 and "changed unit_price" in words[0] and "created offer" in words[1]
    csv_link = html.unescape(re.search(r'href="(/api/v1/audit\.csv[^"]*)"', by_offer).group(1))
    assert csv_link == f"/api/v1/audit.csv?object_type=offer&object_id={offer['id']}"
    rows = list(csv.DictReader(io.StringIO(page_client.get(csv_link).text)))
    assert [r["action"] for r in rows] == ["update", "create"]

    # The day of the edit itself, not the clock's: a run across midnight must not fail.
    latest = page_client.get("/api/v1/audit", params={"limit": 1}, headers=API).json()[0]["at"]
    today = as_utc(datetime.fromisoformat(latest)).date()
    shown_today = page_client.get("/audit", params={"since": today.isoformat(), "until": today.isoformat()}).text
    assert "changed unit_price" in shown_today
    yesterday = (today - timedelta(days=1)).isoformat()
    nothing = page_client.get("/audit", params={"until": yesterday}).text
    assert "No events match this filter." in nothing
    csv_link = html.unescape(re.search(r'href="(/api/v1/audit\.csv[^"]*)"', shown_today).group(1))
    assert f"since={today.isoformat()}T00%3A00%3A00%2B00%3A00" in csv_link
    assert f"until={today.isoformat()}T23%3A59%3A59.999999%2B00%3A00" in csv_link


def test_a_bad_audit_filter_is_named_beside_its_box(page_client):
    log_in(page_client)
    response = page_client.get("/audit", params={"object_id": "abc", "since": "2026-02-30", "object_type": "x"})
    assert response.status_code == 422
    assert error_beside(response.text, "audit-object_id") == "Must be a whole number."
    assert error_beside(response.text, "audit-since") == "Must be a date such as 2026-03-31."
    assert error_beside(response.text, "audit-object_type") == "Choose one of the listed kinds."
    reversed_range = page_client.get("/audit", params={"since": "2026-03-02", "until": "2026-03-01"})
    assert error_beside(reversed_range.text, "audit-until") == "Must be on or after the from date."


def test_history_sections_on_the_tender_and_lot_pages(page_client):
    tender_id, lot_id, offer = _edited_offer(page_client)
    tender_page = page_client.get(f"/tenders/{tender_id}").text
    assert f'hx-get="/tenders/{tender_id}/history"' in tender_page
    assert 'hx-trigger="toggle once from:closest details"' in tender_page
    assert f'href="/audit?object_type=tender&amp;object_id={tender_id}"' in tender_page  # without script
    lot_page = page_client.get(f"/lots/{lot_id}").text
    assert f'hx-get="/lots/{lot_id}/history"' in lot_page

    tender_history = page_client.get(f"/tenders/{tender_id}/history", headers=HX)
    assert tender_history.status_code == 200 and "<html" not in tender_history.text
    assert "created tender T-001" in tender_history.text
    lot_history = page_client.get(f"/lots/{lot_id}/history", headers=HX).text
    assert "created lot 400 kVA ground-mounted" in lot_history
    plain = page_client.get(f"/lots/{lot_id}/history", follow_redirects=False)
    assert plain.status_code == 303 and plain.headers["location"] == f"/audit?object_type=lot&object_id={lot_id}"


def test_each_offer_row_opens_its_history_in_place(page_client):
    _, lot_id, offer = _edited_offer(page_client)
    page = page_client.get(f"/lots/{lot_id}").text
    link = re.search(rf'<a [^>]*hx-get="/offers/{offer["id"]}/history"[^>]*>', page).group(0)
    assert 'hx-target="closest tr"' in link and 'hx-swap="afterend"' in link
    assert f'data-toggles="offer-{offer["id"]}-history"' in link
    row = page_client.get(f"/offers/{offer['id']}/history", headers=HX)
    assert row.status_code == 200
    assert row.text.lstrip().startswith(f'<tr id="offer-{offer["id"]}-history"')
    assert "changed unit_price of offer Bidder One" in row.text
    assert re.search(r'<th scope="row">unit_price</th>\s*<td>12000</td>\s*<td>11500</td>', row.text)


# --- awards -------------------------------------------------------------------------------------

def test_an_approver_awards_a_lot_and_it_is_frozen_on_the_page(page_client):
    _, lot_id = setup_lot(page_client)[1:]
    _, lean = _two_offers(page_client, lot_id)
    csrf = log_in(page_client, "approver")
    form_page = page_client.get(f"/lots/{lot_id}").text
    assert "Review the award" in form_page and "(lowest total owning cost)" in form_page
    record = _award(page_client, lot_id, note="board minute 7")
    assert record["awarded_offer_id"] == lean["id"] and record["awarded_by"] == "approver"

    log_in(page_client)  # tester holds every role, buyer included
    page = page_client.get(f"/lots/{lot_id}").text
    words = _text(page)
    assert (f"Awarded on {record['awarded_at'][:10]}" in words
            and f"by approver to Low Loss, evaluation record {record['id']}, SHA-256 {record['sha256']}" in words)
    assert f'href="/evaluation-records/{record["id"]}/report"' in page
    assert f'hx-get="/evaluation-records/{record["id"]}/verification"' in page
    assert "Review the award" not in page
    assert "Reopen the award" in page
    assert "Add an offer" not in page and "/edit" not in page and "/delete" not in page
    assert f'hx-get="/offers/{lean["id"]}/history"' in page  # history stays
    assert page_client.get(f"/offers/{lean['id']}/edit").status_code == 409

    csrf = log_in(page_client, "buyer")
    refused = page_client.post(f"/offers/{lean['id']}", data=offer_form(csrf, unit_price=1) | {"version": "1"})
    assert refused.status_code == 409
    assert "Cannot change this now" in refused.text and "an approver must reopen it" in refused.text
    assert "<html" in refused.text
    htmx_refused = page_client.post(f"/offers/{lean['id']}", data=offer_form(csrf, unit_price=1) | {"version": "1"},
                                    headers=HX)
    assert htmx_refused.status_code == 409 and htmx_refused.headers["HX-Retarget"] == "#notice"
    assert page_client.post(f"/lots/{lot_id}/offers", data=offer_form(csrf, bidder="Late")).status_code == 409
    assert [o["unit_price"] for o in api_offers(page_client, lot_id)] == [10000, 12000]

    tender_page = page_client.get(f"/tenders/{record['inputs']['tender']['id']}").text
    assert 'badge--awarded">Awarded</span>' in tender_page


def test_the_award_form_is_for_approvers_only(page_client):
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    csrf = log_in(page_client, "buyer")
    assert "Review the award" not in page_client.get(f"/lots/{lot_id}").text
    assert page_client.post(f"/lots/{lot_id}/award", data={"csrf_token": csrf}).status_code == 403
    assert page_client.get(f"/lots/{lot_id}/award/review").status_code == 403


def test_an_empty_lot_is_not_awarded(page_client):
    _, _, lot_id = setup_lot(page_client)
    csrf = log_in(page_client, "approver")
    assert "A lot is awarded once it has compliant offers to rank." in page_client.get(f"/lots/{lot_id}").text
    response = page_client.post(f"/lots/{lot_id}/award", data={"csrf_token": csrf})
    assert response.status_code == 422
    assert "has no compliant offers to award." in response.text


def test_reopening_needs_a_reason_and_lists_the_past_record(page_client):
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    record = _award(page_client, lot_id)
    csrf = log_in(page_client, "approver")
    blank = page_client.post(f"/lots/{lot_id}/reopen", data={"csrf_token": csrf, "reason": "   "})
    assert blank.status_code == 422
    assert error_beside(blank.text, "reopen-reason") == "Fill this in."
    assert "Awarded on" in blank.text  # still awarded
    assert page_client.get(f"/api/v1/evaluation-records/{record['id']}", headers=API).json()["reopened_at"] is None

    done = page_client.post(f"/lots/{lot_id}/reopen", data={"csrf_token": csrf, "reason": "bidder withdrew"},
                            follow_redirects=False)
    assert done.status_code == 303
    page = page_client.get(f"/lots/{lot_id}").text
    words = _text(page)
    assert "Review the award" in page
    assert f"Evaluation record {record['id']}: awarded on" in words
    assert "reopened on" in words and "by approver: “bidder withdrew”" in words
    again = page_client.post(f"/lots/{lot_id}/reopen", data={"csrf_token": csrf, "reason": "again"})
    assert again.status_code == 409


def test_the_award_report_is_built_from_the_record_and_verified(page_client):
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    record = _award(page_client, lot_id)
    # Change the lot afterwards: the report must still show what was frozen.
    page_client.post(f"/api/v1/lots/{lot_id}/reopen", json={"reason": "typo in a price"}, headers=API)
    lean_id = record["awarded_offer_id"]
    page_client.patch(f"/api/v1/offers/{lean_id}", json={"version": 1, "bidder": "Renamed later"}, headers=API)

    response = page_client.get(f"/evaluation-records/{record['id']}/report")
    assert response.status_code == 200
    page = response.text
    words = _text(page)
    assert record["sha256"] in page
    assert "Verified: the frozen inputs still give this ranking and hash, the audit trail holds the same hash." in words
    assert 'data-verified="true"' in page
    body = page[page.index('class="data ranking"'):]
    body = body[body.index("<tbody>"):body.index("</tbody>")]
    assert [b.strip() for b in re.findall(r'<th scope="row">([^<]+)', body)] == ["Low Loss", "Low Price"]
    assert "21,480" in body and "214,800" in body  # TOC per unit and for the lot of 10
    assert "Renamed later" not in page
    assert "T-001" in words and "Test tender" in words and "Test basis, revision 1, method: Direct rates." in words
    assert "6,000.0" in words and "1,500.0" in words and "800.0" in words
    assert "This award was reopened" in words and "typo in a price" in words
    assert "This report supports a procurement decision; it does not replace the engineer's judgement, " \
           "local codes or procurement law." in words
    assert '<link rel="stylesheet" href="/static/css/print.css">' in page
    assert re.search(r'<button type="button" class="btn btn--primary" data-print hidden>Print</button>', page)
    assert re.findall(r"<script(?![^>]*\bsrc=)[^>]*>", page) == [] and not re.search(r"\son[a-z]+=", page)
    assert "LossLedger 0." in words  # the software version that froze it


def test_the_report_flags_offers_against_the_frozen_lot_limits(page_client):
    basis_id = page_client.post("/api/v1/cost-bases", json={
        "name": "B", "currency": "EUR", "method": "direct", "no_load_rate_per_kw": 6000, "load_rate_per_kw": 1500,
    }, headers=API).json()["id"]
    body = factories.tender(basis_id, lots=[factories.lot(max_no_load_loss_w=500, max_load_loss_w=5000,
                                                          impedance_pct=4.0)])
    lot_id = page_client.post("/api/v1/tenders", json=body, headers=API).json()["lots"][0]["id"]
    _two_offers(page_client, lot_id)
    api_offer(page_client, lot_id, bidder="Odd Impedance", unit_price=15000, no_load_loss_w=400, load_loss_w=4500,
              impedance_pct=4.5)
    # Odd Impedance is left out only on the IEC impedance tolerance, a rule from memory: acknowledged.
    record = _award(page_client, lot_id, acknowledge=True)
    words = _text(page_client.get(f"/evaluation-records/{record['id']}/report").text)
    assert "2 of 3 offers break at least one of the lot's stated limits (checked: most no-load loss, most load loss" in words
    assert "lot cap: no-load loss: 700 W against 500 W" in words
    assert "lot cap: load loss: 6000 W against 5000 W" in words
    assert "required impedance 4 % \u00b110 %: 4.5% against 4%" in words
    assert "from memory, verify against the standard" in words


def test_a_tampered_record_is_reported_in_red(page_client, sqlite_url):
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    record = _award(page_client, lot_id)
    engine = create_engine(sqlite_url)
    try:
        with engine.begin() as conn:
            conn.execute(text("DROP TRIGGER evaluation_records_sealed"))  # as someone at the database could
            conn.execute(text("UPDATE evaluation_records SET sha256 = :h"), {"h": "0" * 64})
    finally:
        engine.dispose()
    page = page_client.get(f"/evaluation-records/{record['id']}/report").text
    assert 'data-verified="false"' in page and "Verification failed." in page
    assert record["sha256"] in page  # the recomputed hash, beside the altered one
    again = page_client.get(f"/evaluation-records/{record['id']}/verification", headers=HX)
    assert again.status_code == 200 and "Verification failed." in again.text


def test_a_missing_record_report_is_a_friendly_404(page_client):
    log_in(page_client)
    response = page_client.get("/evaluation-records/99/report")
    assert response.status_code == 404 and "Evaluation record 99 does not exist." in response.text


# --- users ----------------------------------------------------------------------------------------

def test_the_users_page_needs_an_administrator(page_client):
    log_in(page_client, "buyer")
    assert page_client.get("/users").status_code == 403
    assert 'href="/users"' not in page_client.get("/tenders").text
    assert 'href="/audit"' in page_client.get("/tenders").text
    log_in(page_client, "admin")
    page = page_client.get("/users")
    assert page.status_code == 200
    assert 'href="/users" aria-current="page"' in page.text
    assert re.search(r'<span class="who__name">admin</span>', page.text) and "Log out" in page.text


def test_an_administrator_creates_a_user_who_can_log_in(page_client):
    csrf = log_in(page_client, "admin")
    form = {"csrf_token": csrf, "username": "gail", "password": "long enough pw", "roles": ["viewer", "buyer"]}
    response = page_client.post("/users", data=form, follow_redirects=False)
    assert response.status_code == 303
    page = page_client.get(response.headers["location"]).text
    assert "Saved the changes to gail." in page
    row = re.search(r'<tr id="user-\d+">\s*<th scope="row">gail</th>(.*?)</tr>', page, re.S).group(1)
    assert "buyer, viewer" in row and "Active" in row
    assert "long enough pw" not in page
    log_in(page_client, "tester")
    assert page_client.post("/login", data={"username": "gail", "password": "long enough pw", "next": "/tenders"},
                            follow_redirects=False).status_code == 303


def test_a_bad_new_user_is_named_beside_its_boxes(page_client):
    csrf = log_in(page_client, "admin")
    response = page_client.post("/users", data={"csrf_token": csrf, "username": "hal", "password": "short"})
    assert response.status_code == 422
    assert error_beside(response.text, "new-user-password") == "Must have at least 10 characters."
    assert "Choose at least one." in response.text
    assert 'value="hal"' in response.text and 'value="short"' not in response.text
    taken = page_client.post("/users", data={"csrf_token": csrf, "username": "buyer", "password": "x" * 12,
                                             "roles": "viewer"})
    assert "already exists" in error_beside(taken.text, "new-user-username")


def _user(client, name: str) -> dict:
    return next(u for u in client.get("/api/v1/users", headers=API).json() if u["username"] == name)


def test_an_administrator_changes_roles_disables_enables_and_resets_a_password(page_client):
    csrf = log_in(page_client, "admin")
    viewer = _user(page_client, "viewer")
    base = {"csrf_token": csrf, "version": str(viewer["version"])}
    roles = page_client.post(f"/users/{viewer['id']}", data=base | {"change": "roles", "roles": ["viewer", "planner"]},
                             follow_redirects=False)
    assert roles.status_code == 303
    assert _user(page_client, "viewer")["roles"] == ["planner", "viewer"]
    stale = page_client.post(f"/users/{viewer['id']}", data=base | {"change": "disable"})
    assert stale.status_code == 409 and "changed by someone else" in stale.text
    version = str(_user(page_client, "viewer")["version"])
    page_client.post(f"/users/{viewer['id']}", data=base | {"version": version, "change": "disable"})
    assert _user(page_client, "viewer")["disabled"] is True
    assert "badge--disabled" in page_client.get("/users").text
    version = str(_user(page_client, "viewer")["version"])
    page_client.post(f"/users/{viewer['id']}", data=base | {"version": version, "change": "enable"})
    assert _user(page_client, "viewer")["disabled"] is False
    version = str(_user(page_client, "viewer")["version"])
    short = page_client.post(f"/users/{viewer['id']}", data=base | {"version": version, "change": "password",
                                                                    "password": "short"})
    assert short.status_code == 422
    assert error_beside(short.text, f"user-{viewer['id']}-password") == "Must have at least 10 characters."
    reset = page_client.post(f"/users/{viewer['id']}", data=base | {"version": version, "change": "password",
                                                                    "password": "a new password"},
                             follow_redirects=False)
    assert reset.status_code == 303
    assert page_client.post("/login", data={"username": "viewer", "password": "a new password", "next": "/"},
                            follow_redirects=False).status_code == 303


def test_an_administrator_cannot_lock_themselves_out(page_client):
    csrf = log_in(page_client, "admin")
    me = _user(page_client, "admin")
    base = {"csrf_token": csrf, "version": str(me["version"])}
    response = page_client.post(f"/users/{me['id']}", data=base | {"change": "disable"})
    assert response.status_code == 422 and "cannot disable your own account" in response.text
    response = page_client.post(f"/users/{me['id']}", data=base | {"change": "roles", "roles": "viewer"})
    assert response.status_code == 422 and "cannot remove your own admin role" in response.text
    assert _user(page_client, "admin") == me


# --- unknown addresses ------------------------------------------------------------------------------

def test_an_unknown_page_gets_the_friendly_404_page(page_client):
    log_in(page_client)
    response = page_client.get("/no/such/page")
    assert response.status_code == 404
    assert response.headers["content-type"].startswith("text/html")
    assert "There is no page at this address." in response.text
    assert "<nav" in response.text and 'href="/audit"' in response.text  # the layout, signed in
    assert "Traceback" not in response.text
    assert page_client.get("/lots/not-a-number").status_code == 404


def test_an_unknown_page_for_a_stranger_and_the_api_keep_their_answers(page_client):
    stranger = page_client.get("/no/such/page")
    assert stranger.status_code == 404 and "There is no page at this address." in stranger.text
    assert 'class="nav"' not in stranger.text
    api = page_client.get("/api/v1/no-such-thing", headers=API)
    assert api.status_code == 404 and api.json() == {"detail": "Not Found"}
    assert page_client.get("/static/css/missing.css").status_code == 404


def test_the_new_pages_carry_no_inline_script(page_client):
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    record = _award(page_client, lot_id)
    log_in(page_client, "tester")
    for path in ("/audit", "/users", f"/lots/{lot_id}", f"/evaluation-records/{record['id']}/report", "/nowhere"):
        page = page_client.get(path).text
        assert re.findall(r"<script(?![^>]*\bsrc=)[^>]*>", page) == [], path
        assert not re.search(r"\s(on[a-z]+|style)=", page), path


# --- pure helpers -------------------------------------------------------------------------------------

def test_compliance_flags_check_only_the_limits_the_lot_states():
    offer = {"no_load_loss_w": 450.0, "load_loss_w": 4700.0, "impedance_pct": 4.41}
    assert compliance_flags({}, offer) == []
    lot = {"max_no_load_loss_w": 430.0, "max_load_loss_w": 4700.0, "impedance_pct": 4.0}
    lot |= {"rating_kva": 400.0, "phases": 3, "insulation": "liquid", "hv_kv": 20.0, "lv_kv": 0.4}
    flags = compliance_flags(lot, offer)  # a record frozen without verdicts is checked again
    assert len(flags) == 2 and "no-load loss: 450 W against 430 W" in flags[0] and "impedance" in flags[1]
    assert compliance_flags(lot, offer | {"no_load_loss_w": 430.0, "impedance_pct": 3.6}) == []
    assert compliance_flags(lot, offer | {"reasons": ["frozen reason"]}) == ["frozen reason"]


def test_diff_rows_pair_before_and_after():
    rows = diff_rows({"unit_price": 12000.0, "notes": None}, {"unit_price": 11500.5, "notes": "x"})
    assert [(r.field, r.before, r.after, r.changed) for r in rows] == [
        ("unit_price", "12000", "11500.5", True), ("notes", "\u2014", "x", True),
    ]
    created = diff_rows(None, {"roles": ["buyer"], "disabled": False})
    assert [(r.field, r.before, r.after, r.changed) for r in created] == [
        ("roles", "\u2014", '["buyer"]', False), ("disabled", "\u2014", "false", False),
    ]
