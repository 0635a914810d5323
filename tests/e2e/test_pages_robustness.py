"""How sure is the ranking: the page of break-even rates, the rate map, the tornado and Monte Carlo
runs in the background (started, polled, cancelled), and the pure helpers behind them."""

from __future__ import annotations

import html
import json
import re
import time

import pytest
from fastapi.testclient import TestClient

from server import schemas
from server.app import create_app
from server.pages.robustness_charts import offer_colours, rate_map_chart, toc_band_chart
from server.pages.robustness_views import (
    MOVED_INPUTS,
    monte_carlo_defaults,
    monte_carlo_request,
    rate_map_request,
    tornado_defaults,
    tornado_request,
)
from server.settings import Settings
from server.storage.models import JobWorker, MonteCarloRun, utcnow
from tests import factories
from tests.e2e.test_pages import API, HX, error_beside, log_in

OFFERS = [("Lean", 12000, 300, 4000), ("Lossy", 10000, 650, 4200), ("Middle", 11000, 450, 4300)]


def _text(page: str) -> str:
    """The page as words: tags dropped, entities decoded, spaces collapsed."""
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def _charts(page: str) -> list[dict]:
    return [json.loads(html.unescape(found)) for found in re.findall(r"data-chart='([^']*)'", page)]


def _series(chart: dict, series_id: str) -> dict:
    return next(s for s in chart["series"] if s.get("id") == series_id)


def _lot(client, basis: dict | None = None, offers=OFFERS) -> int:
    """A tender with one lot priced by ``basis`` (present worth unless given) and three offers."""
    body = basis or factories.present_worth_basis()
    basis_id = client.post("/api/v1/cost-bases", json=body, headers=API).json()["id"]
    created = client.post("/api/v1/tenders", json=factories.tender(basis_id, reference=f"T-{basis_id}"), headers=API)
    lot_id = created.json()["lots"][0]["id"]
    for bidder, price, p0, pk in offers:
        response = client.post(f"/api/v1/lots/{lot_id}/offers", headers=API, json=factories.offer(
            bidder=bidder, unit_price=price, no_load_loss_w=p0, load_loss_w=pk))
        assert response.status_code == 201, response.text
    return lot_id


def _wait(client, run_id: int, deadline_s: float = 60.0) -> str:
    """Poll the progress partial as htmx does until the run has stopped; return the last partial."""
    deadline = time.monotonic() + deadline_s
    while True:
        response = client.get(f"/monte-carlo-runs/{run_id}/progress", headers=HX)
        assert response.status_code == 200, response.text
        if 'hx-trigger="every 1s"' not in response.text or time.monotonic() > deadline:
            return response.text
        time.sleep(0.1)


def _mc_form(csrf: str, **overrides: str) -> dict[str, str]:
    base = {"energy_price_per_kwh": 0.08, "energy_escalation_pct": 2.0, "discount_rate_pct": 6.0, "years": 30,
            "peak_load_pu": 0.8, "load_growth_pct": 1.0, "loss_factor": 0.3, "capacity_cost_per_kw_year": 60.0}
    return monte_carlo_defaults(base) | {"csrf_token": csrf} | overrides


# --- the page -------------------------------------------------------------------------------------

def test_the_page_renders_for_any_role_and_the_lot_links_to_it(page_client):
    lot_id = _lot(page_client)
    log_in(page_client, "viewer")
    lot_page = page_client.get(f"/lots/{lot_id}").text
    assert f'href="/lots/{lot_id}/robustness">How sure is this ranking?</a>' in lot_page
    response = page_client.get(f"/lots/{lot_id}/robustness")
    assert response.status_code == 200
    page = response.text
    text = _text(page)
    for heading in ("Break-even rates", "Who wins at other rates", "One forecast at a time", "Monte Carlo"):
        assert heading in text
    assert "At the current rates Lean has the lowest total owning cost" in text
    assert re.findall(r"<script(?![^>]*\bsrc=)[^>]*>", page) == []
    assert not re.search(r"\s(on[a-z]+|style)=", page)
    # Every posting form carries the form token; the rate map and the tornado are GET forms.
    for form in re.findall(r"<form[^>]*method=\"post\"[^>]*>.*?</form>", page, re.S):
        assert 'name="csrf_token"' in form


def test_the_break_even_sentences_and_tie_rates_are_shown(page_client):
    lot_id = _lot(page_client, factories.direct_basis())
    log_in(page_client)
    body = page_client.get(f"/api/v1/lots/{lot_id}/break-even", headers=API).json()
    text = _text(page_client.get(f"/lots/{lot_id}/robustness").text)
    assert f"At the current rates {body['leader_bidder']} has the lowest" in text
    assert all(sentence in text for row in body["rows"] for sentence in row["sentences"])
    assert any("load rate" in s for row in body["rows"] for s in row["sentences"])
    for row in body["rows"]:
        gap = row["price_gap"]
        assert f"{'+' if gap > 0 else ''}{gap:,.0f} EUR" in text  # the price gap, signed
        if row["load_rate_per_kw"] is not None:
            assert f"{row['load_rate_side']} {row['load_rate_per_kw']:,.1f}" in text  # the tie rates table


def test_a_lot_without_offers_says_there_is_nothing_to_test(page_client):
    lot_id = _lot(page_client, offers=[])
    log_in(page_client)
    response = page_client.get(f"/lots/{lot_id}/robustness")
    assert response.status_code == 200
    assert "There is no ranking to test yet." in response.text
    assert "data-chart" not in response.text


# --- the rate map ---------------------------------------------------------------------------------

def test_the_rate_map_marks_the_current_basis_and_its_winner_is_the_leader(page_client):
    lot_id = _lot(page_client, factories.direct_basis())
    log_in(page_client)
    page = page_client.get(f"/lots/{lot_id}/robustness").text
    chart = _charts(page)[0]
    current = _series(chart, "current-basis")["data"]
    assert current == [[6000.0, 1500.0]]  # the direct basis's A and B
    cells = _series(chart, "winners")["data"]
    a_axis, b_axis = chart["xAxis"][0]["data"], chart["yAxis"][0]["data"]
    assert len(cells) == len(a_axis) * len(b_axis) == 60 * 60
    # The map spans a quarter to twice each rate, widened to two significant figures (375 to 370),
    # and the boxes show that range.
    assert (a_axis[0], a_axis[-1], b_axis[0], b_axis[-1]) == (1500.0, 12000.0, 370.0, 3000.0)
    assert 'id="rm-no_load_rate_max" name="no_load_rate_max" type="text" value="12000"' in page
    # The cell nearest the marker is won by the leader, coloured as the legend names it.
    col = min(range(len(a_axis)), key=lambda k: abs(a_axis[k] - 6000))
    row = min(range(len(b_axis)), key=lambda k: abs(b_axis[k] - 1500))
    piece = next(c[2] for c in cells if c[0] == col and c[1] == row)
    leader = page_client.get(f"/api/v1/lots/{lot_id}/ranking", headers=API).json()["rows"][0]["bidder"]
    legend = {p["value"]: p["label"] for p in chart["visualMap"]["pieces"]}
    assert legend[piece] == leader
    # The value axes put each rate in the middle of its cell.
    step = (a_axis[-1] - a_axis[0]) / (len(a_axis) - 1)
    assert chart["xAxis"][1]["min"] == pytest.approx(a_axis[0] - step / 2, rel=1e-3)
    assert _series(chart, "tie-lines")["data"], "three offers with crossing costs tie somewhere on the map"


def test_the_rate_map_form_redraws_in_place_and_names_a_bad_range(page_client):
    lot_id = _lot(page_client, factories.direct_basis())
    log_in(page_client)
    query = {"no_load_rate_min": "0", "no_load_rate_max": "20000", "load_rate_min": "0", "load_rate_max": "5000",
             "steps": "21"}
    partial = page_client.get(f"/lots/{lot_id}/robustness/rate-map", params=query, headers=HX)
    assert partial.status_code == 200
    assert partial.text.lstrip().startswith('<section id="rate-map"') and "<html" not in partial.text
    chart = _charts(partial.text)[0]
    assert chart["xAxis"][0]["data"][-1] == 20000.0 and len(chart["yAxis"][0]["data"]) == 21
    too_fine = page_client.get(f"/lots/{lot_id}/robustness/rate-map", params=query | {"steps": "400"})
    assert too_fine.status_code == 422
    assert error_beside(too_fine.text, "rm-steps") == "Must be 120 or less."
    bad = page_client.get(f"/lots/{lot_id}/robustness/rate-map", params=query | {"no_load_rate_max": "0"})
    assert bad.status_code == 422
    assert "<html" in bad.text  # without htmx, the whole page
    assert error_beside(bad.text, "rm-no_load_rate_max") == "Must be more than the lowest rate."
    assert "data-chart='" not in bad.text.split('id="rate-map"')[1].split("</section>")[0]


# --- the tornado ----------------------------------------------------------------------------------

def test_the_tornado_shows_its_rows_on_a_present_worth_basis(page_client):
    lot_id = _lot(page_client)
    log_in(page_client)
    api = page_client.post(f"/api/v1/lots/{lot_id}/tornado", json={}, headers=API).json()
    page = page_client.get(f"/lots/{lot_id}/robustness").text
    # The form's defaults are the service's own: the page draws what the API gives for no ranges.
    chart = _charts(page)[1]
    assert chart["yAxis"]["data"][0] == "Discount rate"
    low = _series(chart, "low")["data"]
    assert [d["value"] for d in low] == [round(r["margin_low"] - r["margin_base"]) for r in api["rows"]]
    table = page.split('class="data tornado-table"')[1].split("</table>")[0]
    assert table.count("<tr") == len(api["rows"]) + 2  # two header rows
    first = api["rows"][0]
    assert f"{first['margin_low']:,.0f}" in table and f"{first['margin_high']:,.0f}" in table
    # Moved far enough, the discount rate hands the lead to another offer, and the row says so.
    query = tornado_defaults({"energy_price_per_kwh": 0.08, "energy_escalation_pct": 2.0, "discount_rate_pct": 6.0,
                              "years": 30, "peak_load_pu": 0.8, "load_growth_pct": 1.0, "loss_factor": 0.3,
                              "capacity_cost_per_kw_year": 60.0})
    far = page_client.get(f"/lots/{lot_id}/robustness/tornado", headers=HX,
                          params=query | {"discount_rate_pct_low": "-20", "discount_rate_pct_high": "60"})
    assert far.status_code == 200 and far.text.lstrip().startswith('<section id="tornado"')
    row = far.text.split("<th scope=\"row\">Discount rate</th>")[1].split("</tr>")[0]
    assert "Leader changes" in row
    assert 'class="leader-changes"' in far.text


def test_the_tornado_names_a_bad_box_and_explains_a_direct_basis(page_client):
    lot_id = _lot(page_client)
    log_in(page_client)
    bad = page_client.get(f"/lots/{lot_id}/robustness/tornado", headers=HX,
                          params={"years_low": "20.5", "years_high": "40", "loss_factor_low": "0.4",
                                  "loss_factor_high": "", "energy_price_per_kwh_low": "x",
                                  "energy_price_per_kwh_high": "0.1"})
    assert bad.status_code == 422
    assert error_beside(bad.text, "tn-years_low") == "Must be a whole number of years, 1 or more."
    assert error_beside(bad.text, "tn-loss_factor_high") == "Fill this in, or empty both boxes of this input."
    assert error_beside(bad.text, "tn-energy_price_per_kwh_low") == "Must be a number."
    direct = _lot(page_client, factories.direct_basis(name="Direct"))
    page = page_client.get(f"/lots/{direct}/robustness").text
    message = ("This analysis moves the inputs of a present-worth cost basis; the tender's basis has none "
               "(its rates are entered or levelised).")
    tornado = page.split('id="tornado"')[1].split("</section>")[0]
    monte_carlo = page.split('id="monte-carlo"')[1].split("</section>")[0]
    assert message in html.unescape(tornado) and message in html.unescape(monte_carlo)
    assert "<form" not in tornado and "<form" not in monte_carlo



def test_the_tornado_says_which_values_it_held_at_the_basis_limits(page_client):
    # Limits of the cost basis form (server/schemas.py): cooling at most the 8760 hours of a year,
    # a loss factor at most 1. The default moves the cooling 20 % either way: 8,000 to 9,600 h.
    lot_id = _lot(page_client, factories.present_worth_basis(cooling_hours_per_year=8000.0, loss_factor=0.9))
    log_in(page_client)
    page = page_client.get(f"/lots/{lot_id}/robustness").text
    text = _text(page)
    held = text.split("Held at the limits the cost basis allows: ")[1].split(".")[0].split("; ")
    assert held == ["Loss factor capped at 1", "Responsibility factor capped at 1",
                    "Cooling in service capped at 8,760 hours a year"]
    assert "Cooling in service (held at its limit)" in _charts(page)[1]["yAxis"]["data"]
    # The form's own boxes never offer a value the basis would refuse: 0.9 + 20 % stops at 1.
    assert 'id="tn-loss_factor_high" name="loss_factor_high" type="text" value="1"' in page
    query = tornado_defaults({"energy_price_per_kwh": 0.08, "energy_escalation_pct": 2.0, "discount_rate_pct": 6.0,
                              "years": 30, "peak_load_pu": 0.8, "load_growth_pct": 1.0, "loss_factor": 0.9,
                              "capacity_cost_per_kw_year": 60.0})
    typed = page_client.get(f"/lots/{lot_id}/robustness/tornado", headers=HX,
                            params=query | {"loss_factor_high": "1.5", "discount_rate_pct_low": "-80"})
    assert typed.status_code == 200
    words = _text(typed.text)
    assert "Loss factor capped at 1" in words and "Discount rate raised to just above -50 % a year" in words
    row = typed.text.split('<th scope="row">Loss factor</th>')[1].split("</tr>")[0]
    assert "capped at the limit" in row
    tips = [d["tooltip"]["formatter"] for d in _series(_charts(typed.text)[0], "high")["data"]]
    assert any(t.startswith("Loss factor (held at its limit) at 1, capped at the highest allowed") for t in tips)


# --- Monte Carlo ----------------------------------------------------------------------------------

def test_a_run_started_from_the_page_is_polled_until_its_win_probabilities_show(page_client):
    lot_id = _lot(page_client)
    csrf = log_in(page_client, "viewer")
    started = page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX,
                               data=_mc_form(csrf, draws="3000", seed="7"))
    assert started.status_code == 200, started.text
    assert started.text.lstrip().startswith('<section id="monte-carlo"')
    run_id = int(re.search(r'<div id="mc-run"[^>]*>\s*<h3>(?:Run|Result of run) (\d+)', started.text).group(1))
    done = _wait(page_client, run_id)
    assert f"Result of run {run_id}: 3,000 draws, seed 7" in _text(done)
    api = page_client.get(f"/api/v1/monte-carlo-runs/{run_id}", headers=API).json()
    assert api["status"] == "done"
    rows = api["result"]["rows"]
    text = _text(done)
    for row in rows:
        assert f"{row['bidder']}" in text and f"{100 * row['win_probability']:,.2f}" in text
        assert f"{row['toc_p50']:,.0f}" in text and f"{row['expected_regret']:,.0f}" in text
    win_chart, band_chart = _charts(done)
    assert [d["value"] for d in _series(win_chart, "win-probability")["data"]] == [
        round(100 * r["win_probability"], 1) for r in rows]
    assert [d["value"][0] for d in _series(band_chart, "median")["data"]] == [round(r["toc_p50"]) for r in rows]
    assert "Energy price: triangular, 0.06 to 0.1, most likely 0.08 EUR/kWh" in text
    # The page shows the lot's latest run when it is opened again.
    assert f"Result of run {run_id}" in page_client.get(f"/lots/{lot_id}/robustness").text


def test_a_run_started_without_htmx_redirects_to_the_page_that_shows_it(page_client):
    lot_id = _lot(page_client)
    csrf = log_in(page_client)
    response = page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", data=_mc_form(csrf, draws="500"),
                                follow_redirects=False)
    assert response.status_code == 303
    location = response.headers["location"]
    run_id = int(re.search(r"\?run=(\d+)#monte-carlo$", location).group(1))
    _wait(page_client, run_id)
    assert f"Result of run {run_id}: 500 draws" in _text(page_client.get(location).text)
    progress = page_client.get(f"/monte-carlo-runs/{run_id}/progress", follow_redirects=False)
    assert progress.headers["location"] == location  # a browser without htmx is sent to the page


def test_a_run_can_be_cancelled_or_reports_its_final_state(page_client):
    lot_id = _lot(page_client)
    csrf = log_in(page_client)
    started = page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX,
                               data=_mc_form(csrf, draws="1000000"))
    run_id = int(re.search(r'<div id="mc-run"[^>]*>\s*<h3>(?:Run|Result of run) (\d+)', started.text).group(1))
    cancelled = page_client.post(f"/monte-carlo-runs/{run_id}/cancel", headers=HX, data={"csrf_token": csrf})
    assert cancelled.status_code == 200
    assert cancelled.text.lstrip().startswith('<div id="mc-run"')
    final = _text(_wait(page_client, run_id))
    status = page_client.get(f"/api/v1/monte-carlo-runs/{run_id}", headers=API).json()["status"]
    assert status in {"cancelled", "done"}
    assert (f"Run {run_id} was cancelled." in final) if status == "cancelled" else (f"Result of run {run_id}" in final)
    # Cancelling a finished run changes nothing and shows its final state.
    again = page_client.post(f"/monte-carlo-runs/{run_id}/cancel", headers=HX, data={"csrf_token": csrf})
    assert page_client.get(f"/api/v1/monte-carlo-runs/{run_id}", headers=API).json()["status"] == status
    assert 'hx-trigger="every 1s"' not in again.text


def test_a_run_form_without_the_token_is_refused_and_bad_boxes_are_named(page_client):
    lot_id = _lot(page_client)
    csrf = log_in(page_client)
    assert page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", data=_mc_form("")).status_code == 403
    form = _mc_form(csrf, draws="0", energy_price_per_kwh_mode="0.5", discount_rate_pct_dist="normal",
                    discount_rate_pct_sd="0", load_growth_pct_high="-5")
    bad = page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX, data=form)
    assert bad.status_code == 422
    assert error_beside(bad.text, "mc-draws") == "Must be 1 or more."
    assert error_beside(bad.text, "mc-energy_price_per_kwh_mode") == "Must lie between the low and the high value."
    assert error_beside(bad.text, "mc-discount_rate_pct_sd") == "Must be more than 0."
    assert error_beside(bad.text, "mc-load_growth_pct_high") == "Must be more than the low value."
    assert 'value="0.5"' in bad.text  # what was typed stays
    assert page_client.get(f"/lots/{lot_id}/robustness").text.count('id="mc-run"></div>') == 1  # no run stored



def test_a_run_form_names_bounds_outside_the_input_range_in_the_units_of_the_page(page_client):
    # Limits of the cost basis form (server/schemas.py): a discount rate above -50 %.
    lot_id = _lot(page_client)
    csrf = log_in(page_client)
    bad = page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX,
                           data=_mc_form(csrf, discount_rate_pct_low="-60", years_dist="uniform", years_high="120"))
    assert bad.status_code == 422
    assert error_beside(bad.text, "mc-discount_rate_pct_low") == "Must be more than -50 %."
    assert error_beside(bad.text, "mc-years_high") == "Must be 100 or less."
    # A refusal only the Monte Carlo itself makes comes back before any run starts, beside the
    # input's distribution, in words that name no internal field.
    narrow = _mc_form(csrf, loss_factor_dist="normal", loss_factor_mean="0.3", loss_factor_sd="0.001",
                      loss_factor_low="0.5", loss_factor_high="0.6")
    refused = page_client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX, data=narrow)
    assert refused.status_code == 422
    message = error_beside(refused.text, "mc-loss_factor_dist")
    assert message.startswith("Low and high keep less than 0.1 % of this normal distribution")
    assert "loss_factor" not in _text(refused.text) and "distributions[" not in _text(refused.text)
    assert page_client.get(f"/lots/{lot_id}/robustness").text.count('id="mc-run"></div>') == 1  # no run stored


@pytest.fixture
def queue_page_client(sqlite_url):
    """A page client whose app runs no job: a run stays queued until the test moves it."""
    with TestClient(create_app(Settings(database_url=sqlite_url, env="test", jobs_in_web=False))) as client:
        yield client


def _start_button(page: str) -> str:
    return re.search(r'<div class="actions" id="mc-start"[^>]*>.*?</div>', page, re.S).group(0)


def test_while_a_run_waits_or_runs_the_page_shows_where_it_is_and_start_is_disabled(queue_page_client):
    client = queue_page_client
    lot_id = _lot(client)
    csrf = log_in(client)  # tester
    started = client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX, data=_mc_form(csrf, draws="1000"))
    assert started.status_code == 200
    run_id = int(re.search(r"<h3>Run (\d+) is waiting for a worker</h3>", started.text).group(1))
    assert "It is next in the queue." in _text(started.text) and 'hx-trigger="every 1s"' in started.text
    assert "disabled" in _start_button(started.text)
    assert "disabled" in _start_button(client.get(f"/lots/{lot_id}/robustness").text)  # without htmx too

    # Running on a worker that is alive: its progress in steps, and Cancel for whoever started it.
    with client.app.state.db.session() as session:
        session.add(JobWorker(id="w", host="another-host", pid=1, started_at=utcnow(), heartbeat_at=utcnow()))
        job = session.get(MonteCarloRun, run_id).job
        job.status, job.worker_id, job.progress = "running", "w", 0.35
        session.commit()
    polled = client.get(f"/monte-carlo-runs/{run_id}/progress", headers=HX).text
    assert f"Run {run_id} is running" in polled and "35 % of 1,000 draws." in _text(polled)
    assert 'value="35.0"' in polled and "Cancel</button>" in polled and 'id="mc-start"' not in polled
    other = TestClient(client.app)
    log_in(other, "viewer")  # neither the owner nor an admin: no Cancel to press
    assert "Cancel</button>" not in other.get(f"/monte-carlo-runs/{run_id}/progress", headers=HX).text

    # Once it stops, the answer carries the start button again, enabled.
    cancelled = client.post(f"/monte-carlo-runs/{run_id}/cancel", headers=HX, data={"csrf_token": csrf})
    assert cancelled.status_code == 200 and 'hx-trigger="every 1s"' in cancelled.text  # stops at its next check
    with client.app.state.db.session() as session:
        job = session.get(MonteCarloRun, run_id).job
        job.status, job.message = "cancelled", "Cancelled on request."
        session.commit()
    stopped = client.get(f"/monte-carlo-runs/{run_id}/progress", headers=HX).text
    assert f"Run {run_id} was cancelled." in _text(stopped)
    button = _start_button(stopped)
    assert 'hx-swap-oob="true"' in button and "disabled" not in button


def test_a_queued_run_cancelled_from_the_page_by_its_owner_stops_at_once(queue_page_client):
    client = queue_page_client
    lot_id = _lot(client)
    csrf = log_in(client, "viewer")
    started = client.post(f"/lots/{lot_id}/robustness/monte-carlo", headers=HX, data=_mc_form(csrf, draws="500"))
    run_id = int(re.search(r"<h3>Run (\d+) is waiting", started.text).group(1))
    other = TestClient(client.app)
    other_csrf = log_in(other, "buyer")
    refused = other.post(f"/monte-carlo-runs/{run_id}/cancel", headers=HX, data={"csrf_token": other_csrf})
    assert refused.status_code == 403
    cancelled = client.post(f"/monte-carlo-runs/{run_id}/cancel", headers=HX, data={"csrf_token": csrf})
    assert f"Run {run_id} was cancelled." in _text(cancelled.text)
    assert "disabled" not in _start_button(cancelled.text)


# --- pure helpers ---------------------------------------------------------------------------------

def test_the_forms_send_only_what_each_distribution_reads():
    base = {name: 1.0 for name in MOVED_INPUTS} | {"years": 30, "discount_rate_pct": 6.0}
    form = monte_carlo_defaults(base)
    assert form["years_low"] == "24" and form["years_high"] == "36"  # 20 % either way, whole years
    request, errors = monte_carlo_request(form)
    assert errors == {}
    assert set(request.inputs) == {"energy_price_per_kwh", "discount_rate_pct", "load_growth_pct"}
    assert request.inputs["energy_price_per_kwh"].model_dump(exclude_none=True) == {
        "dist": "triangular", "low": 0.75, "mode": 1.0, "high": 1.25}
    assert request.inputs["discount_rate_pct"].model_dump(exclude_none=True) == {
        "dist": "uniform", "low": 4.0, "high": 8.0}
    ranges, errors = tornado_request(tornado_defaults(base))
    assert errors == {} and ranges.ranges["discount_rate_pct"] == [4.0, 8.0] and ranges.ranges["years"] == [24.0, 36.0]
    assert tornado_request({"years_low": "", "years_high": ""})[0].ranges == {}  # both empty: the service's default
    request, errors = rate_map_request({"no_load_rate_min": "10", "no_load_rate_max": "5"})
    assert request is None and errors == {"no_load_rate_max": "must be more than the lowest rate"}


def test_the_rate_map_chart_refuses_more_cells_than_a_page_should_carry():
    rates = [float(k) for k in range(121)]
    rate_map = schemas.RateMapOut(lot_id=1, no_load_rates=rates, load_rates=rates, winners=[[1] * 121] * 121,
                                  offers={1: "Only"}, tie_lines=[], current={"no_load_rate_per_kw": 5.0,
                                                                             "load_rate_per_kw": 5.0},
                                  leader_offer_id=1)
    with pytest.raises(ValueError, match="more than 14400 cells"):
        rate_map_chart(rate_map, "EUR")


def test_the_band_chart_stacks_each_band_on_its_5th_percentile_with_one_colour_per_offer():
    rows = [schemas.MonteCarloRowOut(offer_id=7, bidder="B", win_probability=0.7, toc_p5=100.4, toc_p50=120.0,
                                     toc_p95=150.6, toc_mean=121.0, expected_regret=3.0),
            schemas.MonteCarloRowOut(offer_id=3, bidder="A", win_probability=0.3, toc_p5=110.0, toc_p50=130.0,
                                     toc_p95=160.0, toc_mean=131.0, expected_regret=9.0)]
    chart = toc_band_chart(schemas.MonteCarloOut(lot_id=1, draws=10, seed=1, leader_offer_id=7, rows=rows), "EUR")
    assert _series(chart, "to-p5")["data"] == [100, 110]
    assert [d["value"] for d in _series(chart, "band")["data"]] == [51, 50]  # 151 - 100, 160 - 110
    colours = offer_colours([7, 3])
    assert colours[3] != colours[7]
    assert [d["itemStyle"]["color"] for d in _series(chart, "band")["data"]] == [colours[7], colours[3]]
    assert chart["xAxis"]["min"] < 100 and chart["xAxis"]["max"] > 160
