"""Decisions a buyer can defend: warnings on implausible figures everywhere, an award that needs a
reason when it departs from the lowest total owning cost and an acknowledgement when there are
warnings, and awarded lots that keep their cost basis revision while the tender moves on."""

from __future__ import annotations

import csv
import io

import pytest
from openpyxl import load_workbook
from sqlalchemy import create_engine, func, select
from sqlalchemy.orm import Session

from server import schemas
from server.demo import seed_scenario
from server.storage.audit import Actor, set_actor
from server.storage.models import AuditEvent, EvaluationRecord
from tests import factories as f
from tests.conftest import auth
from tests.e2e.test_pages import API, HX, log_in


def _kw_as_w_lot(client, headers=None):
    """A 400 kVA lot with two sound offers and one whose losses were typed in kW into the W boxes."""
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis(), headers=headers).json()["id"]
    created = client.post("/api/v1/tenders", json=f.tender(basis_id), headers=headers).json()
    tender_id, lot_id = created["id"], created["lots"][0]["id"]
    sound = [client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder=b, unit_price=p), headers=headers).json()
             for b, p in (("Sound One", 12000), ("Sound Two", 12500))]
    typo = client.post(f"/api/v1/lots/{lot_id}/offers", headers=headers, json=f.offer(
        bidder="Typed in kW", unit_price=11800, no_load_loss_w=0.43, load_loss_w=3.6)).json()
    return tender_id, lot_id, typo, sound


def _counts(db_url: str) -> tuple[int, int]:
    engine = create_engine(db_url)
    try:
        with Session(engine) as session:
            records = session.scalar(select(func.count()).select_from(EvaluationRecord))
            awards = session.scalar(select(func.count()).select_from(AuditEvent).where(AuditEvent.action == "award"))
            return records, awards
    finally:
        engine.dispose()


def test_a_kw_as_w_offer_is_flagged_on_every_output_and_its_award_needs_acknowledgement(client, db_url):
    # Plausibility bands: common practice, no source (P0 about 0.1-0.4 %, Pk 0.8-1.8 % of the rating).
    _, lot_id, typo, _ = _kw_as_w_lot(client)
    assert {w["code"] for w in typo["warnings"]} >= {"kw_typed_as_w"}  # hand entry: kept, with the warning
    assert client.get(f"/api/v1/offers/{typo['id']}").json()["no_load_loss_w"] == 0.43

    ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
    leader = ranking["rows"][0]
    assert leader["bidder"] == "Typed in kW"  # it costs nothing to own, so it ranks first ...
    codes = [w["code"] for w in leader["warnings"]]
    assert codes.count("kw_typed_as_w") == 2 and "efficiency_implausible" in codes  # ... flagged
    assert all(not row["warnings"] for row in ranking["rows"][1:])

    rows = {r["bidder"]: r for r in csv.DictReader(io.StringIO(client.get(f"/api/v1/lots/{lot_id}/ranking.csv").text))}
    assert "[kw_typed_as_w]" in rows["Typed in kW"]["warnings"] and rows["Sound One"]["warnings"] == ""
    book = load_workbook(io.BytesIO(client.get(f"/api/v1/lots/{lot_id}/ranking.xlsx").content))
    sheet = book["Ranking"]
    header = [c.value for c in sheet[1]]
    cells = {row[header.index("bidder")]: row for row in sheet.iter_rows(min_row=2, values_only=True)}
    assert "kW typed as W" in cells["Typed in kW"][header.index("warnings")]

    before = _counts(db_url)
    refused = client.post(f"/api/v1/lots/{lot_id}/award", json={}, headers=auth("approver"))
    assert refused.status_code == 409, refused.text
    body = refused.json()
    assert "acknowledge" in body["detail"] and {w["code"] for w in body["warnings"]} >= {"kw_typed_as_w"}
    assert all(w["bidder"] == "Typed in kW" for w in body["warnings"])
    assert _counts(db_url) == before  # nothing stored
    assert client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Still open")).status_code == 201

    done = client.post(f"/api/v1/lots/{lot_id}/award", json={"acknowledge_warnings": True}, headers=auth("approver"))
    assert done.status_code == 201, done.text
    decision = done.json()["decision"]
    assert decision["warnings_acknowledged"] and decision["acknowledged_by"] == "approver"
    assert decision["is_lowest_toc"] and decision["offer_id"] == typo["id"]
    frozen = next(o for o in done.json()["inputs"]["offers"] if o["id"] == typo["id"])
    assert {w["code"] for w in frozen["warnings"]} >= {"kw_typed_as_w"}
    event = client.get("/api/v1/audit", params={"object_type": "lot", "object_id": lot_id}).json()[0]
    assert event["action"] == "award" and "warning(s) acknowledged" in event["summary"]
    assert "kw_typed_as_w" in event["after"]["warnings_acknowledged"]
    assert client.get(f"/api/v1/evaluation-records/{done.json()['id']}/verification").json()["verified"]


def test_the_lot_page_shows_the_warning_badge_and_losses_with_their_digits(page_client):
    log_in(page_client)
    _, lot_id, _, _ = _kw_as_w_lot(page_client, API)
    page = page_client.get(f"/lots/{lot_id}").text
    ranking = page[page.index('id="ranking"'):page.index('id="compliance"')]
    assert 'class="badge badge--warning"' in ranking and "looks like kW typed as W" in ranking
    offers = page[page.index('id="offers"'):page.index('id="ranking"')]
    assert '<td class="num">0.43<span class="field-warning">' in offers
    assert '<td class="num">3.6<span class="field-warning">' in offers


def test_an_award_to_another_compliant_offer_needs_a_reason_kept_in_record_and_audit(client):
    _, lot_id, _, sound = _kw_as_w_lot(client)
    second = sound[1]
    missing = client.post(f"/api/v1/lots/{lot_id}/award", json={"offer_id": second["id"], "acknowledge_warnings": True})
    assert missing.status_code == 422 and missing.json()["detail"][0]["loc"][-1] == "reason_kind"
    no_words = client.post(f"/api/v1/lots/{lot_id}/award", json={
        "offer_id": second["id"], "reason_kind": "delivery", "acknowledge_warnings": True})
    assert no_words.status_code == 422 and no_words.json()["detail"][0]["loc"][-1] == "reason"
    unknown = client.post(f"/api/v1/lots/{lot_id}/award", json={"offer_id": 999999})
    assert unknown.status_code == 422 and unknown.json()["detail"][0]["loc"][-1] == "offer_id"

    done = client.post(f"/api/v1/lots/{lot_id}/award", json={
        "offer_id": second["id"], "reason_kind": "delivery",
        "reason": "Only Sound Two can deliver before the substation opens in May.", "note": "board minute 31"},
        headers=auth("approver"))
    assert done.status_code == 201, done.text  # its own offer has no warning: nothing to acknowledge
    record = done.json()
    decision = record["decision"]
    assert record["awarded_offer_id"] == second["id"] and not decision["is_lowest_toc"]
    assert decision["reason_kind"] == "delivery" and decision["lowest_bidder"] == "Typed in kW"
    lowest = record["ranking"][0]["toc_per_unit"]
    chosen = next(r for r in record["ranking"] if r["offer_id"] == second["id"])["toc_per_unit"]
    assert decision["margin_per_unit"] == pytest.approx(lowest - chosen) and decision["margin_per_unit"] < 0
    assert decision["margin_total"] == pytest.approx(10 * (lowest - chosen))
    assert decision["decided_by"] == "approver" and decision["acknowledged_by"] is None

    event = client.get("/api/v1/audit", params={"object_type": "lot", "object_id": lot_id}).json()[0]
    assert "not the lowest total owning cost (delivery: Only Sound Two" in event["summary"]
    assert event["after"]["reason"].startswith("Only Sound Two") and event["after"]["is_lowest_toc"] is False
    assert client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()["verified"]


def test_the_report_shows_the_reason_the_margin_and_the_acknowledgement(page_client):
    log_in(page_client)
    _, lot_id, typo, sound = _kw_as_w_lot(page_client, API)
    record = page_client.post(f"/api/v1/lots/{lot_id}/award", headers=API, json={
        "offer_id": sound[1]["id"], "reason_kind": "delivery", "note": "board minute 31",
        "reason": "Only Sound Two can deliver before the substation opens in May."}).json()
    report = page_client.get(f"/evaluation-records/{record['id']}/report").text
    assert "not the lowest total owning cost" in report and "Only Sound Two can deliver" in report
    assert "dearer to own" in report and "board minute 31" in report
    page_client.post(f"/api/v1/lots/{lot_id}/reopen", json={"reason": "typo confirmed"}, headers=API)
    acknowledged = page_client.post(f"/api/v1/lots/{lot_id}/award", headers=API,
                                    json={"offer_id": typo["id"], "acknowledge_warnings": True}).json()
    report = page_client.get(f"/evaluation-records/{acknowledged['id']}/report").text
    assert "acknowledged by tester" in report and "looks like kW typed as W" in report
    assert "Margin to Sound One: 9,672 EUR per unit cheaper to own" in report


def test_the_award_confirmation_on_the_page(page_client):
    log_in(page_client)
    _, lot_id, typo, sound = _kw_as_w_lot(page_client, API)
    csrf = log_in(page_client, "approver")
    review = page_client.get(f"/lots/{lot_id}/award/review", params={"offer_id": typo["id"]}, headers=HX)
    assert review.status_code == 200 and review.text.lstrip().startswith('<div id="award-confirm"')
    assert "Award to Typed in kW?" in review.text and "warnings to check before this award" in review.text
    assert "Ahead of the next offer" in review.text and 'name="acknowledge_warnings"' in review.text
    assert 'name="reason"' not in review.text  # the lowest TOC needs no reason
    unticked = page_client.post(f"/lots/{lot_id}/award", headers=HX,
                                data={"csrf_token": csrf, "offer_id": str(typo["id"])})
    assert unticked.status_code == 409 and "Tick the box to confirm" in unticked.text
    other = page_client.get(f"/lots/{lot_id}/award/review", params={"offer_id": sound[1]["id"]}, headers=HX).text
    assert 'name="reason_kind"' in other and 'name="reason"' in other and "Against the lowest" in other
    no_reason = page_client.post(f"/lots/{lot_id}/award", headers=HX, data={
        "csrf_token": csrf, "offer_id": str(sound[1]["id"]), "reason_kind": "clarification"})
    assert no_reason.status_code == 422
    done = page_client.post(f"/lots/{lot_id}/award", headers=HX, data={
        "csrf_token": csrf, "offer_id": str(sound[1]["id"]), "reason_kind": "clarification",
        "reason": "The lowest offer's losses were typed in kW; the bidder confirmed 430 W and 3.6 kW."})
    assert done.status_code == 200 and done.headers["HX-Redirect"] == f"/lots/{lot_id}"
    page = page_client.get(f"/lots/{lot_id}").text
    assert "Not the lowest total owning cost" in page and "typed in kW; the bidder confirmed" in page


def test_awarding_lot_1_of_the_demo_then_moving_the_tender_reprices_only_the_open_lots(client, db_url):
    engine = create_engine(db_url)
    try:
        with Session(engine) as session:
            set_actor(session, Actor("demo seeding"))
            seed_scenario(session)
    finally:
        engine.dispose()
    tender = next(t for t in client.get("/api/v1/tenders").json() if t["reference"] == "HVE-2027-014")
    lots = tender["lots"]
    before = {lot["id"]: client.get(f"/api/v1/lots/{lot['id']}/ranking").json() for lot in lots}
    awarded = client.post(f"/api/v1/lots/{lots[0]['id']}/award", json={"acknowledge_warnings": True})
    assert awarded.status_code == 201, awarded.text

    basis = client.get(f"/api/v1/cost-bases/{tender['cost_basis_id']}").json()
    revised = client.patch(f"/api/v1/cost-bases/{basis['id']}", json={
        "version": basis["version"], "energy_price_per_kwh": 0.09, "change_reason": "Energy prices up"})
    assert revised.status_code == 200, revised.text
    tender = client.get(f"/api/v1/tenders/{tender['id']}").json()
    moved = client.patch(f"/api/v1/tenders/{tender['id']}", json={"version": tender["version"], "cost_basis_revision": 2})
    assert moved.status_code == 200, moved.text
    by_id = {lot["id"]: lot for lot in moved.json()["lots"]}
    assert by_id[lots[0]["id"]]["kept_by_award"] and by_id[lots[0]["id"]]["priced_on_revision"] == 1
    for lot in lots[1:]:
        assert not by_id[lot["id"]]["kept_by_award"] and by_id[lot["id"]]["priced_on_revision"] == 2

    after = {lot["id"]: client.get(f"/api/v1/lots/{lot['id']}/ranking").json() for lot in lots}
    kept = after[lots[0]["id"]]
    assert kept["cost_basis_revision"] == 1 and kept["rows"] == before[lots[0]["id"]]["rows"]
    for lot in lots[1:]:
        assert after[lot["id"]]["cost_basis_revision"] == 2
        assert after[lot["id"]]["no_load_rate_per_kw"] > before[lot["id"]]["no_load_rate_per_kw"]
    records = client.get(f"/api/v1/lots/{lots[0]['id']}/evaluation-records").json()
    assert len(records) == 1 and records[0]["reopened_at"] is None  # lot 1 was not reopened
    assert client.get(f"/api/v1/evaluation-records/{records[0]['id']}/verification").json()["verified"]
    # The money terms still reach the awarded lot's frozen prices: refused while it stands.
    refused = client.patch(f"/api/v1/tenders/{tender['id']}", json={
        "version": moved.json()["version"], "exchange_rates": {"USD": 0.9}})
    assert refused.status_code == 409
    # Reopened, lot 1 follows the tender's revision again.
    client.post(f"/api/v1/lots/{lots[0]['id']}/reopen", json={"reason": "re-price on revision 2"})
    assert client.get(f"/api/v1/lots/{lots[0]['id']}/ranking").json()["cost_basis_revision"] == 2


def test_the_xlsx_cost_basis_sheet_shows_the_lots_own_loading(client):
    basis_id = client.post("/api/v1/cost-bases", json=f.present_worth_basis()).json()["id"]
    body = f.tender(basis_id, lots=[f.lot(peak_load_pu=0.55, load_growth_pct=2.5)])
    lot_id = client.post("/api/v1/tenders", json=body).json()["lots"][0]["id"]
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
    book = load_workbook(io.BytesIO(client.get(f"/api/v1/lots/{lot_id}/ranking.xlsx").content))
    rows = {row[0]: row[1] for row in book["Cost basis"].iter_rows(min_row=2, values_only=True)}
    assert rows["peak_load_pu (this lot's own)"] == 0.55 and rows["load_growth_pct (this lot's own)"] == 2.5
    assert "peak_load_pu" not in rows  # never the basis default of 0.8 beside it
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    assert record["inputs"]["cost_basis"]["priced_inputs"]["peak_load_pu"] == 0.55


def test_the_award_report_shows_the_loading_that_priced_the_lot(page_client):
    basis_id = page_client.post("/api/v1/cost-bases", json=f.present_worth_basis(), headers=API).json()["id"]
    body = f.tender(basis_id, lots=[f.lot(peak_load_pu=0.55)])
    lot_id = page_client.post("/api/v1/tenders", json=body, headers=API).json()["lots"][0]["id"]
    page_client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(), headers=API)
    record = page_client.post(f"/api/v1/lots/{lot_id}/award", json={}, headers=API).json()
    log_in(page_client, "viewer")
    report = page_client.get(f"/evaluation-records/{record['id']}/report").text
    row = report[report.index("Peak load (this lot&#39;s own)"):][:200]
    assert '<td class="num">0.55</td>' in row
    assert '<th scope="row">Peak load</th>' not in report  # never the basis default of 0.8 beside it


def test_award_in_the_schema_documents_its_refusals():
    fields = schemas.AwardIn.model_fields
    assert {"offer_id", "reason_kind", "reason", "acknowledge_warnings", "note"} <= set(fields)


def test_the_import_preview_flags_a_price_far_from_the_lots_median(client):
    # Common practice, no source: below half or above twice the median of the lot's offers.
    _, tender_id, lot_id = f.setup_lot(client)
    lot = client.get(f"/api/v1/tenders/{tender_id}").json()["lots"][0]["name"]
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Stored", unit_price=12000))
    content = (
        "lot,bidder,unit_price,no_load_loss_w,load_loss_w,impedance_pct\n"
        f"{lot},Fair,12500,430,4600,4\n"
        f"{lot},Digit short,1200,430,4600,4\n"
    ).encode()
    staged = client.post(f"/api/v1/tenders/{tender_id}/offer-imports",
                         files={"file": ("offers.csv", content, "text/csv")}).json()
    rows = {r["bidder"]: r for r in staged["rows"]}
    assert [w["code"] for w in rows["Digit short"]["warnings"]] == ["price_far_from_median"]
    assert rows["Fair"]["warnings"] == []


def test_a_lots_own_peak_growing_above_the_rating_is_flagged(client):
    # Common practice, no source: peak_t = peak x (1 + g)^(t - 1) above 1.0 pu within the period.
    basis_id = client.post("/api/v1/cost-bases", json=f.present_worth_basis(years=30)).json()["id"]
    body = f.tender(basis_id, lots=[f.lot(peak_load_pu=0.9, load_growth_pct=2.0)])
    lot = client.post("/api/v1/tenders", json=body).json()["lots"][0]
    (warning,) = lot["loading_warnings"]
    assert warning["code"] == "peak_above_rating" and "first in year 7" in warning["message"]
    calm = client.post("/api/v1/tenders", json=f.tender(basis_id, reference="T-002",
                                                        lots=[f.lot(peak_load_pu=0.5, load_growth_pct=1.0)])).json()
    assert calm["lots"][0]["loading_warnings"] == []
