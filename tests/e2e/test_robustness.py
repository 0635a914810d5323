"""How sure the ranking is: break-even, rate map, tornado and Monte Carlo through the API."""

from __future__ import annotations

import time

import pytest

from tests import factories as f
from tests.conftest import auth
from tests.integration.test_jobs import app_client


def _lot(client, basis=None):
    basis_id = client.post("/api/v1/cost-bases", json=basis or f.direct_basis()).json()["id"]
    reference = f"T-{basis_id}"
    lot_id = client.post("/api/v1/tenders", json=f.tender(basis_id, reference=reference)).json()["lots"][0]["id"]
    offers = [("Lean", 12000, 300, 4000), ("Lossy", 10000, 650, 4200), ("Middle", 11000, 450, 4300)]
    ids = {}
    for bidder, price, p0, pk in offers:
        ids[bidder] = client.post(f"/api/v1/lots/{lot_id}/offers",
                                  json=f.offer(bidder=bidder, unit_price=price, no_load_loss_w=p0, load_loss_w=pk)).json()["id"]
    return lot_id, ids


def _ranking_leader(client, lot_id, basis_id, a, b):
    client.patch(f"/api/v1/cost-bases/{basis_id}", json={"version": client.get(f"/api/v1/cost-bases/{basis_id}").json()["version"],
                                                         "change_reason": "Try other rates",
                                                         "no_load_rate_per_kw": a, "load_rate_per_kw": b})
    tender_id = client.get(f"/api/v1/lots/{lot_id}").json()["tender_id"]
    tender = client.get(f"/api/v1/tenders/{tender_id}").json()
    client.patch(f"/api/v1/tenders/{tender_id}", json={"version": tender["version"], "cost_basis_id": basis_id})
    return client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"][0]["offer_id"]


def test_break_even_rates_checked_by_reranking_either_side(client):
    lot_id, ids = _lot(client)
    body = client.get(f"/api/v1/lots/{lot_id}/break-even").json()
    basis_id = client.get("/api/v1/cost-bases").json()[0]["id"]
    leader = body["leader_offer_id"]
    assert leader == client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"][0]["offer_id"]
    a_now = body["no_load_rate_per_kw"]
    checked = 0
    for row in body["rows"]:
        tie = row["load_rate_per_kw"]
        if tie is None:
            continue
        eps = max(tie * 1e-6, 1e-3)
        inside = tie - eps if row["load_rate_side"] == "below" else tie + eps
        outside = tie + eps if row["load_rate_side"] == "below" else tie - eps
        if outside < 0:
            continue
        # Just inside the tie the leader beats this rival; just outside, the rival beats the leader.
        ranking_inside = _toc_order(client, lot_id, basis_id, a_now, inside)
        ranking_outside = _toc_order(client, lot_id, basis_id, a_now, outside)
        assert ranking_inside.index(leader) < ranking_inside.index(row["offer_id"])
        assert ranking_outside.index(row["offer_id"]) < ranking_outside.index(leader)
        assert any("load rate" in s for s in row["sentences"])
        checked += 1
    assert checked >= 1


def _toc_order(client, lot_id, basis_id, a, b):
    _ranking_leader(client, lot_id, basis_id, a, b)
    return [r["offer_id"] for r in client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"]]


def test_rate_map_winner_at_the_basis_is_the_leader(client):
    lot_id, ids = _lot(client)
    body = client.post(f"/api/v1/lots/{lot_id}/rate-map", json={"steps": 41}).json()
    a, b = body["current"]["no_load_rate_per_kw"], body["current"]["load_rate_per_kw"]
    j = min(range(len(body["no_load_rates"])), key=lambda k: abs(body["no_load_rates"][k] - a))
    i = min(range(len(body["load_rates"])), key=lambda k: abs(body["load_rates"][k] - b))
    leader = client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"][0]["offer_id"]
    assert body["leader_offer_id"] == leader
    assert len(body["winners"]) == 41 and len(body["winners"][0]) == 41
    # Every cell's winner agrees with a direct TOC computation at that point.
    offers = {o["id"]: o for o in client.get(f"/api/v1/lots/{lot_id}/offers").json()}
    for (row, col) in [(0, 0), (i, j), (40, 40), (10, 30), (30, 5)]:
        aa, bb = body["no_load_rates"][col], body["load_rates"][row]
        toc = {k: o["unit_price"] + aa * o["no_load_loss_w"] / 1000 + bb * o["load_loss_w"] / 1000 + 800 * o["aux_loss_w"] / 1000
               for k, o in offers.items()}
        assert body["winners"][row][col] == min(toc, key=toc.get)


def test_tornado_needs_a_present_worth_basis_and_sorts_by_swing(client):
    lot_id, _ = _lot(client)
    assert client.post(f"/api/v1/lots/{lot_id}/tornado", json={}).status_code == 422
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
    body = client.post(f"/api/v1/lots/{lot_id}/tornado",
                       json={"ranges": {"discount_rate_pct": [4, 9], "years": [20, 40]}}).json()
    swings = [r["swing"] for r in body["rows"]]
    assert swings == sorted(swings, reverse=True)
    discount = next(r for r in body["rows"] if r["input"] == "discount_rate_pct")
    assert discount["low_value"] == pytest.approx(4) and discount["high_value"] == pytest.approx(9)
    assert {r["input"] for r in body["rows"]} >= {"energy_price_per_kwh", "loss_factor", "years"}


def test_monte_carlo_fixed_inputs_give_the_plain_ranking(client):
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
    ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"]
    body = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={"draws": 500, "seed": 3, "inputs": {
        "energy_price_per_kwh": {"dist": "fixed"}}}).json()
    by_id = {r["offer_id"]: r for r in body["rows"]}
    assert by_id[ranking[0]["offer_id"]]["win_probability"] == 1.0
    for row in ranking:
        mc = by_id[row["offer_id"]]
        assert mc["toc_p5"] == pytest.approx(row["toc_per_unit"]) and mc["toc_p95"] == pytest.approx(row["toc_per_unit"])


def test_monte_carlo_is_reproducible_and_sums_to_one(client):
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
    request = {"draws": 2000, "seed": 11, "inputs": {
        "energy_price_per_kwh": {"dist": "triangular", "low": 0.04, "mode": 0.08, "high": 0.2},
        "discount_rate_pct": {"dist": "normal", "mean": 6, "sd": 2, "low": 1, "high": 12},
        "load_growth_pct": {"dist": "uniform", "low": 0, "high": 3}}}
    first = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json=request).json()
    again = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json=request).json()
    assert first == again
    assert sum(r["win_probability"] for r in first["rows"]) == pytest.approx(1.0)
    assert all(r["expected_regret"] >= 0 and r["toc_p5"] <= r["toc_p50"] <= r["toc_p95"] for r in first["rows"])
    other = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={**request, "seed": 12}).json()
    assert other != first


def test_background_run_reports_progress_and_result(db_url):
    with app_client(db_url, jobs_in_web=True) as client:  # the web process runs jobs, on either engine
        lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
        run = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 20000, "seed": 5}).json()
        assert run["status"] in {"queued", "running", "done"} and run["created_by"] == "tester"
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            state = client.get(f"/api/v1/monte-carlo-runs/{run['id']}").json()
            if state["status"] not in {"queued", "running"}:
                break
            time.sleep(0.1)
        assert state["status"] == "done" and state["progress"] == 1.0 and len(state["result"]["rows"]) == 3
        assert client.post(f"/api/v1/monte-carlo-runs/{run['id']}/cancel").json()["status"] == "done"


def test_a_monte_carlo_in_the_request_is_capped_and_a_larger_one_is_sent_to_the_queue(client):
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
    limit = 20_000  # the max_sync_draws default
    assert client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={"draws": limit, "seed": 1}).status_code == 200
    refused = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={"draws": limit + 1, "seed": 1})
    assert refused.status_code == 422
    (item,) = refused.json()["detail"]
    assert item["loc"] == ["body", "draws"]
    assert "at most 20,000 draws" in item["msg"] and f"/api/v1/lots/{lot_id}/monte-carlo-runs" in item["msg"]
    # The same request is taken as a run, up to 1,000,000 draws, for any role.
    queued = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 1_000_000, "seed": 1},
                         headers=auth("viewer"))
    assert queued.status_code == 202 and queued.json()["status"] in {"queued", "running", "done"}


def test_award_keeps_a_robustness_section(client):
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    robustness = record["robustness"]
    assert robustness["break_even"] and robustness["monte_carlo"]["draws"] == 2000
    assert 0 <= robustness["monte_carlo"]["leader_win_probability"] <= 1
    assert client.get(f"/api/v1/evaluation-records/{record['id']}/verification").json()["verified"]


def test_award_report_shows_the_robustness_section(client):
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    page = client.get(f"/evaluation-records/{record['id']}/report")
    assert page.status_code == 200
    assert "How sure is this ranking" in page.text and "Monte Carlo at award" in page.text
    assert "2,000 draws" in page.text


def test_a_run_that_lost_its_worker_is_reported_failed(db_url):
    from datetime import timedelta

    from server.storage.models import JobWorker, MonteCarloRun, utcnow

    with app_client(db_url, jobs_in_web=False) as client:
        lot_id, _ = _lot(client, f.present_worth_basis(name="PW"))
        run_id = client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json={"draws": 1000}).json()["id"]
        # Its worker ran on another host and has not said it is alive for an hour.
        with client.app.state.db.session() as session:
            session.add(JobWorker(id="elsewhere", host="another-host", pid=1, started_at=utcnow(),
                                  heartbeat_at=utcnow() - timedelta(hours=1)))
            job = session.get(MonteCarloRun, run_id).job
            job.status, job.worker_id, job.progress = "running", "elsewhere", 0.4
            session.commit()
        state = client.get(f"/api/v1/monte-carlo-runs/{run_id}").json()
    assert state["status"] == "failed" and "start it again" in state["message"]


def test_an_exact_tie_has_one_leader_in_the_ranking_break_even_rate_map_tornado_and_monte_carlo(client):
    # Two offers alike in price and losses tie exactly at any rates. The ranking's tie order
    # (TOC, price, bidder casefolded, offer id; domain/toc.py) puts "Alpha Works" first although
    # "beta Transformers" was entered first and has the lower id. Invented offers.
    basis_id = client.post("/api/v1/cost-bases", json=f.present_worth_basis(name="PW tie")).json()["id"]
    tender = client.post("/api/v1/tenders", json=f.tender(basis_id, reference=f"T-{basis_id}")).json()
    lot_id = tender["lots"][0]["id"]
    ids = {}
    for bidder, price, p0, pk in [("beta Transformers", 11000, 450, 4300), ("Alpha Works", 11000, 450, 4300),
                                  ("Lossy", 10000, 650, 4600)]:
        ids[bidder] = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(
            bidder=bidder, unit_price=price, no_load_loss_w=p0, load_loss_w=pk)).json()["id"]
    alpha, beta = ids["Alpha Works"], ids["beta Transformers"]
    assert beta < alpha

    # Reference: the ranking API (domain.toc.rank_offers); every tool must name its leader.
    ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"]
    assert [r["offer_id"] for r in ranking[:2]] == [alpha, beta]
    assert ranking[0]["toc_per_unit"] == ranking[1]["toc_per_unit"]

    be = client.get(f"/api/v1/lots/{lot_id}/break-even").json()
    assert be["leader_offer_id"] == alpha and be["leader_bidder"] == "Alpha Works"
    assert next(r for r in be["rows"] if r["offer_id"] == beta)["margin_now"] == 0.0

    rate_map = client.post(f"/api/v1/lots/{lot_id}/rate-map", json={"steps": 21}).json()
    assert rate_map["leader_offer_id"] == alpha
    assert all(beta not in line for line in rate_map["winners"])  # tied everywhere, first nowhere

    tornado = client.post(f"/api/v1/lots/{lot_id}/tornado", json={}).json()
    assert (tornado["leader_offer_id"], tornado["runner_up_offer_id"]) == (alpha, beta)
    assert all(beta not in (r["leader_low_offer_id"], r["leader_high_offer_id"]) for r in tornado["rows"])

    # Zero spread: every draw at the basis, so the leader wins them all.
    still = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={"draws": 300, "seed": 2, "inputs": {}}).json()
    shares = {r["offer_id"]: r["win_probability"] for r in still["rows"]}
    assert still["leader_offer_id"] == alpha and shares[alpha] == 1.0 and shares[beta] == 0.0
    assert [r["offer_id"] for r in still["rows"]] == [r["offer_id"] for r in ranking]  # equal shares: ranking order
    moving = client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json={"draws": 2000, "seed": 4, "inputs": {
        "energy_price_per_kwh": {"dist": "uniform", "low": 0.02, "high": 0.3}}}).json()
    assert {r["offer_id"]: r["win_probability"] for r in moving["rows"]}[beta] == 0.0

    # The award's default offer, its record and its Monte Carlo name the same leader.
    record = client.post(f"/api/v1/lots/{lot_id}/award", json={}).json()
    assert record["awarded_offer_id"] == alpha and record["decision"]["is_lowest_toc"]
    assert record["decision"]["next_offer_id"] == beta and record["decision"]["margin_per_unit"] == 0.0
    assert record["robustness"]["monte_carlo"]["leader_offer_id"] == alpha
    assert record["robustness"]["break_even"][0]["offer_id"] in (beta, ids["Lossy"])


def test_tornado_holds_values_at_the_basis_limits_and_refusals_speak_in_the_api_units(client):
    # The limits are those of the cost basis schema (server/schemas.py PresentWorthInputs), the
    # cooling hours also at most the 8760 hours of the year the rates count.
    lot_id, _ = _lot(client, f.present_worth_basis(name="PW limits", cooling_hours_per_year=8000.0))
    body = client.post(f"/api/v1/lots/{lot_id}/tornado", json={"ranges": {
        "loss_factor": [0.2, 1.5], "discount_rate_pct": [-70, 10], "years": [0, 40]}}).json()
    rows = {r["input"]: r for r in body["rows"]}
    cooling = rows["cooling_hours_per_year"]  # by default 20 % either way: 6,400 to 9,600
    assert (cooling["low_value"], cooling["high_value"]) == (pytest.approx(6400), 8760)
    assert (cooling["low_clipped"], cooling["high_clipped"]) == (False, True)
    assert rows["loss_factor"]["high_value"] == 1.0 and rows["loss_factor"]["high_clipped"]
    discount = rows["discount_rate_pct"]
    assert discount["low_value"] > -50 and discount["low_value"] == pytest.approx(-50) and discount["low_clipped"]
    assert (rows["years"]["low_value"], rows["years"]["low_clipped"]) == (1, True)
    assert not any(rows["energy_price_per_kwh"][k] for k in ("low_clipped", "high_clipped"))

    def refusal(response):
        assert response.status_code == 422, response.text
        (item,) = response.json()["detail"]
        return item["loc"][1], item["msg"]

    assert refusal(client.post(f"/api/v1/lots/{lot_id}/tornado", json={"ranges": {"years": [20.5, 40]}})) == (
        "ranges.years.low", "must be a whole number of years")
    bad_rate = {"draws": 10, "inputs": {"discount_rate_pct": {"dist": "uniform", "low": -60, "high": 8}}}
    for path in ("monte-carlo", "monte-carlo-runs"):  # a run is refused at once, not failed later
        assert refusal(client.post(f"/api/v1/lots/{lot_id}/{path}", json=bad_rate)) == (
            "inputs.discount_rate_pct.low", "must be more than -50 %")
    too_high = {"draws": 10, "inputs": {"cooling_hours_per_year": {"dist": "triangular", "low": 7000, "mode": 8000,
                                                                    "high": 9000}}}
    assert refusal(client.post(f"/api/v1/lots/{lot_id}/monte-carlo", json=too_high)) == (
        "inputs.cooling_hours_per_year.high", "must be 8,760 or less")
    narrow = {"draws": 10, "inputs": {"discount_rate_pct": {"dist": "normal", "mean": 6, "sd": 0.1, "low": 9,
                                                             "high": 10}}}
    field, message = refusal(client.post(f"/api/v1/lots/{lot_id}/monte-carlo-runs", json=narrow))
    assert field == "inputs.discount_rate_pct" and "normal distribution" in message
