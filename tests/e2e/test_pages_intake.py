"""The pages for offer intake, compliance and currencies: importing offers through a preview,
non-compliant offers left out of the ranking and why, each offer's findings, the limit tables
and their review, the efficiency curves, and offers priced in another currency."""

from __future__ import annotations

import html
import json
import re

import pytest

from server import schemas
from server.pages.charts import efficiency_curves_chart
from server.pages.intake import RatesText, parse_rates, preview_cells
from server.pages.intake_views import excluded_view, table_choices
from server.pages.limit_tables import RowsText, parse_rows
from tests import factories
from tests.e2e.test_intake import _csv_bytes, _rows, _xlsx_bytes
from tests.e2e.test_pages import API, HX, api_offer, error_beside, log_in, offer_form

CSV = "text/csv"


def _text(page: str) -> str:
    """The page as words: tags dropped, entities decoded, spaces collapsed."""
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page))).strip()


def _section(page: str, section_id: str) -> str:
    start = page.index(f'<section id="{section_id}"')
    return page[start:page.index("</section>", start)]


def _tender(client, lots=None, **extra) -> dict:
    basis_id = client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()["id"]
    body = factories.tender(basis_id, lots=lots or [factories.lot(name="Lot A"), factories.lot(name="Lot B", rating_kva=1000)],
                            **extra)
    response = client.post("/api/v1/tenders", json=body, headers=API)
    assert response.status_code == 201, response.text
    return response.json()


def _upload(client, csrf: str, tender_id: int, content: bytes, filename: str = "offers.csv", headers=None):
    return client.post(f"/tenders/{tender_id}/offer-imports", data={"csrf_token": csrf},
                       files={"file": (filename, content, CSV)}, headers=headers, follow_redirects=False)


def _cell(page: str, row: int, column: str) -> str:
    """The words of one cell of the preview: its value and the messages under it."""
    tr = re.search(rf'<tr id="import-row-{row}"[^>]*>(.*?)</tr>', page, re.S)
    assert tr, f"no row {row} in the preview"
    td = re.search(rf'<td data-column="{column}"[^>]*>(.*?)</td>', tr.group(1), re.S)
    assert td, f"no cell {column} in row {row}"
    return _text(td.group(0))


def _offers(client, lot_id: int) -> list[dict]:
    return client.get(f"/api/v1/lots/{lot_id}/offers", headers=API).json()


def _chart(page: str, element_class: str) -> dict:
    found = re.search(rf'class="chart {element_class}" data-chart=\'([^\']*)\'', page)
    assert found, f"no {element_class} chart"
    return json.loads(html.unescape(found.group(1)))


# --- offer import ------------------------------------------------------------------------

def test_upload_shows_a_preview_with_counts_and_each_error_beside_its_cell(page_client):
    csrf = log_in(page_client)
    tender = _tender(page_client)
    rows = _rows(10)
    rows[2][5] = "lots"      # load_loss_w as text, spreadsheet row 4
    rows[6][4] = 0.38        # kW typed as W: a warning, not an error (row 8)
    response = _upload(page_client, csrf, tender["id"], _csv_bytes(rows))
    assert response.status_code == 303
    preview = page_client.get(response.headers["location"])
    assert preview.status_code == 200
    words = _text(preview.text)
    for count in ("Rows 10", "New offers 9", "Changed offers 0", "Unchanged 0", "Rows with errors 1",
                  "Rows with warnings 1"):
        assert count in words, count
    assert _cell(preview.text, 4, "load_loss_w") == "lots Must be a number."
    assert 'class="num cell--error"' in preview.text
    assert "looks like kW typed as W" in _cell(preview.text, 8, "no_load_loss_w")
    assert "cell--warning" in preview.text
    # One row with errors blocks the commit of all, and says why.
    button = re.search(r"<button[^>]*>Commit all 10 rows</button>", preview.text).group(0)
    assert "disabled" in button
    assert "Cannot commit: 1 row has errors" in words
    import_id = int(response.headers["location"].rsplit("/", 1)[1])
    refused = page_client.post(f"/offer-imports/{import_id}/commit", data={"csrf_token": csrf}, follow_redirects=False)
    assert refused.status_code == 422 and "1 rows have errors (first: row 4)" in html.unescape(refused.text)
    assert all(_offers(page_client, lot["id"]) == [] for lot in tender["lots"])


def test_a_clean_file_commits_and_the_offers_appear(page_client):
    csrf = log_in(page_client)
    tender = _tender(page_client)
    response = _upload(page_client, csrf, tender["id"], _xlsx_bytes(_rows(6)), "offers.xlsx")
    preview = page_client.get(response.headers["location"]).text
    button = re.search(r"<button[^>]*>Commit all 6 rows</button>", preview).group(0)
    assert "disabled" not in button
    import_id = int(response.headers["location"].rsplit("/", 1)[1])
    committed = page_client.post(f"/offer-imports/{import_id}/commit", data={"csrf_token": csrf}, follow_redirects=False)
    assert committed.status_code == 303
    assert committed.headers["location"] == f"/tenders/{tender['id']}?imported={import_id}#offer-import"
    page = page_client.get(committed.headers["location"]).text
    assert "Imported 6 offer rows from offers.xlsx: 6 new, 0 changed, 0 unchanged." in _text(page)
    lot_a = tender["lots"][0]["id"]
    assert [o["bidder"] for o in _offers(page_client, lot_a)] == ["Bidder 0000", "Bidder 0002", "Bidder 0004"]
    assert "Bidder 0002" in page_client.get(f"/lots/{lot_a}").text
    # The preview now says it was committed and offers no second commit.
    again = page_client.get(f"/offer-imports/{import_id}").text
    assert "Committed on" in again and "Commit all" not in again


def test_an_htmx_upload_is_sent_to_the_preview_and_a_refused_file_lists_its_problems(page_client):
    csrf = log_in(page_client)
    tender = _tender(page_client)
    ok = _upload(page_client, csrf, tender["id"], _csv_bytes(_rows(2)), headers=HX)
    assert ok.status_code == 200 and ok.headers["HX-Redirect"].startswith("/offer-imports/")
    header = ["lot", "bidder", "unit_price", "colour"]
    refused = _upload(page_client, csrf, tender["id"], _csv_bytes([["Lot A", "X", 1, "red"]], header=header), headers=HX)
    assert refused.status_code == 422
    assert refused.text.lstrip().startswith('<section id="offer-import"')
    words = _text(refused.text)
    assert "The header has columns this import does not know" in words
    assert "Row 1, column “colour”: unknown column" in words and "Nothing was stored." in words
    empty = page_client.post(f"/tenders/{tender['id']}/offer-imports", data={"csrf_token": csrf})
    assert empty.status_code == 422 and "Choose a CSV or XLSX file to upload." in empty.text
    assert "<nav" in empty.text  # without script, the whole tender page with the message


def test_the_tender_page_offers_the_template_and_an_upload_with_progress(page_client):
    log_in(page_client)
    tender = _tender(page_client)
    page = page_client.get(f"/tenders/{tender['id']}").text
    section = _section(page, "offer-import")
    assert f'href="/api/v1/tenders/{tender["id"]}/offer-template.csv"' in section
    assert 'enctype="multipart/form-data"' in section and 'name="csrf_token"' in section
    assert 'data-upload-progress="offer-import-progress"' in section and "<progress" in section
    assert '<script src="/static/js/upload.js" defer></script>' in page


def test_two_thousand_rows_stay_usable_with_the_problems_filter(page_client):
    csrf = log_in(page_client)
    tender = _tender(page_client)
    rows = _rows(2000)
    rows[1500][2] = -5        # a negative price, spreadsheet row 1502
    response = _upload(page_client, csrf, tender["id"], _csv_bytes(rows))
    location = response.headers["location"]
    everything = page_client.get(location).text
    assert "Showing the first 500 of 2,000 rows" in _text(everything)
    assert len(re.findall(r'<tr id="import-row-', everything)) == 500
    problems = page_client.get(location, params={"problems": "true"}, headers=HX)
    assert problems.text.lstrip().startswith('<div id="import-rows"')
    shown = re.findall(r'<tr id="import-row-(\d+)"', problems.text)
    assert "1502" in shown and len(shown) < 2000
    assert _cell(problems.text, 1502, "unit_price") == "-5 Must be 0.0 or more."


def test_preview_cells_put_each_message_beside_its_column():
    row = schemas.ImportRowOut(
        row=3, lot="Lot Z", lot_id=None, bidder="B", action="refused", values={"bidder": "B", "unit_price": "x"},
        errors=[{"column": "lot", "message": "no lot 'Lot Z' in this tender"},
                {"column": "unit_price", "message": "must be a number"},
                {"column": "lot_id", "message": "unknown"}],
        warnings=[],
    )
    cells, other_errors, other_warnings = preview_cells(row)
    by_column = {c.column: c for c in cells}
    assert by_column["lot"].value == "Lot Z" and by_column["lot"].errors == ["no lot 'Lot Z' in this tender"]
    assert by_column["unit_price"].errors == ["must be a number"] and by_column["bidder"].errors == []
    assert other_errors == ["lot_id: unknown"] and other_warnings == []


# --- compliance on the lot page ------------------------------------------------------------

def _capped_lot(client) -> tuple[dict, int]:
    tender = _tender(client, lots=[factories.lot(name="Capped", max_no_load_loss_w=400, impedance_pct=4.0)])
    lot_id = tender["lots"][0]["id"]
    api_offer(client, lot_id, bidder="Cheap but over", unit_price=5000, no_load_loss_w=420)
    api_offer(client, lot_id, bidder="Compliant", unit_price=12000, no_load_loss_w=390)
    return tender, lot_id


def test_a_non_compliant_lowest_toc_offer_is_not_ranked_and_the_page_says_why(page_client):
    log_in(page_client)
    _, lot_id = _capped_lot(page_client)
    page = page_client.get(f"/lots/{lot_id}").text
    ranking = _section(page, "ranking")
    body = ranking[ranking.index("<tbody>"):ranking.index("</tbody>")]
    assert [b.strip() for b in re.findall(r'<th scope="row">([^<]+)', body)] == ["Compliant"]
    words = _text(ranking)
    assert ("Cheap but over would have the lowest total owning cost (14,420 EUR per unit) but breaks: "
            "lot cap: no-load loss: 420 W against 400 W.") in words
    assert "1 offer left out because it breaks a rule. Show it" in words
    assert f'hx-get="/lots/{lot_id}/ranking?include_non_compliant=true"' in ranking
    assert f'href="/api/v1/lots/{lot_id}/ranking.xlsx"' in ranking and f'href="/api/v1/lots/{lot_id}/ranking.csv"' in ranking
    # The award follows the compliant ranking.
    assert "now Compliant , 21,240 EUR per unit" in _text(page)


def test_the_toggle_lists_the_left_out_offers_marked_with_their_reasons(page_client):
    log_in(page_client)
    _, lot_id = _capped_lot(page_client)
    shown = page_client.get(f"/lots/{lot_id}/ranking", params={"include_non_compliant": "true"}, headers=HX).text
    assert shown.lstrip().startswith('<section id="ranking"')
    assert f'hx-get="/lots/{lot_id}/ranking?include_non_compliant=true"' in shown  # a refresh keeps them listed
    left_out = re.search(r'<tr class="left-out">(.*?)</tr>', shown, re.S).group(1)
    assert "Cheap but over" in left_out and "Not compliant" in left_out
    assert "lot cap: no-load loss: 420 W against 400 W" in html.unescape(left_out)
    assert re.search(r'<td class="num">—</td>', left_out)
    best = re.search(r'<tr class="best">(.*?)</tr>', shown, re.S).group(1)
    assert "Compliant" in best and ">1<" in best
    assert "Hide it" in _text(shown)
    # Without script the link opens the whole page with the same rows.
    page = page_client.get(f"/lots/{lot_id}", params={"include_non_compliant": "true"}).text
    assert '<tr class="left-out">' in page
    redirect = page_client.get(f"/lots/{lot_id}/ranking?include_non_compliant=true", follow_redirects=False)
    assert redirect.headers["location"] == f"/lots/{lot_id}?include_non_compliant=true#ranking"


def test_the_compliance_details_list_rule_limit_value_source_and_warnings(page_client):
    log_in(page_client)
    tender = _tender(page_client, lots=[factories.lot(name="EU lot", limit_tables=["eu-tier-1"])])
    lot_id = tender["lots"][0]["id"]
    over = api_offer(page_client, lot_id, bidder="Over", no_load_loss_w=600, load_loss_w=4000)
    api_offer(page_client, lot_id, bidder="Typo", no_load_loss_w=0.3, load_loss_w=4000)
    expected = {r["offer_id"]: r for r in page_client.get(f"/api/v1/lots/{lot_id}/compliance", headers=API).json()}
    page = page_client.get(f"/lots/{lot_id}").text
    section = _section(page, "compliance")
    words = _text(section)
    assert "1 of 2 offers meet every rule." in words
    assert "EU Tier 1 maximum losses" in words and "From memory, unverified" in words
    details = re.search(rf'<details class="offer-compliance offer-compliance--fails" id="compliance-{over["id"]}">(.*?)</details>',
                        section, re.S).group(1)
    finding = expected[over["id"]]["findings"][0]
    assert finding["rule"].endswith("no-load loss") and finding["passed"] is False
    row = _text(re.search(r'<tr class="finding finding--fail">(.*?)</tr>', details, re.S).group(1))
    assert row.startswith(finding["rule"])
    assert f'{finding["limit"]:,.0f} 600 W {finding["source"]} Rule from memory, unverified Fail' in row
    assert "548/2014" in finding["source"]
    assert "Not compliant: breaks 1 rule" in _text(details)
    assert "looks like kW typed as W" in words and "usual for 400 kVA" in words


def test_the_left_out_offers_pure_view():
    common = dict(no_load_loss_w=1.0, load_loss_w=1.0, aux_loss_w=0.0, capitalised_no_load=0.0, capitalised_load=0.0,
                  capitalised_aux=0.0, efficiency_25_pct=99.0, efficiency_50_pct=99.0, efficiency_75_pct=99.0,
                  efficiency_100_pct=99.0, toc_total=0.0, unit_price=0.0)
    full = schemas.RankingOut(
        loading=schemas.LoadingOut(source="cost basis", note="n"), lot_id=1, tender_id=1, currency="EUR", quantity=1,
        cost_basis_id=1, cost_basis_name="B", cost_basis_revision=1, no_load_rate_per_kw=1, load_rate_per_kw=1,
        aux_rate_per_kw=0, excluded=1,
        rows=[schemas.RankingRowOut(rank=1, offer_id=1, bidder="A", toc_per_unit=20.0, **common),
              schemas.RankingRowOut(rank=None, offer_id=2, bidder="B", toc_per_unit=10.0, compliant=False,
                                    reasons=["r"], **common)],
    )
    hidden = excluded_view(full, False)
    assert [r.bidder for r in hidden["ranking"].rows] == ["A"] and [r.bidder for r in hidden["shown_rows"]] == ["A"]
    assert hidden["lead_left_out"].bidder == "B" and [r.bidder for r in hidden["left_out"]] == ["B"]
    assert [r.bidder for r in excluded_view(full, True)["shown_rows"]] == ["A", "B"]
    cheaper = full.model_copy(update={"rows": [full.rows[0].model_copy(update={"toc_per_unit": 5.0}), full.rows[1]]})
    assert excluded_view(cheaper, False)["lead_left_out"] is None


# --- limit tables ---------------------------------------------------------------------------

def test_the_limit_tables_page_lists_the_built_in_tables_from_memory(page_client):
    log_in(page_client, "viewer")
    page = page_client.get("/limit-tables")
    assert page.status_code == 200
    words = _text(page.text)
    assert "Regulatory tables change: check the edition in force where you buy." in words
    assert "Values marked from memory are candidates awaiting verification." in words
    for key in ("doe-2016", "doe-2029", "eu-tier-1", "eu-tier-2"):
        assert f'href="/limit-tables/{key}#{key}-' in page.text, key
    assert words.count("From memory, unverified") >= 4 and "Built-in" in words
    assert 'aria-current="page">Limit tables<' in page.text
    assert "New limit table" not in words and "needs the planner role" in words
    detail = page_client.get("/limit-tables/eu-tier-1").text
    assert "EU Tier 1 maximum losses, liquid-immersed" in detail and "EU Tier 1 maximum losses, dry-type" in detail
    assert "Rating (kVA)" in detail and "Review this table" not in detail


def test_a_planner_creates_an_own_table_and_lots_can_name_it(page_client):
    csrf = log_in(page_client, "tester")
    form = {"csrf_token": csrf, "key": "our-spec", "name": "Our 2027 specification", "source": "Spec 12 clause 4",
            "kind": "max_losses", "phases": "3", "insulation": "", "per_unit_load": "0.5",
            "rows": "rating_kva, max_no_load_loss_w, max_load_loss_w\n400, 350, 3500\n630 500 5000\n"}
    bad = page_client.post("/limit-tables", data=form | {"rows": "400, 350, 3500\n630, 500"})
    assert bad.status_code == 422
    assert error_beside(bad.text, "new-rows") == "Line 2: give 3 numbers, rating_kva, max_no_load_loss_w, max_load_loss_w."
    negative = page_client.post("/limit-tables", data=form | {"rows": "400, 350, 3500\n630, -1, 5000"})
    assert error_beside(negative.text, "new-rows") == "Line 2: max_no_load_loss_w must be 0 or more."
    created = page_client.post("/limit-tables", data=form, follow_redirects=False)
    assert created.status_code == 303 and created.headers["location"] == "/limit-tables/our-spec"
    detail = page_client.get("/limit-tables/our-spec").text
    assert "Our 2027 specification" in detail and "User-defined" in detail
    assert "400, 350, 3500\n630, 500, 5000" in detail  # the edit form's rows box
    table = next(t for t in page_client.get("/api/v1/limit-tables", headers=API).json() if t["key"] == "our-spec")
    assert table["rows"] == [{"rating_kva": 400, "max_no_load_loss_w": 350, "max_load_loss_w": 3500},
                             {"rating_kva": 630, "max_no_load_loss_w": 500, "max_load_loss_w": 5000}]
    saved = page_client.post("/limit-tables/our-spec/edit", data={
        "csrf_token": csrf, "version": str(table["version"]), "kind": "max_losses", "name": "Our spec, edition 2",
        "source": "Spec 12", "phases": "3", "insulation": "", "per_unit_load": "0.5", "rows": "400, 340, 3400"},
        follow_redirects=False)
    assert saved.status_code == 303
    stale = page_client.post("/limit-tables/our-spec/edit", data={
        "csrf_token": csrf, "version": str(table["version"]), "kind": "max_losses", "name": "Late", "source": "S",
        "rows": "400, 1, 1"})
    assert stale.status_code == 409 and "changed by someone else" in stale.text
    # The new table is a choice on the lot forms, and a lot posted with it names it.
    tender = _tender(page_client)
    page = page_client.get(f"/tenders/{tender['id']}").text
    assert 'name="limit_tables" value="our-spec"' in page and 'name="limit_tables" value="eu-tier-1"' in page
    lot = {"csrf_token": csrf, "name": "630 kVA", "rating_kva": "630", "phases": "3", "hv_kv": "20", "lv_kv": "0.4",
           "frequency_hz": "50", "insulation": "liquid", "quantity": "2", "limit_tables": ["our-spec", "eu-tier-1"]}
    added = page_client.post(f"/tenders/{tender['id']}/lots", data=lot, follow_redirects=False)
    assert added.status_code == 303
    lots = page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["lots"]
    assert lots[-1]["limit_tables"] == ["our-spec", "eu-tier-1"]


def test_a_planner_imports_a_table_from_csv_and_a_bad_file_lists_its_problems(page_client):
    csrf = log_in(page_client, "planner")
    meta = {"csrf_token": csrf, "key": "valley-spec", "name": "Valley spec", "source": "Spec 7", "kind": "max_losses",
            "phases": "", "insulation": "", "per_unit_load": ""}
    content = b"rating_kva,max_no_load_loss_w,max_load_loss_w\n400,350,3500\n"
    done = page_client.post("/limit-tables/import", data=meta, files={"file": ("spec.csv", content, CSV)},
                            follow_redirects=False)
    assert done.status_code == 303 and done.headers["location"] == "/limit-tables/valley-spec"
    bad = page_client.post("/limit-tables/import", data=meta | {"key": "bad-spec"},
                           files={"file": ("spec.csv", b"rating_kva,max_no_load_loss_w,max_load_loss_w\n400,-1,3500\n", CSV)})
    assert bad.status_code == 422
    assert "Row 2, column “max_no_load_loss_w”" in _text(bad.text) and "Nothing was stored." in bad.text


def test_reviewing_a_built_in_table_marks_it_verified(page_client):
    csrf = log_in(page_client, "planner")
    detail = page_client.get("/limit-tables/eu-tier-2").text
    assert "Review this table" in detail and "Edit this table" not in detail
    table = "eu-tier-2-liquid"
    missing = page_client.post("/limit-tables/eu-tier-2/review",
                               data={"csrf_token": csrf, "table_id": table, "status": "verified", "note": ""})
    assert missing.status_code == 422 and error_beside(missing.text, f"review-{table}-note") == "Fill this in."
    assert error_beside(missing.text, f"review-{table}-document").startswith("Name the document you checked")
    done = page_client.post("/limit-tables/eu-tier-2/review", follow_redirects=False, data={
        "csrf_token": csrf, "table_id": table, "status": "verified", "note": "Compared with the OJ text, Annex I",
        "document": "Regulation (EU) 548/2014 as amended, OJ text, Annex I, page 8"})
    assert done.status_code == 303
    page = _text(page_client.get(done.headers["location"]).text)
    assert "Review recorded." in page
    assert "Marked verified by planner" in page and "“Compared with the OJ text, Annex I”" in page
    assert "against Regulation (EU) 548/2014 as amended, OJ text, Annex I, page 8" in page
    statuses = {t["table_id"]: t["status"] for t in page_client.get("/api/v1/limit-tables", headers=API).json()
                if t["key"] == "eu-tier-2"}
    assert statuses[table] == "verified" and statuses["eu-tier-2-dry"] == "from memory"
    listed = page_client.get("/limit-tables").text
    row = re.search(rf'href="/limit-tables/eu-tier-2#{table}".*?</tr>', listed, re.S).group(0)
    assert "Verified" in row and "From memory" not in row
    audit = page_client.get("/api/v1/audit", params={"object_type": "rule"}, headers=API).json()
    assert audit[0]["after"]["rule"] == table and audit[0]["after"]["document"].startswith("Regulation (EU)")


def test_a_tolerance_rule_is_reviewed_on_the_rules_page(page_client):
    csrf = log_in(page_client, "planner")
    page = _text(page_client.get("/rules").text)
    assert "Tolerance on short-circuit impedance, principal tap (IEC)" in page and "IEC 60076-1" in page
    done = page_client.post("/rules/iec-60076-1-impedance-tolerance/review", follow_redirects=False, data={
        "csrf_token": csrf, "status": "verified", "note": "Table 1 line 3", "document": "IEC 60076-1:2011, Table 1, p. 43"})
    assert done.status_code == 303
    rules = {r["id"]: r for r in page_client.get("/api/v1/rules", headers=API).json()}
    reviewed = rules["iec-60076-1-impedance-tolerance"]
    assert reviewed["status"] == "verified" and reviewed["shipped_status"] == "from memory"
    assert reviewed["reviews"][0]["reviewed_by"] == "planner" and reviewed["reviews"][0]["document"].startswith("IEC")


def test_table_choices_group_the_tables_under_one_key():
    choices = table_choices([
        schemas.LimitTableOut(key="k", name="One", source="s", status="from memory", kind="max_losses", built_in=True,
                              per_unit_load=0.5, rows=[]),
        schemas.LimitTableOut(key="k", name="Two", source="s", status="from memory", kind="max_losses", built_in=True,
                              per_unit_load=0.5, rows=[]),
        schemas.LimitTableOut(key="own", name="Own", source="s", status="user-defined", kind="min_pei", built_in=False,
                              per_unit_load=0.5, rows=[]),
    ])
    assert [(c.key, c.names, c.unverified) for c in choices] == [("k", ("One", "Two"), True), ("own", ("Own",), False)]


def test_the_rows_box_reads_lines_of_numbers():
    rows, lines = parse_rows("\nrating_kva min_pct\n400\t99.1\n\n630; 99.2\n", "min_pei")
    assert rows == [{"rating_kva": "400", "min_pct": "99.1"}, {"rating_kva": "630", "min_pct": "99.2"}]
    assert lines == [3, 5]
    with pytest.raises(RowsText, match="line 1: give 2 numbers"):
        parse_rows("400, 1, 2", "min_efficiency")


# --- efficiency curves -----------------------------------------------------------------------

def test_the_curves_chart_holds_one_series_per_offer_and_the_limit(page_client):
    log_in(page_client)
    tender = _tender(page_client, lots=[factories.lot(name="US lot", limit_tables=["doe-2016"])])
    lot_id = tender["lots"][0]["id"]
    for k, (p0, pk) in enumerate([(350, 4000), (420, 3600), (300, 4600)]):
        api_offer(page_client, lot_id, bidder=f"Bidder {k}", no_load_loss_w=p0, load_loss_w=pk)
    page = page_client.get(f"/lots/{lot_id}").text
    options = _chart(_section(page, "curves"), "chart--curves")
    offers = [s for s in options["series"] if s["id"].startswith("offer-")]
    assert [s["name"] for s in offers] == ["Bidder 0", "Bidder 1", "Bidder 2"]
    assert all(s["type"] == "line" and s["data"][0][0] == 5 and s["data"][-1][0] == 150 for s in offers)
    peak = offers[0]["markPoint"]["data"][0]["coord"]
    assert peak[0] == pytest.approx(100 * (350 / 4000) ** 0.5, abs=0.05)
    (limit,) = [s for s in options["series"] if s["id"].startswith("limit-")]
    assert limit["type"] == "scatter" and limit["data"][0][0] == 50
    assert limit["data"][0][1] == pytest.approx(99.31, abs=1e-6)  # 10 CFR 431.196, 400 kVA interpolated
    partial = page_client.get(f"/lots/{lot_id}/curves", headers=HX).text
    assert partial.lstrip().startswith('<section id="curves"') and 'hx-trigger="ranking-changed from:body"' in partial


def test_the_curves_chart_draws_a_peak_efficiency_index_as_a_level():
    curves = schemas.EfficiencyCurvesOut(
        lot_id=1, loading_pu=[0.0, 0.5, 1.0, 1.5],
        curves=[schemas.EfficiencyCurveOut(offer_id=9, bidder="A", efficiency_pct=[0.0, 99.5, 99.4, 99.2],
                                           max_efficiency_loading_pu=0.6, max_efficiency_pct=99.52)],
        reference_points=[{"table": "EU Tier 2", "kind": "min_pei", "efficiency_pct": 99.48}],
    )
    options = efficiency_curves_chart(curves)
    assert json.loads(json.dumps(options)) == options
    level = options["series"][1]
    assert level["id"] == "limit-0" and level["data"][0] == [0.0, 99.48] and level["data"][1]["value"] == [150.0, 99.48]
    assert level["data"][1]["label"]["formatter"] == "minimum PEI 99.48 %"
    assert level["lineStyle"]["type"] == "dashed"
    assert options["yAxis"]["min"] < 99.2 and options["yAxis"]["max"] <= 100


# --- currencies ---------------------------------------------------------------------------

def test_exchange_rates_and_an_offer_in_another_currency_show_both_prices(page_client):
    csrf = log_in(page_client)
    tender = _tender(page_client, lots=[factories.lot(name="L")])
    lot_id = tender["lots"][0]["id"]
    bad = page_client.post(f"/tenders/{tender['id']}/currencies",
                           data={"csrf_token": csrf, "version": "1", "bid_opening_date": "", "exchange_rates": "USD 0,92"})
    assert bad.status_code == 422
    assert error_beside(bad.text, "tender-exchange_rates") == "Line 1: write the rate with a decimal point, such as 0.92."
    saved = page_client.post(f"/tenders/{tender['id']}/currencies", follow_redirects=False, data={
        "csrf_token": csrf, "version": "1", "bid_opening_date": "2027-03-01", "exchange_rates": "usd = 0.9\nGBP 1.15\n"})
    assert saved.status_code == 303
    stored = page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()
    assert stored["exchange_rates"] == {"USD": 0.9, "GBP": 1.15} and stored["bid_opening_date"] == "2027-03-01"
    page = _text(page_client.get(f"/tenders/{tender['id']}").text)
    assert "1 GBP = 1.15 EUR; 1 USD = 0.9 EUR" in page and "Bid opening 2027-03-01" in page

    lot_page = page_client.get(f"/lots/{lot_id}").text
    assert '<option value="USD">USD at 0.9 EUR</option>' in lot_page
    added = page_client.post(f"/lots/{lot_id}/offers", follow_redirects=False,
                             data=offer_form(csrf, bidder="Dollar", unit_price=10000) | {"currency": "USD"})
    assert added.status_code == 303
    ranking = _section(page_client.get(f"/lots/{lot_id}").text, "ranking")
    price = re.search(r'<tr class="best">.*?<td class="num">.*?<td class="num">(.*?)</td>', ranking, re.S).group(1)
    assert _text(price) == "9,000 offered 10,000 USD"
    assert "converted at the tender's exchange rate fixed at bid opening" in _text(ranking)
    # The edit row offers the same choice, with the offer's own currency chosen; an edit can move it.
    dollar = next(o for o in _offers(page_client, lot_id) if o["bidder"] == "Dollar")
    row = page_client.get(f"/offers/{dollar['id']}/edit", headers=HX).text
    assert '<option value="USD" selected>' in row
    edited = offer_form(csrf, bidder="Dollar", unit_price=10000) | {"currency": "GBP", "version": str(dollar["version"])}
    assert page_client.post(f"/offers/{dollar['id']}", data=edited, headers=HX).status_code == 200
    assert page_client.get(f"/api/v1/offers/{dollar['id']}", headers=API).json()["currency"] == "GBP"
    back = offer_form(csrf, bidder="Dollar", unit_price=10000) | {"currency": "USD", "version": str(dollar["version"] + 1)}
    assert page_client.post(f"/offers/{dollar['id']}", data=back, headers=HX).status_code == 200

    # A rate an offer is priced in cannot be dropped.
    version = page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["version"]
    kept = page_client.post(f"/tenders/{tender['id']}/currencies", headers=HX, data={
        "csrf_token": csrf, "version": str(version), "bid_opening_date": "2027-03-01", "exchange_rates": "GBP = 1.15"})
    assert kept.status_code == 422 and kept.text.lstrip().startswith('<section id="tender-header"')
    assert "Offers are priced in USD; keep a rate for each." in html.unescape(kept.text)
    # A stale version saves nothing and says so.
    stale = page_client.post(f"/tenders/{tender['id']}/currencies", headers=HX, data={
        "csrf_token": csrf, "version": "1", "bid_opening_date": "", "exchange_rates": "USD = 2"})
    assert stale.status_code == 409 and "Someone else changed this tender" in stale.text
    assert page_client.get(f"/api/v1/tenders/{tender['id']}", headers=API).json()["exchange_rates"]["USD"] == 0.9


def test_an_htmx_rates_save_returns_the_header_with_both_forms_up_to_date(page_client):
    csrf = log_in(page_client)
    tender = _tender(page_client, lots=[factories.lot(name="L")])
    response = page_client.post(f"/tenders/{tender['id']}/currencies", headers=HX, data={
        "csrf_token": csrf, "version": "1", "bid_opening_date": "", "exchange_rates": "USD = 0.92"})
    assert response.status_code == 200
    assert "Exchange rates saved." in response.text
    # Every form in the header carries the version just saved, so the next save of any of them is not stale.
    assert 'name="version" value="1"' not in response.text
    assert response.text.count('name="version" value="2"') >= 2


def test_the_rates_box_reads_one_rate_a_line():
    assert parse_rates("USD = 0.92\n\n1 GBP = 1.17 EUR\nchf: 1.04") == {"USD": "0.92", "GBP": "1.17", "CHF": "1.04"}
    with pytest.raises(RatesText, match="line 2: USD has a rate already"):
        parse_rates("USD 1\nusd 2")
    with pytest.raises(RatesText, match="line 1: write it as a code and a rate"):
        parse_rates("dollars are 0.9")


def test_a_buyer_changes_the_limit_tables_of_a_lot_on_its_page(page_client):
    csrf = log_in(page_client)
    _, lot_id = _capped_lot(page_client)
    page = page_client.get(f"/lots/{lot_id}").text
    section = _section(page, "compliance")
    assert f'action="/lots/{lot_id}/limit-tables"' in section and "this lot names no limit table" in _text(section)
    saved = page_client.post(f"/lots/{lot_id}/limit-tables", follow_redirects=False,
                             data={"csrf_token": csrf, "version": "1", "limit_tables": ["eu-tier-1"]})
    assert saved.status_code == 303 and saved.headers["location"] == f"/lots/{lot_id}#compliance"
    assert page_client.get(f"/api/v1/lots/{lot_id}", headers=API).json()["limit_tables"] == ["eu-tier-1"]
    section = _section(page_client.get(f"/lots/{lot_id}").text, "compliance")
    assert 'name="limit_tables" value="eu-tier-1" checked' in section
    assert "EU Tier 1 maximum losses, liquid-immersed" in section
    stale = page_client.post(f"/lots/{lot_id}/limit-tables", data={"csrf_token": csrf, "version": "1"})
    assert stale.status_code == 409 and "The limit tables were not changed" in stale.text
    assert page_client.get(f"/api/v1/lots/{lot_id}", headers=API).json()["limit_tables"] == ["eu-tier-1"]
