"""The factory-test pages: an awarded lot's certificates (entered, imported, summarised and
charted), a tender's contract terms, and the test-analysis tool."""

from __future__ import annotations

import csv
import html
import io
import json
import re

import pytest

from server import schemas
from server.pages.certificate_charts import analysis_curves_chart, certificate_losses_chart
from server.pages.certificate_views import analysis_data, box_name, certificate_data, reading_errors
from tests import factories
from tests.e2e.test_pages import API, HX, error_beside, log_in

CAUTION = ("Tests at these voltages are lethal: they are done only by qualified staff under the applicable "
           "standard and local rules. LossLedger checks the figures; it does not certify a unit.")
RATED_HV_A = 400e3 / (3**0.5 * 20000)  # 400 kVA at 20 kV


def _text(page: str) -> str:
    """The page as words: tags dropped, entities decoded, spaces collapsed."""
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", page)))


def _charts(page: str) -> list[dict]:
    return [json.loads(html.unescape(found)) for found in re.findall(r"data-chart='([^']*)'", page)]


def _awarded_lot(client, quantity: int = 200, **tender_terms) -> tuple[int, int]:
    """A tender with one 400 kVA lot, one offer (400 W and 4,000 W guaranteed) and its award."""
    basis_id = client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()["id"]
    body = factories.tender(basis_id, lots=[factories.lot(quantity=quantity)], **tender_terms)
    created = client.post("/api/v1/tenders", json=body, headers=API).json()
    lot_id = created["lots"][0]["id"]
    offer = factories.offer(no_load_loss_w=400, load_loss_w=4000, impedance_pct=4.0, no_load_current_pct=0.5)
    assert client.post(f"/api/v1/lots/{lot_id}/offers", json=offer, headers=API).status_code == 201
    assert client.post(f"/api/v1/lots/{lot_id}/award", json={}, headers=API).status_code in (200, 201)
    return created["id"], lot_id


def _form(csrf: str, serial: str = "S-001", **overrides: str) -> dict[str, str]:
    """The certificate form as a buyer fills it: 410 W no-load, 4,100 W load loss at 75 C."""
    values = {
        "serial_number": serial, "test_date": "2027-05-02", "laboratory": "Works test bay (invented)",
        "conductor": "copper", "reference_temp_c": "",
        "oc_side": "lv", "oc_voltage_v": "400", "oc_current_a": "1.2", "oc_power_w": "410",
        "sc_side": "hv", "sc_voltage_v": "800", "sc_current_a": f"{RATED_HV_A:.6f}", "sc_power_w": "4100",
        "sc_winding_temp_c": "75", "sc_i2r_w": "3500", "csrf_token": csrf,
    }
    return values | overrides


def _certificates_csv(count: int) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(["serial_number", "test_date", "laboratory", "oc_voltage_v", "oc_current_a", "oc_power_w",
                     "sc_voltage_v", "sc_current_a", "sc_power_w", "sc_winding_temp_c", "sc_i2r_w"])
    for k in range(count):
        # Unit 7 is 18 % over on no-load loss: outside tolerance, and rejected by default.
        p0 = 472 if k == 7 else 390 + k % 20
        writer.writerow([f"U{k:04d}", "2027-05-02", "Works bay", 400, 1.2, p0, 800, RATED_HV_A, 3900 + k % 150, 75, 3300])
    return out.getvalue().encode()


# --- pure helpers ---------------------------------------------------------------------------------

def test_form_boxes_map_to_the_nested_schema_and_back():
    data = certificate_data(_form("x", reference_temp_c="", sc_i2r_w=""))
    assert "reference_temp_c" not in data and "i2r_w" not in data["short_circuit"]
    assert data["open_circuit"] == {"side": "lv", "voltage_v": "400", "current_a": "1.2", "power_w": "410"}
    schemas.CertificateIn.model_validate(data)
    assert box_name(("short_circuit", "i2r_w")) == "sc_i2r_w" == box_name("short_circuit.i2r_w")
    assert box_name(("body", "open_circuit", "power_w")) == "oc_power_w"
    assert box_name(("guarantee", "load_loss_w")) == "g_load_loss_w"
    assert box_name(("operating_points", 1, "load_pu")) == "op2_load_pu"


def test_analysis_form_errors_name_the_row_typed():
    form = {"rating_kva": "400", "hv_v": "20000", "lv_v": "400", "oc_voltage_v": "400", "oc_current_a": "1.2",
            "oc_power_w": "380", "sc_voltage_v": "800", "sc_current_a": "11.5", "sc_power_w": "3600",
            "sc_winding_temp_c": "25", "op3_load_pu": "9", "curve_power_factor": "2"}
    data, rows = analysis_data(form)
    assert rows == [3] and len(data["operating_points"]) == 1 + 31
    with pytest.raises(Exception) as caught:
        schemas.TestAnalysisIn.model_validate(data)
    errors = reading_errors(caught.value, rows)
    assert errors["op3_load_pu"] == "must be 3 or less"
    assert errors["curve_power_factor"] == "must be 1 or less"


def test_chart_builders_draw_limits_and_curves():
    summary = schemas.CertificateSummaryOut(
        lot_id=1, awarded_offer_id=1, bidder="B", units_ordered=2, units_tested=2, guaranteed_no_load_loss_w=400,
        guaranteed_load_loss_w=4000, no_load_deviation_mean_pct=0, no_load_deviation_worst_pct=0,
        load_deviation_mean_pct=0, load_deviation_worst_pct=0, total_penalty=0, rejected_units=1,
        outside_tolerance_units=1, tolerance_standard="ieee", currency="EUR")
    base = {"lot_id": 1, "offer_id": 1, "test_date": "2027-01-01", "laboratory": "L", "entered_by": "b",
            "entered_at": "2027-01-01T00:00:00Z", "impedance_pct": 4, "no_load_current_pct": 0.3, "penalty": 0,
            "readings": {}}
    certs = [schemas.CertificateOut(id=1, serial_number="A", no_load_loss_w=410, load_loss_at_reference_w=4050,
                                    within_tolerance=True, rejected=False, **base),
             schemas.CertificateOut(id=2, serial_number="B", no_load_loss_w=450, load_loss_at_reference_w=4000,
                                    within_tolerance=False, rejected=True, **base)]
    chart = certificate_losses_chart(summary, certs)
    ids = {s["id"] for s in chart["series"]}
    # IEEE: +10 % on the no-load loss alone, no limit on the load loss alone.
    assert ids == {"no-load", "load", "guarantee-no-load", "guarantee-load", "limit-no-load"}
    limit = next(s for s in chart["series"] if s["id"] == "limit-no-load")
    assert limit["markLine"]["data"] == [{"yAxis": 440.0}]
    no_load = next(s for s in chart["series"] if s["id"] == "no-load")["data"]
    assert no_load[0] == {"value": ["A", 410]} and no_load[1]["symbol"] == "diamond"
    json.dumps(chart)

    points = [schemas.OperatingPointOut(load_pu=k / 10, power_factor=0.8, lagging=True, efficiency_pct=98 + k / 100,
                                        regulation_pct=k / 3, input_power_w=1, output_power_w=1, losses_w=0)
              for k in range(16)]
    curves = analysis_curves_chart(points)
    efficiency = next(s for s in curves["series"] if s["id"] == "efficiency")["data"]
    assert efficiency[0] == [20.0, 98.02] and efficiency[-1] == [150.0, 98.15]  # from a fifth of the rating
    assert len(next(s for s in curves["series"] if s["id"] == "regulation")["data"]) == 16
    assert curves["yAxis"][0]["max"] <= 100


# --- the certificates of an awarded lot -------------------------------------------------------------

def test_a_lot_that_is_not_awarded_has_no_certificates_yet(page_client):
    log_in(page_client, "buyer")
    basis_id = page_client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()["id"]
    lot_id = page_client.post("/api/v1/tenders", json=factories.tender(basis_id), headers=API).json()["lots"][0]["id"]
    assert "Test certificates" not in page_client.get(f"/lots/{lot_id}").text
    page = page_client.get(f"/lots/{lot_id}/certificates")
    assert page.status_code == 200
    assert "Not awarded yet" in page.text and 'id="certificate-entry"' not in page.text


def test_entering_a_certificate_on_an_awarded_lot(page_client):
    _, lot_id = _awarded_lot(page_client)
    csrf = log_in(page_client, "buyer")
    lot_page = page_client.get(f"/lots/{lot_id}").text
    assert "Test certificates" in lot_page and CAUTION in _text(lot_page)
    assert f'href="/lots/{lot_id}/certificates"' in lot_page

    response = page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf), follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"].startswith(f"/lots/{lot_id}/certificates?entered=S-001")
    page = page_client.get(response.headers["location"]).text
    words = _text(page)
    assert "Certificate of unit S-001 entered: within tolerance" in words
    assert CAUTION in words
    stored = page_client.get(f"/api/v1/lots/{lot_id}/test-certificates", headers=API).json()
    assert [c["serial_number"] for c in stored] == ["S-001"]
    # Direct basis rates 6,000 and 1,500 per kW: (10 W x 6) + (100 W x 1.5) = 210.
    assert stored[0]["penalty"] == pytest.approx(210.0, abs=0.5)
    assert "Works test bay (invented)" in page and "210" in words
    assert "1 of 200 ordered" in words and "IEC 60076-1" in words
    assert "1 of 200 ordered" in _text(page_client.get(f"/lots/{lot_id}").text)  # the lot page's summary follows
    chart = _charts(page)[0]
    assert {s["id"] for s in chart["series"]} >= {"no-load", "load", "guarantee-no-load", "limit-load"}
    # A viewer reads the same page without the forms.
    log_in(page_client, "viewer")
    viewer_page = page_client.get(f"/lots/{lot_id}/certificates").text
    assert "S-001" in viewer_page and 'id="certificate-entry"' not in viewer_page


def test_a_bad_value_shows_its_message_beside_the_box_and_stores_nothing(page_client):
    _, lot_id = _awarded_lot(page_client)
    csrf = log_in(page_client, "buyer")
    response = page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf, oc_power_w="-5"))
    assert response.status_code == 422
    assert error_beside(response.text, "cert-oc_power_w") == "Must be 0 or more."
    assert 'value="Works test bay (invented)"' in response.text  # what was typed stays
    # A reading the domain refuses (I2R above the measured loss) lands beside its own box, through htmx.
    partial = page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf, sc_i2r_w="5000"), headers=HX)
    assert partial.status_code == 422 and partial.text.lstrip().startswith("<section id=\"certificate-entry\"")
    assert "cannot exceed the measured load loss" in error_beside(partial.text, "cert-sc_i2r_w")
    assert page_client.get(f"/api/v1/lots/{lot_id}/test-certificates", headers=API).json() == []
    page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf), follow_redirects=False)
    again = page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf))
    assert "already has a certificate" in error_beside(again.text, "cert-serial_number")


def test_two_hundred_certificates_render_with_summary_and_rejections(page_client):
    _, lot_id = _awarded_lot(page_client)
    csrf = log_in(page_client, "buyer")
    response = page_client.post(f"/lots/{lot_id}/certificates/import", data={"csrf_token": csrf},
                                files={"file": ("certs.csv", _certificates_csv(200), "text/csv")},
                                follow_redirects=False)
    assert response.status_code == 303, response.text[:500]
    page = page_client.get(response.headers["location"])
    assert page.status_code == 200
    words = _text(page.text)
    assert "Imported 200 certificates." in words
    assert page.text.count('<tr class="cert-row--fail">') == 1
    assert all(f">U{k:04d}<" in page.text for k in (0, 7, 199))
    assert "200 of 200 ordered" in words and "Rejected" in words
    summary = page_client.get(f"/api/v1/lots/{lot_id}/test-certificates/summary", headers=API).json()
    assert summary["rejected_units"] == 1
    assert f"{summary['total_penalty']:,.0f} EUR" in words
    assert "+18.00" in words  # the worst no-load deviation, 472 W against 400 W
    chart = _charts(page.text)[0]
    assert len(next(s for s in chart["series"] if s["id"] == "no-load")["data"]) == 200


def test_a_bad_import_names_rows_and_columns_and_stores_nothing(page_client):
    _, lot_id = _awarded_lot(page_client)
    csrf = log_in(page_client, "buyer")
    bad = _certificates_csv(3).decode().replace("U0001,2027-05-02,Works bay,400,1.2,391", "U0001,2027-05-02,Works bay,400,1.2,-3")
    response = page_client.post(f"/lots/{lot_id}/certificates/import", data={"csrf_token": csrf}, headers=HX,
                                files={"file": ("certs.csv", bad.encode(), "text/csv")})
    assert response.status_code == 422
    assert 'id="certificate-import"' in response.text
    assert re.search(r'class="problem-rows">3</td><td><code>oc_power_w</code>', response.text)
    assert page_client.get(f"/api/v1/lots/{lot_id}/test-certificates", headers=API).json() == []


def test_a_rejected_unit_shows_no_penalty_and_the_summary_counts_it(page_client):
    tender_id, lot_id = _awarded_lot(page_client)  # default terms: a unit outside tolerance is rejected
    csrf = log_in(page_client, "buyer")
    page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf), follow_redirects=False)
    # 472 W no-load is +18 %, over IEC 60076-1's +15 % (Table 1): outside tolerance, so rejected.
    # Accepted it would owe 72 W x 6 + 100 W x 1.5 = 582; sent back, nothing.
    response = page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf, "S-002", oc_power_w="472"),
                                follow_redirects=False)
    assert response.status_code == 303
    page = page_client.get(response.headers["location"]).text
    words = _text(page)
    assert ("Certificate of unit S-002 entered: outside tolerance, rejected under the contract terms: "
            "it is sent back and carries no penalty.") in words
    assert "Rejected 1 unit" in words and "Outside tolerance 1 unit" in words
    assert "Total penalty, accepted units 210 EUR" in words  # S-001's 10 W x 6 + 100 W x 1.5 alone
    row = re.search(r'<tr class="cert-row--fail">\s*<th scope="row">S-002</th>(.*?)</tr>', page, re.S).group(1)
    assert re.findall(r'<td class="num">([^<]*)</td>', row)[-1] == "0" and "badge--rejected" in row
    stored = {c["serial_number"]: c for c in page_client.get(f"/api/v1/lots/{lot_id}/test-certificates",
                                                             headers=API).json()}
    assert stored["S-002"]["rejected"] and stored["S-002"]["penalty"] == 0.0
    assert "is rejected and sent back, with no penalty" in _text(page_client.get(f"/tenders/{tender_id}").text)


def test_the_import_form_offers_templates_that_import_once_filled(page_client):
    from openpyxl import load_workbook

    _, lot_id = _awarded_lot(page_client)
    csrf = log_in(page_client, "buyer")
    page = page_client.get(f"/lots/{lot_id}/certificates").text
    import_form = page[page.index('id="certificate-import"'):]
    csv_link = f'<a href="/api/v1/lots/{lot_id}/test-certificates/template.csv" download>Download a template (CSV)</a>'
    assert csv_link in import_form and f'href="/api/v1/lots/{lot_id}/test-certificates/template.xlsx"' in import_form
    # The links work with the browser's session, as the page's other downloads do.
    header = page_client.get(f"/api/v1/lots/{lot_id}/test-certificates/template.csv").text
    assert header == "serial_number,test_date,laboratory,conductor,reference_temp_c,oc_side,oc_voltage_v," \
                     "oc_current_a,oc_power_w,sc_side,sc_voltage_v,sc_current_a,sc_power_w,sc_winding_temp_c,sc_i2r_w\r\n"
    book = load_workbook(io.BytesIO(page_client.get(f"/api/v1/lots/{lot_id}/test-certificates/template.xlsx").content))
    sheet = book.worksheets[0]
    columns = [c.value for c in sheet[1]]
    values = {"test_date": "2027-05-02", "laboratory": "Works bay (invented)", "oc_voltage_v": 400,
              "oc_current_a": 1.2, "oc_power_w": 405, "sc_voltage_v": 800, "sc_current_a": RATED_HV_A,
              "sc_power_w": 4050, "sc_winding_temp_c": 75, "sc_i2r_w": 3400}
    for serial in ("TX-10.05", "0012", "A.0B", 12345):  # 12345 typed as a number
        sheet.append([serial if name == "serial_number" else values.get(name) for name in columns])
    filled = io.BytesIO()
    book.save(filled)
    response = page_client.post(f"/lots/{lot_id}/certificates/import", data={"csrf_token": csrf},
                                files={"file": ("filled.xlsx", filled.getvalue(), "application/octet-stream")},
                                follow_redirects=False)
    assert response.status_code == 303, response.text[:500]
    page = page_client.get(response.headers["location"]).text
    assert "Imported 4 certificates." in _text(page)
    for serial in ("TX-10.05", "0012", "A.0B", "12345"):
        assert f'<th scope="row">{serial}</th>' in page, serial
    # A viewer has no import form, hence no template links.
    log_in(page_client, "viewer")
    assert "Download a template" not in page_client.get(f"/lots/{lot_id}/certificates").text


def test_buyers_edit_the_contract_terms_on_the_tender_page(page_client):
    tender_id, lot_id = _awarded_lot(page_client)
    csrf = log_in(page_client, "buyer")
    page = page_client.get(f"/tenders/{tender_id}").text
    assert "Contract terms for the factory tests" in page and f'action="/tenders/{tender_id}/contract-terms"' in page
    version = page_client.get(f"/api/v1/tenders/{tender_id}", headers=API).json()["version"]
    bad = page_client.post(f"/tenders/{tender_id}/contract-terms", headers=HX, data={
        "csrf_token": csrf, "version": version, "tolerance_standard": "ieee", "penalty_multiplier": "500"})
    assert bad.status_code == 422 and error_beside(bad.text, "terms-penalty_multiplier") == "Must be 100 or less."
    saved = page_client.post(f"/tenders/{tender_id}/contract-terms", follow_redirects=False, data={
        "csrf_token": csrf, "version": version, "tolerance_standard": "ieee", "penalty_multiplier": "2",
        "penalty_credit_below": "true"})
    assert saved.status_code == 303
    tender = page_client.get(f"/api/v1/tenders/{tender_id}", headers=API).json()
    assert (tender["tolerance_standard"], tender["penalty_multiplier"]) == ("ieee", 2.0)
    assert tender["penalty_credit_below"] is True and tender["reject_beyond_tolerance"] is False
    stale = page_client.post(f"/tenders/{tender_id}/contract-terms", data={
        "csrf_token": csrf, "version": version, "tolerance_standard": "iec", "penalty_multiplier": "1"})
    assert stale.status_code == 409 and "Someone else changed this tender" in stale.text
    # The new terms price the next certificate: IEEE, twice the excess, credit below the guarantee.
    page_client.post(f"/lots/{lot_id}/certificates", data=_form(csrf, oc_power_w="390"), follow_redirects=False)
    stored = page_client.get(f"/api/v1/lots/{lot_id}/test-certificates", headers=API).json()[0]
    assert stored["penalty"] == pytest.approx(2 * (-10 * 6.0 + 100 * 1.5), abs=1)
    assert "IEEE C57.12.00" in _text(page_client.get(f"/lots/{lot_id}/certificates").text)
    log_in(page_client, "viewer")
    assert "Edit the contract terms" not in page_client.get(f"/tenders/{tender_id}").text


# --- the test-analysis tool -------------------------------------------------------------------------

def test_the_analysis_tool_shows_the_circuit_findings_and_curves(page_client):
    log_in(page_client, "viewer")
    page = page_client.get("/test-analysis")
    assert page.status_code == 200
    words = _text(page.text)
    assert CAUTION in words
    for needle in ("R0, core-loss resistance", "X0, magnetising reactance", "Req, series resistance",
                   "Xeq, leakage reactance", "R1 + R2 (split)", "Within tolerance", "IEC 60076-1 Table 1"):
        assert needle in words, needle
    # The example: 3,600 W at 25 C of which I2R 3,000 W, to 75 C in copper = 4,080.2 W (see test_factory_tests).
    assert "4,080.2" in words
    chart = _charts(page.text)[0]
    efficiency = next(s for s in chart["series"] if s["id"] == "efficiency")["data"]
    regulation = next(s for s in chart["series"] if s["id"] == "regulation")["data"]
    assert regulation[0] == [0.0, 0.0] and regulation[-1][0] == 150.0 and regulation[-1][1] > 0
    assert max(eta for _, eta in efficiency) < 100


def test_the_analysis_tool_takes_readings_and_says_infinite(page_client):
    log_in(page_client)
    # docs/references.md R7 worked check: 10 kVA 2000/400 V; with the open-circuit current all in phase
    # (60 W at 400 V is 0.15 A) the magnetising reactance is infinite.
    query = {"rating_kva": "10", "phases": "1", "hv_v": "2000", "lv_v": "400", "reference_temp_c": "75",
             "standard": "iec", "circuit_side": "hv", "oc_side": "lv", "oc_voltage_v": "400", "oc_current_a": "0.15",
             "oc_power_w": "60", "sc_side": "hv", "sc_voltage_v": "100", "sc_current_a": "5", "sc_power_w": "100",
             "sc_winding_temp_c": "75", "sc_i2r_w": "100", "curve_power_factor": "0.8", "curve_lagging": "false"}
    page = page_client.get("/test-analysis", params=query, headers=HX)
    assert page.status_code == 200 and page.text.lstrip().startswith('<div id="analysis">')
    words = _text(page.text)
    assert "X0, magnetising reactance infinite" in words
    assert "Req, series resistance 4.0000" in words  # Req = 100 W / 5 A^2 = 4 ohm
    assert "Give the guaranteed no-load and load losses" in words
    assert "power factor 0.8 leading" in words
    bad = page_client.get("/test-analysis", params=query | {"sc_i2r_w": "150"})
    assert bad.status_code == 422
    assert "cannot exceed the measured load loss" in error_beside(bad.text, "ta-sc_i2r_w")
    assert "Correct the readings marked above" in bad.text
