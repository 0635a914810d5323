"""Journeys through a real browser (Debian's Chromium driven by Playwright).

Each journey saves screenshots under test-artifacts/journeys/ for a person to look at.
"""

from __future__ import annotations

import csv
import io
import re

import httpx
import pytest
from playwright.sync_api import Page, expect

from tests import factories as f
from tests.conftest import TEST_PASSWORD, auth
from tests.e2e.browser import Shots

pytestmark = pytest.mark.browser


def log_in(page: Page, base: str, name: str) -> None:
    page.goto(f"{base}/login")
    page.get_by_label("User name").fill(name)
    page.get_by_label("Password").fill(TEST_PASSWORD)
    page.get_by_role("button", name="Log in").click()
    expect(page).not_to_have_url(re.compile(r"/login"))


def test_buyer_creates_a_tender_adds_offers_and_downloads_the_ranking(page: Page, live_server):
    base = live_server.url
    shot = Shots(page, "buyer")
    with httpx.Client(base_url=f"{base}/api/v1", headers=auth("planner")) as api:
        api.post("/cost-bases", json=f.direct_basis(name="Journey basis"))
    log_in(page, base, "buyer")
    page.goto(f"{base}/tenders")
    shot("tenders")
    form = page.locator("#new-tender")
    form.get_by_label("Reference").fill("J-2027-001")
    form.get_by_label("Title").fill("Journey tender")
    form.get_by_label("Currency").fill("EUR")
    form.get_by_label("Lot name").fill("400 kVA ground-mounted")
    form.get_by_label("Rating").fill("400")
    form.get_by_label("High voltage").fill("20")
    form.get_by_label("Low voltage").fill("0.4")
    form.get_by_label("Frequency").fill("50")
    form.get_by_label("Quantity").fill("10")
    form.get_by_role("button", name="Create tender").click()
    expect(page.get_by_role("heading", name="Journey tender")).to_be_visible()
    shot("tender-created")

    add_lot = page.locator("form[action$='/lots']")
    add_lot.get_by_label("Lot name").fill("1000 kVA ground-mounted")
    add_lot.get_by_label("Rating").fill("1000")
    add_lot.get_by_label("High voltage").fill("20")
    add_lot.get_by_label("Low voltage").fill("0.4")
    add_lot.get_by_label("Frequency").fill("50")
    add_lot.get_by_label("Quantity").fill("4")
    add_lot.get_by_role("button", name=re.compile("Add lot")).click()
    expect(page.get_by_role("link", name="1000 kVA ground-mounted")).to_be_visible()
    shot("second-lot")

    page.get_by_role("link", name="400 kVA ground-mounted").click()
    offers = [("Lossy Low Price", "10000", "600", "5000"), ("Lean Dearer", "12000", "330", "3300")]
    for bidder, price, p0, pk in offers:
        add = page.locator("form[action$='/offers']")
        add.get_by_label("Bidder").fill(bidder)
        add.get_by_label("Unit price").fill(price)
        add.locator("[name=no_load_loss_w]").fill(p0)
        add.locator("[name=load_loss_w]").fill(pk)
        add.get_by_label("Impedance").fill("4")
        add.get_by_role("button", name="Add offer").click()
        expect(page.locator("#ranking")).to_contain_text(bidder)
    shot("offers-ranked")
    ranking = page.locator("#ranking")
    expect(ranking.locator("tbody tr").first).to_contain_text("Lean Dearer")
    expect(ranking.locator("canvas").first).to_be_visible()  # the chart has been drawn

    with page.expect_download() as download_info:
        ranking.get_by_role("link", name="Download CSV").click()
    text = open(download_info.value.path(), encoding="utf-8").read()
    rows = list(csv.DictReader(io.StringIO(text)))
    assert [r["bidder"] for r in rows][:2] == ["Lean Dearer", "Lossy Low Price"]

    add = page.locator("form[action$='/offers']")
    add.get_by_label("Bidder").fill("Typo Bidder")
    add.get_by_label("Unit price").fill("11000")
    add.locator("[name=no_load_loss_w]").fill("-5")
    add.locator("[name=load_loss_w]").fill("4000")
    add.get_by_label("Impedance").fill("4")
    add.get_by_role("button", name="Add offer").click()
    message = page.locator("form[action$='/offers']").get_by_text(re.compile("0 or more"))
    expect(message).to_be_visible()
    shot("bad-value")
    expect(page.locator("#ranking")).not_to_contain_text("Typo Bidder")


def test_approver_awards_a_lot_and_opens_the_report(page: Page, live_server):
    base = live_server.url
    shot = Shots(page, "approver")
    with httpx.Client(base_url=f"{base}/api/v1", headers=auth("tester")) as api:
        basis_id = api.post("/cost-bases", json=f.direct_basis()).json()["id"]
        tender = api.post("/tenders", json=f.tender(basis_id)).json()
        lot_id = tender["lots"][0]["id"]
        api.post(f"/lots/{lot_id}/offers", json=f.offer(bidder="Lean", unit_price=12000, no_load_loss_w=300))
        api.post(f"/lots/{lot_id}/offers", json=f.offer(bidder="Lossy", unit_price=10000, no_load_loss_w=700))
    log_in(page, base, "approver")
    page.goto(f"{base}/lots/{lot_id}")
    shot("lot")
    page.get_by_role("button", name="Review the award").click()
    expect(page.locator("#award-confirm")).to_contain_text("Award to Lean?")
    shot("confirm")
    page.get_by_role("button", name="Award to Lean").click()
    expect(page.get_by_text(re.compile("Awarded on"))).to_be_visible()
    shot("awarded")
    page.get_by_role("link", name="Award report").click()
    expect(page.get_by_text("SHA-256 of the frozen inputs")).to_be_visible()
    expect(page.locator("body")).to_contain_text("Lean")
    expect(page.locator("body")).to_contain_text(re.compile("[Vv]erified"))
    shot("report")


def test_planner_revises_the_cost_basis_and_previews_the_effect(page: Page, live_server):
    base = live_server.url
    shot = Shots(page, "planner")
    with httpx.Client(base_url=f"{base}/api/v1", headers=auth("tester")) as api:
        basis_id = api.post("/cost-bases", json=f.direct_basis(name="Planner basis")).json()["id"]
        tender = api.post("/tenders", json=f.tender(basis_id)).json()
        lot_id = tender["lots"][0]["id"]
        api.post(f"/lots/{lot_id}/offers", json=f.offer(bidder="Lean", unit_price=12000, no_load_loss_w=300))
        api.post(f"/lots/{lot_id}/offers", json=f.offer(bidder="Lossy", unit_price=11000, no_load_loss_w=600))
    log_in(page, base, "planner")
    page.goto(f"{base}/cost-bases/{basis_id}")
    shot("basis")
    box = page.locator("[name=no_load_rate_per_kw]").first
    box.fill("1000")
    box.press("Tab")
    page.locator("[name=change_reason]").fill("Lower no-load rate published")
    page.get_by_role("button", name="Save as a new revision").click()
    expect(page.locator("#revisions")).to_contain_text("latest")
    expect(page.locator("#revisions tbody tr")).to_have_count(2)
    shot("revised")
    page.locator("#revisions tbody tr").first.get_by_role("link", name=re.compile("Preview on open lots")).click()
    result = page.locator("#revision-result")
    expect(result).to_contain_text("400 kVA ground-mounted")
    expect(result).to_contain_text("Lean")
    shot("preview")
