"""The planner's pages: load shapes (typical days, a metered year, the figures and charts), a
lot's own loading, cost basis revisions compared and previewed, their workings, moving a
tender to another revision, and the new present-worth inputs in the editor."""

from __future__ import annotations

import csv
import html
import io
import json
import re
from datetime import datetime, timedelta

import numpy as np
import pytest

from server.pages.shape_charts import (
    daily_curves_chart,
    downsample_duration_curve,
    duration_curve_chart,
    monthly_average_days,
)
from server.pages.shape_form import daily_defaults, problem_rows
from tests import factories
from tests.e2e.test_pages import API, HX, api_offer, error_beside, log_in

YEAR = 2026  # 8760 hours


def _text(page: str) -> str:
    """The page as words: tags dropped, entities decoded, spaces collapsed."""
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", "", page)))


def _charts(page: str) -> list[dict]:
    return [json.loads(html.unescape(found)) for found in re.findall(r"data-chart='([^']*)'", page)]


def _shapes(client) -> list[dict]:
    return client.get("/api/v1/load-shapes", headers=API).json()


def _daily_form(csrf: str, **overrides: str) -> dict[str, object]:
    """The typical-days form as first shown, named, with the form token."""
    form: dict[str, object] = dict(daily_defaults()) | {"name": "Suburban feeder", "csrf_token": csrf}
    return form | overrides


def _year_csv(values, header=("timestamp", "kva")) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(header)
    for k, value in enumerate(values):
        writer.writerow([(datetime(YEAR, 1, 1) + timedelta(hours=k)).strftime("%Y-%m-%d %H:%M"), value])
    return out.getvalue().encode()


def _year_values() -> np.ndarray:
    hours = np.arange(8760)
    return np.round(200 + 120 * np.sin((hours % 24 - 6) / 24 * 2 * np.pi).clip(0) + 30 * np.cos(hours / 8760 * 2 * np.pi), 3)


def _api_shape(client, name: str = "Metered feeder", values=None) -> dict:
    content = _year_csv(_year_values() if values is None else values)
    response = client.post("/api/v1/load-shapes/import", data={"name": name}, headers=API,
                           files={"file": ("year.csv", content, "text/csv")})
    assert response.status_code == 201, response.text
    return response.json()


# --- load shapes ---------------------------------------------------------------------------------

def test_the_load_shape_pages_render_for_every_role(page_client):
    shape = _api_shape(page_client)
    log_in(page_client, "viewer")
    listing = page_client.get("/load-shapes")
    assert listing.status_code == 200
    assert 'aria-current="page">Load shapes' in listing.text
    assert "Metered feeder" in listing.text and f"{shape['loss_factor']:.3f}" in listing.text
    assert "New load shape from typical days" not in listing.text  # a viewer reads, a planner writes
    assert "Adding a load shape needs the planner role." in listing.text
    detail = page_client.get(f"/load-shapes/{shape['id']}")
    assert detail.status_code == 200
    assert f"{shape['loss_factor']:.3f}" in detail.text and "hourly year, 2026" in detail.text
    day_chart, duration_chart = _charts(detail.text)
    assert [s["name"] for s in day_chart["series"]][:2] == ["Jan", "Feb"] and len(day_chart["series"]) == 12
    points = duration_chart["series"][0]["data"]
    assert 300 <= len(points) <= 400 and points[0] == [1, pytest.approx(shape["peak"])] and points[-1][0] == 8760
    for page in (listing.text, detail.text):
        assert re.findall(r"<script(?![^>]*\bsrc=)[^>]*>", page) == []
        assert not re.search(r"\s(on[a-z]+|style)=", page)


def test_a_daily_shape_made_through_the_form_shows_its_loss_factor(page_client):
    csrf = log_in(page_client, "planner")
    form = page_client.get("/load-shapes").text
    assert 'name="s0_weekday_23"' in form and 'name="s1_weekend_0"' in form
    assert form.count('type="checkbox" name="s0_months"') == 12
    response = page_client.post("/load-shapes", data=_daily_form(csrf), follow_redirects=False)
    assert response.status_code == 303, response.text
    stored = _shapes(page_client)
    assert [s["name"] for s in stored] == ["Suburban feeder"] and stored[0]["kind"] == "daily"
    # The same curves as the form's defaults, laid on 2026 by hand.
    defaults = daily_defaults()
    by_hand = []
    for day in range(365):
        moment = datetime(YEAR, 1, 1) + timedelta(days=day)
        season = 0 if str(moment.month) in defaults["s0_months"] else 1
        kind = "weekend" if moment.weekday() >= 5 else "weekday"
        by_hand.extend(float(defaults[f"s{season}_{kind}_{h}"]) for h in range(24))
    values = np.array(by_hand)
    assert stored[0]["loss_factor"] == pytest.approx(np.mean(values**2) / values.max() ** 2, rel=1e-12)
    page = page_client.get(response.headers["location"]).text
    assert f'data-figure="loss_factor">{stored[0]["loss_factor"]:.3f}<' in page
    assert "Winter: Jan, Feb, Mar, Oct, Nov, Dec" in _text(page)
    day_chart = _charts(page)[0]
    assert [s["name"] for s in day_chart["series"]] == [
        "Winter, weekday", "Winter, weekend", "Summer, weekday", "Summer, weekend",
    ]
    assert day_chart["series"][0]["data"][18] == 1.0


def test_one_season_for_the_whole_year_leaves_the_other_out(page_client):
    csrf = log_in(page_client, "planner")
    form = _daily_form(csrf, s0_months=[str(m) for m in range(1, 13)], s1_months=[])
    response = page_client.post("/load-shapes", data=form, follow_redirects=False)
    assert response.status_code == 303, response.text
    shape = _shapes(page_client)[0]
    detail = page_client.get(f"/load-shapes/{shape['id']}").text
    assert len(_charts(detail)[0]["series"]) == 2


def test_a_bad_daily_form_names_each_box_and_stores_nothing(page_client):
    csrf = log_in(page_client, "planner")
    form = _daily_form(csrf, name="", s1_weekend_5="-0.2", s0_weekday_7="lots")
    response = page_client.post("/load-shapes", data=form, headers=HX)
    assert response.status_code == 422
    assert response.text.lstrip().startswith('<section id="new-daily-shape"')
    assert error_beside(response.text, "daily-name") == "Fill this in."
    problems = _text(response.text[response.text.index('id="daily-cell-problems"'):])
    assert "Winter, weekday, 07:00: must be a number" in problems
    assert "Summer, weekend, 05:00: must be 0 or more" in problems
    assert re.search(r'id="daily-s1_weekend_5"[^>]*aria-invalid="true"', response.text)
    assert 'value="lots"' in response.text  # what was typed stays
    # A month in two seasons is named beside the second season's months.
    twice = _daily_form(csrf, s1_months=["1", "4", "5", "6", "7", "8", "9"])
    response = page_client.post("/load-shapes", data=twice, headers=HX)
    assert response.status_code == 422
    assert "Month 1 is in two seasons." in _text(response.text)
    assert _shapes(page_client) == []


def test_importing_a_metered_year_through_the_page(page_client):
    csrf = log_in(page_client, "planner")
    values = _year_values()
    response = page_client.post(
        "/load-shapes/import", data={"csrf_token": csrf, "name": "Substation 14", "unit": "kva", "fill_gaps_up_to_hours": "0"},
        files={"file": ("substation.csv", _year_csv(values), "text/csv")}, headers=HX, follow_redirects=False,
    )
    assert response.status_code == 200, response.text
    shape = _shapes(page_client)[0]
    assert response.headers["HX-Redirect"] == f"/load-shapes/{shape['id']}"
    assert shape["loss_factor"] == pytest.approx(np.mean(values**2) / values.max() ** 2, rel=1e-12)
    page = page_client.get(f"/load-shapes/{shape['id']}").text
    assert "substation.csv" in page and "Lots priced with this shape" in page


def test_a_bad_file_shows_its_rows_and_stores_nothing(page_client):
    csrf = log_in(page_client, "planner")
    values = [*_year_values()]
    values[100], values[2000], values[10] = -5.0, -1.0, "n/a"
    response = page_client.post(
        "/load-shapes/import", data={"csrf_token": csrf, "name": "Broken", "unit": "kva", "fill_gaps_up_to_hours": "0"},
        files={"file": ("broken.csv", _year_csv(values), "text/csv")}, headers=HX,
    )
    assert response.status_code == 422
    assert response.text.lstrip().startswith('<section id="import-shape"')
    refusal = response.text[response.text.index('id="import-refusal"'):response.text.index("</table>")]
    rows = {_text(r).strip() for r in re.findall(r'<td class="problem-rows">(.*?)</td>', refusal)}
    assert rows == {"rows 102 and 2002", "row 12"}
    words = _text(refusal)
    assert "Negative load." in words and "Not a number." in words and "broken.csv" in words
    assert "Choose the file again" in response.text and 'value="Broken"' in response.text
    assert _shapes(page_client) == []
    # No file at all is named beside the file box; a plain post gets the whole page.
    response = page_client.post("/load-shapes/import", data={"csrf_token": csrf, "name": "Nothing", "unit": "kva"})
    assert response.status_code == 422 and "<html" in response.text
    assert error_beside(response.text, "import-file") == "Choose a CSV or XLSX file."


def test_the_import_form_reports_progress_from_a_static_script(page_client):
    log_in(page_client, "planner")
    page = page_client.get("/load-shapes").text
    assert '<script src="/static/js/load-shapes.js" defer></script>' in page
    assert 'enctype="multipart/form-data"' in page and 'data-progress-box="import-progress"' in page
    script = page_client.get("/static/js/load-shapes.js").text
    assert "htmx:xhr:progress" in script


def test_problem_rows_put_the_rows_in_their_own_column():
    rows = problem_rows([
        {"rows": [7, 8], "column": "unit", "message": "mixed units: most rows are 'kva' (rows 7 and 8)"},
        {"rows": [], "column": None, "message": "the header needs exactly one load column"},
    ])
    assert [(r.rows, r.column, r.message) for r in rows] == [
        ("rows 7 and 8", "unit", "mixed units: most rows are 'kva'"),
        ("\u2014", "\u2014", "the header needs exactly one load column"),
    ]


def test_the_chart_options_are_plain_data():
    curve = sorted(np.linspace(0, 1, 8760), reverse=True)
    points = downsample_duration_curve(curve)
    assert len(points) == 400 and points[0] == [1, 1.0] and points[-1] == [8760, 0.0]
    assert [p[0] for p in points] == sorted(p[0] for p in points)
    assert downsample_duration_curve([3.0, 2.0]) == [[1, 3.0], [2, 2.0]]
    flat = monthly_average_days([1.0] * 8760, YEAR)
    assert len(flat) == 12 and all(day == [1.0] * 24 for day in flat)
    ramp = monthly_average_days([float(h % 24) for h in range(8760)], YEAR)
    assert ramp[6] == [float(h) for h in range(24)]
    options = daily_curves_chart([{"name": "All", "months": list(range(1, 13)), "weekday": [1] * 24, "weekend": [0.5] * 24}])
    assert json.loads(json.dumps(options)) == options
    assert options["series"][1]["lineStyle"]["type"] == "dashed"
    # Each hour's value holds for the whole hour: the last step is drawn to 24:00.
    assert options["xAxis"]["data"][-1] == "24:00" and options["series"][0]["data"] == [1] * 25
    assert duration_curve_chart(curve, "kva")["yAxis"]["name"] == "Load (kVA)"


# --- the loading of lots ---------------------------------------------------------------------------

def _present_worth_tender(client, lots=None) -> tuple[int, dict]:
    basis = client.post("/api/v1/cost-bases", json=factories.present_worth_basis(), headers=API).json()
    tender = client.post("/api/v1/tenders", json=factories.tender(basis["id"], lots=lots or [factories.lot()]),
                         headers=API).json()
    return basis["id"], tender


def test_a_lot_added_with_its_loading_is_priced_with_it(page_client):
    shape = _api_shape(page_client)
    _, tender = _present_worth_tender(page_client)
    csrf = log_in(page_client, "buyer")
    page = page_client.get(f"/tenders/{tender['id']}").text
    assert f'<option value="{shape["id"]}">Metered feeder (loss factor {shape["loss_factor"]:.3f})</option>' in page
    form = {"csrf_token": csrf, "name": "Houses", "rating_kva": "250", "phases": "3", "hv_kv": "20", "lv_kv": "0.4",
            "frequency_hz": "50", "insulation": "liquid", "quantity": "5", "load_shape_id": str(shape["id"]),
            "peak_load_pu": "0.9", "load_growth_pct": "2"}
    response = page_client.post(f"/tenders/{tender['id']}/lots", data=form, headers=HX)
    assert response.status_code == 200, response.text
    lot = page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["lots"][1]
    assert (lot["load_shape_id"], lot["peak_load_pu"], lot["load_growth_pct"]) == (shape["id"], 0.9, 2.0)
    # The lots now differ in loading, so the table says which lot is priced how.
    assert "<th scope=\"col\">Loading</th>" in response.text
    cells = re.findall(r'<td class="loading-cell">(.*?)</td>', response.text, re.S)
    assert "Cost basis" in _text(cells[0]) and "Metered feeder" in _text(cells[1])
    lot_page = page_client.get(f"/lots/{lot['id']}").text
    used = re.search(r'<p class="loading-used"[^>]*>(.*?)</p>', lot_page, re.S).group(1)
    used = _text(used).strip()
    assert used.startswith("Loading: this lot's own, load shape Metered feeder · loss factor")
    assert "This lot's own loading: loss factor" in used and "'Metered feeder'" in used


def test_lots_on_the_same_loading_show_no_loading_column(page_client):
    _, tender = _present_worth_tender(page_client, lots=[factories.lot(name="One"), factories.lot(name="Two")])
    log_in(page_client, "viewer")
    page = page_client.get(f"/tenders/{tender['id']}").text
    assert 'class="loading-cell"' not in page


def test_setting_the_loading_on_the_lot_page(page_client):
    shape = _api_shape(page_client)
    _, tender = _present_worth_tender(page_client)
    lot_id = tender["lots"][0]["id"]
    api_offer(page_client, lot_id)
    before = page_client.get(f"/api/v1/lots/{lot_id}/ranking", headers=API).json()
    csrf = log_in(page_client, "buyer")
    page = page_client.get(f"/lots/{lot_id}").text
    assert "Loading: from the cost basis" in _text(page)
    form = {"csrf_token": csrf, "version": "1", "load_shape_id": str(shape["id"]), "peak_load_pu": "1.1",
            "load_growth_pct": ""}
    saved = page_client.post(f"/lots/{lot_id}/loading", data=form, headers=HX)
    assert saved.status_code == 200, saved.text
    assert saved.text.lstrip().startswith('<div id="lot-loading"')
    assert saved.headers["HX-Trigger"] == "ranking-changed"
    assert "Metered feeder" in saved.text and "1.1 pu" in saved.text
    after = page_client.get(f"/api/v1/lots/{lot_id}/ranking", headers=API).json()
    assert after["loading"]["source"] == "lot" and after["load_rate_per_kw"] != before["load_rate_per_kw"]
    ranking = page_client.get(f"/lots/{lot_id}/ranking", headers=HX).text
    assert "Metered feeder" in _text(ranking) and after["loading"]["note"] in html.unescape(ranking)
    # A stale version saves nothing; a bad value is named beside its box.
    stale = page_client.post(f"/lots/{lot_id}/loading", data=form | {"peak_load_pu": "0.5"}, headers=HX)
    assert stale.status_code == 409 and "Someone else changed this lot" in stale.text
    bad = page_client.post(f"/lots/{lot_id}/loading", data=form | {"version": "2", "peak_load_pu": "-1"}, headers=HX)
    assert bad.status_code == 422
    assert error_beside(bad.text, "loading-peak_load_pu") == "Must be 0 or more."
    # Empty boxes give the lot back the basis's loading.
    cleared = page_client.post(f"/lots/{lot_id}/loading", data={"csrf_token": csrf, "version": "2", "load_shape_id": "",
                                                                "peak_load_pu": "", "load_growth_pct": ""})
    assert cleared.status_code == 200  # followed to the lot page
    assert page_client.get(f"/api/v1/lots/{lot_id}/ranking", headers=API).json()["loading"]["source"] == "cost basis"


# --- revisions -------------------------------------------------------------------------------------

def _sensitive_and_stable(client) -> tuple[int, dict, int, int]:
    """A direct basis, one tender with a lot whose leader changes when A falls and one that
    keeps its order, and revision 2 with the lower A (as in the API test)."""
    basis = client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()
    lots = [factories.lot(name="Sensitive"), factories.lot(name="Stable")]
    tender = client.post("/api/v1/tenders", json=factories.tender(basis["id"], lots=lots), headers=API).json()
    sensitive, stable = (lot["id"] for lot in tender["lots"])
    api_offer(client, sensitive, bidder="Lean", unit_price=12000, no_load_loss_w=300)
    api_offer(client, sensitive, bidder="Lossy", unit_price=11000, no_load_loss_w=600)
    api_offer(client, stable, bidder="Good", unit_price=10000, no_load_loss_w=300)
    api_offer(client, stable, bidder="Bad", unit_price=12000, no_load_loss_w=600)
    revised = client.patch(f"/api/v1/cost-bases/{basis['id']}", json=factories.revision(1, no_load_rate_per_kw=1000),
                           headers=API)
    assert revised.status_code == 200, revised.text
    return basis["id"], tender, sensitive, stable


def test_the_revisions_list_who_and_when_and_links_each_revision(page_client):
    basis_id, _, _, _ = _sensitive_and_stable(page_client)
    log_in(page_client, "viewer")
    page = page_client.get(f"/cost-bases/{basis_id}").text
    table = page[page.index('id="revisions"'):]
    assert len(re.findall(r"<td>tester</td>", table)) == 2  # created_by of both revisions
    for revision in (1, 2):
        assert f'href="/cost-bases/{basis_id}/revisions/{revision}/workings"' in table
        assert f'hx-get="/cost-bases/{basis_id}/revisions/{revision}/preview"' in table
    assert f'action="/cost-bases/{basis_id}/revisions/compare"' in table


def test_comparing_two_revisions_shows_the_changed_field(page_client):
    basis_id, _, _, _ = _sensitive_and_stable(page_client)
    log_in(page_client, "viewer")
    partial = page_client.get(f"/cost-bases/{basis_id}/revisions/compare", params={"revision": 2, "against": 1},
                              headers=HX)
    assert partial.status_code == 200
    assert "<html" not in partial.text
    rows = re.findall(r'<tr data-field="([^"]+)">(.*?)</tr>', partial.text, re.S)
    assert [field for field, _ in rows] == ["no_load_rate_per_kw"]  # an input of a direct basis, listed once
    row = _text(rows[0][1])
    assert "A, no-load loss rate" in row and "6,000.0" in row and "1,000.0" in row and "\u22125,000.0 (\u221283.3 %)" in row
    # Without script the form's answer is a page of its own; the same revision twice differs in nothing.
    page = page_client.get(f"/cost-bases/{basis_id}/revisions/compare", params={"revision": 1, "against": 1})
    assert page.status_code == 200 and "<html" in page.text
    assert "These two revisions have the same method, inputs and rates." in page.text
    wrong = page_client.get(f"/cost-bases/{basis_id}/revisions/compare", params={"revision": 9, "against": 1})
    assert wrong.status_code == 422 and "Choose two of this basis's revisions" in wrong.text


def test_comparing_present_worth_revisions_lists_inputs_then_rates(page_client):
    basis = page_client.post("/api/v1/cost-bases", json=factories.present_worth_basis(), headers=API).json()
    page_client.patch(f"/api/v1/cost-bases/{basis['id']}", json=factories.revision(1, loss_factor=0.4), headers=API)
    log_in(page_client, "viewer")
    partial = page_client.get(f"/cost-bases/{basis['id']}/revisions/compare", headers=HX).text
    fields = re.findall(r'<tr data-field="([^"]+)">', partial)
    assert fields == ["loss_factor", "load_rate_per_kw"]
    assert "The rates that result" in partial


def test_the_preview_highlights_exactly_the_lots_whose_order_changes(page_client):
    basis_id, _, sensitive, stable = _sensitive_and_stable(page_client)
    log_in(page_client, "viewer")
    partial = page_client.get(f"/cost-bases/{basis_id}/revisions/2/preview", headers=HX)
    assert partial.status_code == 200 and "<html" not in partial.text
    marked = re.findall(r'<tbody class="preview-lot preview-lot--changed" data-lot-id="(\d+)"', partial.text)
    assert marked == [str(sensitive)]
    unmarked = re.findall(r'<tbody class="preview-lot" data-lot-id="(\d+)"', partial.text)
    assert unmarked == [str(stable)]
    words = _text(partial.text)
    assert "1 of 2 open lots would change order, 1 of them with a new leader." in words
    lean = re.search(r"Lean</th>(.*?)</tr>", partial.text, re.S).group(1)
    assert [_text(c).strip() for c in re.findall(r"<td[^>]*>(.*?)</td>", lean, re.S)] == [
        "1", "2 \u25bc", "20,700", "19,200", "-1,500",
    ]
    page = page_client.get(f"/cost-bases/{basis_id}/revisions/2/preview")
    assert "<html" in page.text and "What revision 2 would change" in page.text


def test_the_workings_page_shows_the_terms_and_the_year_table(page_client):
    path = [0.08, 0.085, 0.09, 0.095, 0.10]
    body = factories.present_worth_basis(years=5, energy_price_path_per_kwh=path, carbon_price_per_t=80.0,
                                         emission_factor_t_per_mwh=0.25)
    basis = page_client.post("/api/v1/cost-bases", json=body, headers=API).json()
    work = page_client.get(f"/api/v1/cost-bases/{basis['id']}/revisions/1/workings", headers=API).json()
    log_in(page_client, "viewer")
    page = page_client.get(f"/cost-bases/{basis['id']}/revisions/1/workings")
    assert page.status_code == 200
    words = _text(page.text)
    assert "How these rates were made" in words
    for line in work["conventions"]:
        assert html.unescape(line) in words
    start = page.text.index('class="data terms-table"')
    terms = page.text[start:page.text.index("</table>", start)]
    assert terms.count('<code class="formula">') == 9
    assert "\u03a3 carbon \u00d7 hours / (1+i)^t" in html.unescape(terms)
    carbon_a = next(t["value_per_kw"] for t in work["terms"] if (t["rate"], t["component"]) == ("A", "carbon"))
    assert f"{carbon_a:,.1f}" in terms
    assert f"{basis['no_load_rate_per_kw']:,.1f}" in terms  # A as the sum of its terms
    year_table = page.text[page.text.index('class="data year-table"'):]
    body_rows = re.findall(r"<tr>\s*<th scope=\"row\" class=\"num\">(\d+)</th>", year_table)
    assert body_rows == ["1", "2", "3", "4", "5"]
    assert "0.0950" in year_table  # the price path's fourth year, right-aligned in a num cell
    assert 'class="table-scroll"' in page.text
    assert f'href="/api/v1/cost-bases/{basis["id"]}/revisions/1/workings.csv"' in page.text
    carbon = re.search(r'<tr data-input="carbon_price_per_t">(.*?)</tr>', page.text, re.S).group(1)
    assert [_text(c).strip() for c in re.findall(r"<t[hd][^>]*>(.*?)</t[hd]>", carbon, re.S)] == [
        "Carbon price", "80", "EUR/t CO\u2082"]
    assert "not used: the price path replaces it" in words


def test_the_workings_of_direct_rates_say_they_were_entered(page_client):
    basis = page_client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()
    log_in(page_client, "viewer")
    page = page_client.get(f"/cost-bases/{basis['id']}/revisions/1/workings").text
    assert "The rates were entered as published; nothing is derived." in page
    assert 'class="data year-table"' not in page


def test_moving_a_tender_to_another_revision_is_audited(page_client):
    basis_id, tender, _, _ = _sensitive_and_stable(page_client)
    csrf = log_in(page_client, "buyer")
    page = page_client.get(f"/tenders/{tender['id']}").text
    move = page[page.index('id="revision-move"'):]
    assert "the latest is revision 2" in _text(move)
    assert f'href="/cost-bases/{basis_id}/revisions/2/preview"' in move
    response = page_client.post(f"/tenders/{tender['id']}/revision",
                                data={"csrf_token": csrf, "version": "1", "cost_basis_revision": "2"},
                                follow_redirects=False)
    assert response.status_code == 303, response.text
    assert page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["cost_basis_revision"] == 2
    events = page_client.get("/api/v1/audit", params={"object_type": "tender", "object_id": tender["id"]},
                             headers=API).json()
    assert events[0]["action"] == "update" and events[0]["actor"] == "buyer"
    assert "cost_basis_revision_id" in events[0]["after"]
    # A stale version moves nothing.
    stale = page_client.post(f"/tenders/{tender['id']}/revision",
                             data={"csrf_token": csrf, "version": "1", "cost_basis_revision": "1"}, headers=HX)
    assert stale.status_code == 409 and "changed by someone else" in stale.text
    assert stale.text.lstrip().startswith('<section id="revision-move"')
    assert page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["cost_basis_revision"] == 2


def test_an_awarded_lot_keeps_its_revision_when_the_tender_moves(page_client):
    basis_id, tender, sensitive, stable = _sensitive_and_stable(page_client)
    csrf = log_in(page_client, "approver")
    awarded = page_client.post(f"/lots/{sensitive}/award", data={"csrf_token": csrf, "note": ""}, follow_redirects=False)
    assert awarded.status_code == 303
    # The awarded lot is left out of the preview.
    preview = page_client.get(f"/cost-bases/{basis_id}/revisions/2/preview", headers=HX).text
    assert f'data-lot-id="{sensitive}"' not in preview
    csrf = log_in(page_client, "buyer")
    before = _text(page_client.get(f"/tenders/{tender['id']}").text)
    assert "Sensitive stands awarded: it keeps revision 1" in before
    version = page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["version"]
    response = page_client.post(f"/tenders/{tender['id']}/revision", follow_redirects=False,
                                data={"csrf_token": csrf, "version": str(version), "cost_basis_revision": "2"})
    assert response.status_code == 303
    lots = {lot["id"]: lot for lot in page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["lots"]}
    assert lots[sensitive]["priced_on_revision"] == 1 and lots[sensitive]["kept_by_award"]
    assert lots[stable]["priced_on_revision"] == 2 and not lots[stable]["kept_by_award"]
    assert page_client.get(f"/api/v1/lots/{sensitive}/ranking", headers=API).json()["cost_basis_revision"] == 1
    assert page_client.get(f"/api/v1/lots/{stable}/ranking", headers=API).json()["cost_basis_revision"] == 2
    after = _text(page_client.get(f"/tenders/{tender['id']}").text)
    assert "Sensitive stands awarded: it keeps revision 1" in after


# --- the new present-worth inputs --------------------------------------------------------------------

def test_the_price_path_and_carbon_inputs_round_trip(page_client):
    basis = page_client.post("/api/v1/cost-bases", json=factories.present_worth_basis(years=4), headers=API).json()
    csrf = log_in(page_client, "planner")
    form = {k: str(v) for k, v in factories.present_worth_basis(years=4).items()} | {
        "csrf_token": csrf, "version": "1", "energy_price_path_per_kwh": "0.08\n0.085, 0.09\n0.095",
        "carbon_price_per_t": "80", "emission_factor_t_per_mwh": "0.25", "change_reason": "Price path and carbon",
    }
    preview = page_client.post("/cost-bases/preview", data=form, headers=HX)
    assert "Energy price path: 4 prices for an evaluation period of 4 years, one for each year." in _text(preview.text)
    saved = page_client.post(f"/cost-bases/{basis['id']}", data=form, headers=HX)
    assert saved.status_code == 200, saved.text
    stored = page_client.get(f"/api/v1/cost-bases/{basis['id']}", headers=API).json()
    assert stored["revision"] == 2
    assert stored["inputs"]["energy_price_path_per_kwh"] == [0.08, 0.085, 0.09, 0.095]
    assert stored["inputs"]["carbon_price_per_t"] == 80 and stored["inputs"]["emission_factor_t_per_mwh"] == 0.25
    page = page_client.get(f"/cost-bases/{basis['id']}").text
    box = re.search(r'<textarea id="basis-energy_price_path_per_kwh"[^>]*>(.*?)</textarea>', page, re.S)
    assert box and box.group(1) == "0.08\n0.085\n0.09\n0.095"
    assert re.search(r'name="carbon_price_per_t" type="text" value="80"', page)
    assert re.search(r'name="emission_factor_t_per_mwh" type="text" value="0.25"', page)
    # A path shorter than the period is named in the live preview and refused on save.
    short = form | {"energy_price_path_per_kwh": "0.08, 0.09", "version": str(stored["version"])}
    preview = page_client.post("/cost-bases/preview", data=short, headers=HX)
    assert "2 prices for an evaluation period of 4 years; it needs one for each year." in _text(preview.text)
    refused = page_client.post(f"/cost-bases/{basis['id']}", data=short, headers=HX)
    assert refused.status_code == 422
    assert error_beside(refused.text, "basis-energy_price_path_per_kwh") == "Needs one price for each of the 4 years."
    assert page_client.get(f"/api/v1/cost-bases/{basis['id']}", headers=API).json()["revision"] == 2


def test_the_fixed_charge_rate_method_takes_carbon_too(page_client):
    log_in(page_client, "planner")
    response = page_client.get("/cost-bases", params={"method": "fixed_charge_rate"}, headers=HX)
    assert 'name="carbon_price_per_t"' in response.text and 'name="emission_factor_t_per_mwh"' in response.text
    assert "Grid emission factor" in response.text


# --- warnings beside the inputs and the reason for each revision ----------------------------------------

def test_the_revision_list_and_the_comparison_show_why_each_revision_was_made(page_client):
    basis_id, _, _, _ = _sensitive_and_stable(page_client)
    log_in(page_client, "viewer")
    page = page_client.get(f"/cost-bases/{basis_id}").text
    reasons = [_text(cell).strip() for cell in re.findall(r'<td class="change-reason">(.*?)</td>', page, re.S)]
    assert reasons == ["Test change of inputs", "first revision"]  # newest first, as the list runs
    partial = page_client.get(f"/cost-bases/{basis_id}/revisions/compare", params={"revision": 2, "against": 1},
                              headers=HX).text
    assert "Why revision 2 Test change of inputs" in _text(partial)


def test_the_editor_asks_for_a_reason_and_shows_warnings_after_saving(page_client):
    basis = page_client.post("/api/v1/cost-bases", json=factories.present_worth_basis(), headers=API).json()
    csrf = log_in(page_client, "planner")
    form = {k: str(v) for k, v in factories.present_worth_basis().items()} | {
        "csrf_token": csrf, "version": "1", "discount_rate_pct": "-2", "energy_escalation_pct": "0",
        "load_growth_pct": "0",
    }
    # Beside the inputs, as typed: the live preview names the unusual input.
    preview = page_client.post("/cost-bases/preview", data=form, headers=HX)
    assert 'data-warning="negative_discount_rate"' in preview.text
    assert "Discount rate is -2 % a year" in _text(preview.text)
    refused = page_client.post(f"/cost-bases/{basis['id']}", data=form, headers=HX)
    assert refused.status_code == 422
    assert error_beside(refused.text, "basis-change_reason").startswith("Say why the inputs change")
    assert page_client.get(f"/api/v1/cost-bases/{basis['id']}", headers=API).json()["revision"] == 1
    saved = page_client.post(f"/cost-bases/{basis['id']}", data=form | {"change_reason": "Low-rate scenario"},
                             headers=HX)
    assert saved.status_code == 200, saved.text
    notice = saved.text[saved.text.index('class="notice notice--warn saved-warnings"'):]
    assert "Revision 2 was saved with 1 warning (allowed, but worth a second look)" in _text(notice)
    assert 'data-warning="negative_discount_rate"' in notice
    reasons = re.findall(r'<td class="change-reason">(.*?)</td>', saved.text, re.S)
    assert _text(reasons[0]).strip() == "Low-rate scenario"
    # The box is empty again for the next revision; the stored revision's warnings stay beside the inputs.
    assert re.search(r'<textarea id="basis-change_reason"[^>]*></textarea>', saved.text)
    page = page_client.get(f"/cost-bases/{basis['id']}").text
    assert 'data-warning="negative_discount_rate"' in page[page.index('id="rates-preview"'):]
