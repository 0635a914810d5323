"""The fleet pages: the fleet's losses at a cost basis with its Pareto and loading findings, the
inventory import (upload, preview, commit), the replacement shortlist and the typical-loss table."""

from __future__ import annotations

import csv
import html
import io
import json
import re

import pytest

from server import schemas
from server.pages.fleet_charts import pareto_chart, top_groups
from server.pages.fleet_views import RowsText, parse_typical_rows, typical_rows_text
from tests import factories
from tests.e2e.test_fleet import FLEET, HEADER
from tests.e2e.test_pages import API, HX, error_beside, log_in


def _text(page: str) -> str:
    """The page as words: tags dropped, entities decoded, spaces collapsed."""
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def _charts(page: str) -> list[dict]:
    return [json.loads(html.unescape(found)) for found in re.findall(r"data-chart='([^']*)'", page)]


def _csv(rows, header=HEADER) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue().encode()


def _api_import(client, rows=FLEET) -> None:
    response = client.post("/api/v1/fleet/import", data={"commit": "true"}, headers=API,
                           files={"file": ("fleet.csv", _csv(rows), "text/csv")})
    assert response.status_code == 201 and response.json()["committed_at"], response.text


def _basis(client) -> int:
    # As tests/e2e/test_fleet.py: 0.1 EUR/kWh, 50 EUR/kW-year, RF 0.8, carbon 100 EUR/t at 0.4 t/MWh.
    body = factories.present_worth_basis(
        name="Fleet basis", energy_price_per_kwh=0.1, capacity_cost_per_kw_year=50.0, responsibility_factor=0.8,
        carbon_price_per_t=100.0, emission_factor_t_per_mwh=0.4, discount_rate_pct=6.0, energy_escalation_pct=0.0,
        load_growth_pct=0.0)
    return client.post("/api/v1/cost-bases", json=body, headers=API).json()["id"]


def _group(name: str, cost: float) -> schemas.FleetGroupOut:
    return schemas.FleetGroupOut(group=name, units=1, no_load_energy_kwh_per_year=10.0, load_energy_kwh_per_year=5.0,
                                 loss_cost_per_year=cost, co2_t_per_year=0.1, units_with_estimated_losses=0)


# --- pure helpers ---------------------------------------------------------------------------------

def test_pareto_bars_descend_and_the_cumulative_share_reaches_all():
    groups = [_group(f"G{k}", cost) for k, cost in enumerate([5.0, 40.0, 10.0, 25.0, 20.0])]
    shown = top_groups(groups, top=3)
    assert [g.group for g in shown] == ["G1", "G3", "Other (3 groups)"]
    assert shown[-1].loss_cost_per_year == 35.0 and shown[-1].units == 3
    chart = pareto_chart(shown, "EUR")
    bars = next(s for s in chart["series"] if s["id"] == "loss-cost")["data"]
    line = next(s for s in chart["series"] if s["id"] == "cumulative")["data"]
    assert bars == [40, 25, 35]
    assert line == [40.0, 65.0, 100.0]  # 40 / 100, 65 / 100, all


def test_typical_rows_read_as_text_and_back():
    rows, lines = parse_typical_rows("insulation, from, to, kva, p0, pk\nliquid, 1950, 1974, 400, 1100, 7000\n\ndry 1995 2014 630 1500 8000")
    assert rows == [[0, "1950", "1974", "400", "1100", "7000"], [1, "1995", "2014", "630", "1500", "8000"]]
    assert lines == [2, 4]
    assert typical_rows_text({"rows": [[0, 1950, 1974, 400.0, 1100.0, 7000.0]]}) == "liquid, 1950, 1974, 400, 1100, 7000"
    with pytest.raises(RowsText, match="line 1: insulation must be liquid or dry"):
        parse_typical_rows("oil, 1950, 1974, 400, 1100, 7000")
    with pytest.raises(RowsText, match="line 2: give 6 values"):
        parse_typical_rows("liquid, 1950, 1974, 400, 1100, 7000\nliquid, 1950")


# --- the fleet page -------------------------------------------------------------------------------

def test_the_fleet_page_shows_totals_and_marks_estimated_units(page_client):
    _api_import(page_client)
    basis_id = _basis(page_client)
    log_in(page_client, "viewer")
    page = page_client.get("/fleet")
    assert page.status_code == 200
    assert 'aria-current="page">Fleet' in page.text
    words = _text(page.text)
    summary = page_client.get("/api/v1/fleet/summary", params={"cost_basis_id": basis_id}, headers=API).json()
    assert summary["units_with_estimated_losses"] == 1
    assert "Units 4" in words and "With estimated losses 1 estimated" in words
    assert f"Loss cost a year {summary['loss_cost_per_year']:,.0f} EUR" in words
    assert "1 of 4 units have at least one loss estimated" in words
    assert f'href="/api/v1/fleet/units.csv?cost_basis_id={basis_id}"' in page.text
    assert 'href="/api/v1/fleet/template.csv"' in page.text
    assert "Import the inventory" in words and 'action="/fleet/imports"' not in page.text  # a viewer reads
    pareto, split = _charts(page.text)
    groups = page_client.get("/api/v1/fleet/groups", params={"cost_basis_id": basis_id, "by": "region"},
                             headers=API).json()["groups"]
    bars = next(s for s in pareto["series"] if s["id"] == "loss-cost")["data"]
    assert bars == [round(g["loss_cost_per_year"]) for g in groups] and bars == sorted(bars, reverse=True)
    assert next(s for s in pareto["series"] if s["id"] == "cumulative")["data"][-1] == 100.0
    assert {s["id"] for s in split["series"]} == {"no-load", "load"}
    # Loading: A-4 at 1.2 pu is overloaded; with the oversized limit at 0.55 pu, A-3 (0.5 pu) is oversized.
    by_site = page_client.get("/fleet", params={"cost_basis_id": basis_id, "by": "site", "min_loading_pu": "0.55"},
                              headers=HX)
    assert by_site.status_code == 200 and by_site.text.lstrip().startswith('<div id="fleet-view">')
    found = _text(by_site.text)
    assert "Overloaded, above 1 pu 1" in found and "Oversized, below 0.55 pu 1" in found
    assert "A-4" in found and "A-3" in found and "by site" in found


def test_a_direct_rates_basis_says_plainly_why_it_cannot_cost_the_fleet(page_client):
    _api_import(page_client)
    direct = page_client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()["id"]
    log_in(page_client, "viewer")
    page = page_client.get("/fleet", params={"cost_basis_id": direct})
    assert page.status_code == 422
    words = _text(page.text)
    assert "These losses cannot be costed at this basis" in words and "has no energy price" in words
    assert "Units 4" in words and "Overloaded" in words  # the loading findings need no prices
    assert _charts(page.text) == []
    bad = page_client.get("/fleet", params={"by": "colour", "limit": "0"})
    assert bad.status_code == 422 and error_beside(bad.text, "fleet-limit") == "Must be 1 or more."


def test_importing_through_the_page_previews_then_commits(page_client):
    csrf = log_in(page_client, "planner")
    upload = page_client.post("/fleet/imports", data={"csrf_token": csrf}, follow_redirects=False,
                              files={"file": ("fleet.csv", _csv(FLEET), "text/csv")})
    assert upload.status_code == 303 and upload.headers["location"].startswith("/fleet/imports/")
    preview = page_client.get(upload.headers["location"])
    words = _text(preview.text)
    assert "Rows 4" in words and "New units 4" in words and "No-load losses estimated 1" in words
    assert page_client.get("/api/v1/fleet/units", headers=API).json()["total"] == 0  # nothing yet
    import_id = int(upload.headers["location"].rsplit("/", 1)[1])
    committed = page_client.post(f"/fleet/imports/{import_id}/commit", data={"csrf_token": csrf},
                                 follow_redirects=False)
    assert committed.status_code == 303 and committed.headers["location"] == f"/fleet?imported={import_id}"
    assert page_client.get("/api/v1/fleet/units", headers=API).json()["total"] == 4
    page = _text(page_client.get(committed.headers["location"]).text)
    assert "Imported 4 units from fleet.csv: 4 new, 0 updated" in page
    # An htmx upload is told where to go rather than following the redirect into its target.
    again = page_client.post("/fleet/imports", data={"csrf_token": csrf}, headers=HX,
                             files={"file": ("fleet.csv", _csv(FLEET), "text/csv")})
    assert again.status_code == 200 and again.headers["HX-Redirect"].startswith("/fleet/imports/")


def test_a_bad_import_shows_rows_and_columns_and_stores_nothing(page_client):
    csrf = log_in(page_client, "planner")
    rows = [list(r) for r in FLEET]
    rows[1][3] = "big"  # row 3
    rows[2][6] = 1700  # row 4
    upload = page_client.post("/fleet/imports", data={"csrf_token": csrf}, follow_redirects=False,
                              files={"file": ("bad.csv", _csv(rows), "text/csv")})
    assert upload.status_code == 303
    preview = page_client.get(upload.headers["location"]).text
    assert re.search(r'class="problem-rows">row 3</td><td><code>rating_kva</code>', preview)
    assert re.search(r'class="problem-rows">row 4</td><td><code>year_installed</code>', preview)
    assert re.search(r'<button type="submit" class="btn btn--primary" disabled', preview)
    import_id = int(upload.headers["location"].rsplit("/", 1)[1])
    refused = page_client.post(f"/fleet/imports/{import_id}/commit", data={"csrf_token": csrf})
    assert refused.status_code == 422 and "nothing was stored" in refused.text
    # A header that is not the template's is refused on the fleet page itself, naming row 1 and the column.
    header = page_client.post("/fleet/imports", data={"csrf_token": csrf}, headers=HX,
                              files={"file": ("odd.csv", _csv(FLEET, HEADER[:-1] + ["colour"]), "text/csv")})
    assert header.status_code == 422 and 'id="fleet-import"' in header.text
    assert re.search(r'class="problem-rows">1</td><td><code>colour</code>', header.text)
    factor = page_client.post("/fleet/imports", data={"csrf_token": csrf, "default_loss_factor": "2"},
                              files={"file": ("fleet.csv", _csv(FLEET), "text/csv")})
    assert error_beside(factor.text, "fleet-import-default_loss_factor") == "Must be between 0 and 1."
    assert page_client.get("/api/v1/fleet/units", headers=API).json()["total"] == 0


# --- the shortlist --------------------------------------------------------------------------------

SHORTLIST = {"candidate": "limit_table", "limit_table": "eu-tier-2", "replacement_cost_per_kva": "10",
             "replacement_cost_fixed": "1000", "installation_cost": "500", "salvage_value": "0",
             "service_life_years": "60", "sizing_years": "0", "load_growth_pct": "0", "max_loading_pu": "1",
             "reference_year": "2027", "min_npv": "0", "discount_rate_pct": "", "region": ""}


def test_the_shortlist_page_shows_a_positive_npv_unit_and_downloads_csv(page_client):
    _api_import(page_client)
    basis_id = _basis(page_client)
    log_in(page_client, "viewer")
    empty = page_client.get("/fleet/shortlist")
    assert empty.status_code == 200 and "Make the shortlist" in empty.text and "shortlist-table" not in empty.text
    query = SHORTLIST | {"cost_basis_id": str(basis_id)}
    page = page_client.get("/fleet/shortlist", params=query)
    assert page.status_code == 200
    api = page_client.post("/api/v1/fleet/shortlist", headers=API, json={
        k: v for k, v in (query | {"cost_basis_id": basis_id}).items() if v != ""}).json()
    row = next(r for r in api["rows"] if r["asset_id"] == "A-1")
    assert row["npv"] > 0
    words = _text(page.text)
    assert re.search(rf"A-1 Mill Lane North 400 1985 0.80 given 400 .*? {row['npv']:,.0f}", words)
    assert f"Net present value {api['programme_npv']:,.0f}" in words
    assert f"Units on the shortlist {api['units_on_shortlist']}" in words
    estimated = [r for r in api["rows"] if r["losses_estimated"]]
    assert words.count(" estimated ") >= len(estimated)
    link = re.search(r'href="(/fleet/shortlist\.csv\?[^"]+)"', page.text).group(1)
    download = page_client.get(html.unescape(link))
    assert download.status_code == 200 and download.headers["content-type"].startswith("text/csv")
    lines = download.text.splitlines()
    assert lines[0].startswith("asset_id,region,site") and len(lines) == 1 + api["units_on_shortlist"]
    # Inputs the service refuses are shown beside their boxes.
    bad = page_client.get("/fleet/shortlist", params=query | {"limit_table": "no-such-table", "sizing_years": "-1"})
    assert bad.status_code == 422
    assert error_beside(bad.text, "sl-sizing_years") == "Must be 0 or more."
    unknown = page_client.get("/fleet/shortlist", params=query | {"limit_table": "no-such-table"})
    assert "No maximum-loss table with key 'no-such-table'" in error_beside(unknown.text, "sl-limit_table")


# --- the typical-loss table -----------------------------------------------------------------------

def test_planners_edit_the_typical_loss_table_as_text(page_client):
    log_in(page_client, "viewer")
    page = page_client.get("/fleet/typical-losses")
    assert page.status_code == 200
    words = _text(page.text)
    assert "The defaults are illustrative, not from a standard." in words
    assert "Edit the table" not in words
    csrf = log_in(page_client, "planner")
    form = page_client.get("/fleet/typical-losses").text
    assert 'id="typical-rows"' in form and "liquid, 1950" in form
    rows = "liquid, 1900, 2100, 100, 300, 2000\nliquid, 1900, 2100, 2000, 3000, 20000\ndry, 1900, 2100, 100, 400, 2500\n"
    bad = page_client.post("/fleet/typical-losses", data={"csrf_token": csrf, "name": "Ours", "source": "Sample 2026",
                                                          "rows": rows + "dry, 1900, 2100, 2000, -4000, 22000"})
    assert bad.status_code == 422
    assert error_beside(bad.text, "typical-rows") == "Line 4, no_load_loss_w: must be >= 0, got -4000."
    saved = page_client.post("/fleet/typical-losses", follow_redirects=False, data={
        "csrf_token": csrf, "name": "Ours", "source": "Sample tests 2026", "rows": rows + "dry, 1900, 2100, 2000, 4000, 22000"})
    assert saved.status_code == 303, saved.text[:800]
    table = page_client.get("/api/v1/fleet/typical-losses", headers=API).json()
    assert table["name"] == "Ours" and len(table["rows"]) == 4
    assert "Saved." in page_client.get(saved.headers["location"]).text
    _api_import(page_client)
    units = {u["asset_id"]: u for u in page_client.get("/api/v1/fleet/units", headers=API).json()["units"]}
    assert units["A-4"]["no_load_loss_w"] == pytest.approx(300 + (1000 - 100) / 1900 * 2700)


def test_the_page_reads_the_fleet_as_the_api_does_on_every_engine(client):
    """The page reads the fleet with its own leaner query (server/services/pages_fleet.py): its
    figures must be the API's, on SQLite and PostgreSQL alike."""
    rows = FLEET + [[f"B-{k}", "Quay Road", "South", 250, 3, "liquid", 1990 + k, "", 3000, "", 0.2 + 0.05 * k, 0.3, ""]
                    for k in range(8)]
    response = client.post("/api/v1/fleet/import", data={"commit": "true"},
                           files={"file": ("fleet.csv", _csv(rows), "text/csv")})
    assert response.status_code == 201, response.text
    basis_id = _basis(client)
    for by in ("region", "site", "vintage"):
        page = client.get("/fleet", params={"cost_basis_id": basis_id, "by": by, "min_loading_pu": "0.4", "limit": "3"})
        assert page.status_code == 200
        words = _text(page.text)
        summary = client.get("/api/v1/fleet/summary", params={"cost_basis_id": basis_id}).json()
        assert f"Units {summary['units']}" in words
        assert f"With estimated losses {summary['units_with_estimated_losses']} estimated" in words
        assert f"Loss cost a year {summary['loss_cost_per_year']:,.0f} EUR" in words
        groups = client.get("/api/v1/fleet/groups", params={"cost_basis_id": basis_id, "by": by}).json()["groups"]
        bars = next(s for s in _charts(page.text)[0]["series"] if s["id"] == "loss-cost")["data"]
        assert bars == [round(g["loss_cost_per_year"]) for g in groups]
    loading = client.get("/api/v1/fleet/loading", params={"min_loading_pu": 0.4, "limit": 3}).json()
    assert f"Oversized, below 0.4 pu {loading['oversized_count']}" in words
    listed = re.findall(r'<th scope="row">([AB]-\d+)</th><td>', page.text)
    assert listed == [u["asset_id"] for u in loading["overloaded"] + loading["oversized"]]
