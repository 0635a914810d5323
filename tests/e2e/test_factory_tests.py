"""Factory test certificates through the API: analysis, verdicts, penalties, a lot summary."""

from __future__ import annotations

import csv
import io

import pytest

from tests import factories as f
from tests.conftest import auth

# docs/references.md R7 worked check (textbook example, short-circuit data): 10 kVA 2000/400 V,
# tested on the HV side at 100 V, 5 A, 100 W: Req = 4 ohm, |Zeq| = 20 ohm, Xeq = 8 sqrt(6) ohm;
# referred to the LV side Zeq = 0.16 + j0.784 ohm. The open-circuit readings below are invented.
WORKED = {
    "rating_kva": 10, "phases": 1, "hv_v": 2000, "lv_v": 400, "reference_temp_c": 75,
    "open_circuit": {"side": "lv", "voltage_v": 400, "current_a": 1.0, "power_w": 60},
    "short_circuit": {"side": "hv", "voltage_v": 100, "current_a": 5, "power_w": 100, "winding_temp_c": 75,
                      "i2r_w": 100},
}


def test_worked_example_equivalent_circuit(client):
    r = client.post("/api/v1/test-analysis", json=WORKED)
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["req_ohm"] == pytest.approx(4.0) and body["xeq_ohm"] == pytest.approx(8 * 6**0.5)
    assert body["impedance_pct"] == pytest.approx(5.0)  # 100 V of 2000 V at rated current
    lv = client.post("/api/v1/test-analysis", json={**WORKED, "circuit_side": "lv"}).json()
    assert lv["req_ohm"] == pytest.approx(0.16) and lv["xeq_ohm"] == pytest.approx(0.784, abs=5e-4)
    # Open circuit on LV: G = 60/400^2, |Y| = 1/400; R0 = 2666.7 ohm on LV.
    assert lv["r0_ohm"] == pytest.approx(400**2 / 60)
    assert body["within_tolerance"] is None and body["findings"] == []


def test_operating_points_balance_energy(client):
    points = [{"load_pu": k, "power_factor": 0.85, "lagging": lag} for k in (0.25, 0.5, 1.0) for lag in (True, False)]
    body = client.post("/api/v1/test-analysis", json={**WORKED, "operating_points": points}).json()
    for point in body["operating_points"]:
        balance = point["output_power_w"] + point["losses_w"]
        assert point["input_power_w"] == pytest.approx(balance, rel=1e-9)
        assert point["efficiency_pct"] == pytest.approx(100 * point["output_power_w"] / point["input_power_w"])
    lagging_full = next(p for p in body["operating_points"] if p["load_pu"] == 1.0 and p["lagging"])
    assert lagging_full["regulation_pct"] > 0


def test_temperature_correction_hand_calculation(client):
    # Hand calculation (formula of IEC 60076-1, from memory): 400 kVA, rated HV current
    # 400e3 / (sqrt(3) 20 kV) = 11.547 A; measured at that current 3,600 W at 25 C of which I2R 3,000 W.
    # To 75 C, copper (235): 3000 x 310/260 + 600 x 260/310 = 3576.92 + 503.23 = 4080.15 W.
    body = {
        "rating_kva": 400, "phases": 3, "hv_v": 20000, "lv_v": 400, "reference_temp_c": 75,
        "open_circuit": {"side": "lv", "voltage_v": 400, "current_a": 1.2, "power_w": 380},
        "short_circuit": {"side": "hv", "voltage_v": 800, "current_a": 400e3 / (3**0.5 * 20000), "power_w": 3600,
                          "winding_temp_c": 25, "i2r_w": 3000},
        "guarantee": {"no_load_loss_w": 400, "load_loss_w": 4000, "impedance_pct": 4.0, "no_load_current_pct": 0.5},
    }
    out = client.post("/api/v1/test-analysis", json=body).json()
    assert out["load_loss_at_reference_w"] == pytest.approx(3000 * 310 / 260 + 600 * 260 / 310)
    assert out["no_load_current_pct"] == pytest.approx(100 * 1.2 / (400e3 / (3**0.5 * 400)))
    assert out["within_tolerance"] is True
    aluminium = client.post("/api/v1/test-analysis", json={**body, "conductor": "aluminium"}).json()
    assert aluminium["load_loss_at_reference_w"] == pytest.approx(3000 * 300 / 250 + 600 * 250 / 300)


def test_components_pass_but_total_fails(client):
    # IEC 60076-1 Table 1: each component +15 % provided the total stays within +10 %.
    # Guarantee 1,000 + 10,000 W; measured +12 % on both: each within +15 %, total +12 % > +10 %.
    body = {
        "rating_kva": 1000, "phases": 3, "hv_v": 20000, "lv_v": 400, "reference_temp_c": 75,
        "open_circuit": {"side": "lv", "voltage_v": 400, "current_a": 3, "power_w": 1120},
        "short_circuit": {"side": "hv", "voltage_v": 1200, "current_a": 1000e3 / (3**0.5 * 20000), "power_w": 11200,
                          "winding_temp_c": 75, "i2r_w": 9000},
        "guarantee": {"no_load_loss_w": 1000, "load_loss_w": 10000},
    }
    out = client.post("/api/v1/test-analysis", json=body).json()
    assert out["within_tolerance"] is False
    total = next(x for x in out["findings"] if "total" in x["rule"].lower())
    assert not total["passed"] and total["limit"] == pytest.approx(12100)
    ieee = client.post("/api/v1/test-analysis", json={**body, "standard": "ieee"}).json()
    assert ieee["within_tolerance"] is False and any("IEEE" in x["source"] for x in ieee["findings"])


def test_bad_readings_name_the_field(client):
    bad = {**WORKED, "short_circuit": {**WORKED["short_circuit"], "i2r_w": 150}}
    r = client.post("/api/v1/test-analysis", json=bad)
    assert r.status_code == 422 and "i2r_w" in str(r.json())
    r = client.post("/api/v1/test-analysis", json={**WORKED, "open_circuit": {**WORKED["open_circuit"], "power_w": -1}})
    assert r.status_code == 422 and "power_w" in str(r.json())


def _awarded_lot(client, reference="T-AWARD", **tender_terms):
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis(name=f"Basis {reference}")).json()["id"]
    body = f.tender(basis_id, reference=reference, lots=[f.lot(rating_kva=400, quantity=200)], **tender_terms)
    lot_id = client.post("/api/v1/tenders", json=body).json()["lots"][0]["id"]
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(no_load_loss_w=400, load_loss_w=4000, impedance_pct=4.0,
                                                               no_load_current_pct=0.5))
    client.post(f"/api/v1/lots/{lot_id}/award", json={})
    return lot_id


def _certificate(serial: str, p0: float, pk: float) -> dict:
    return {
        "serial_number": serial, "test_date": "2027-05-02", "laboratory": "Works test bay (invented)",
        "open_circuit": {"side": "lv", "voltage_v": 400, "current_a": 1.2, "power_w": p0},
        "short_circuit": {"side": "hv", "voltage_v": 800, "current_a": 400e3 / (3**0.5 * 20000), "power_w": pk,
                          "winding_temp_c": 75, "i2r_w": pk * 0.85},
    }


def test_certificates_need_an_awarded_lot_and_carry_verdict_and_penalty(client):
    _, _, open_lot = f.setup_lot(client)
    assert client.post(f"/api/v1/lots/{open_lot}/test-certificates", json=_certificate("S1", 400, 4000)).status_code == 409
    lot_id = _awarded_lot(client, penalty_multiplier=2.0)
    ok = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S1", 420, 4100))
    assert ok.status_code == 201, ok.text
    body = ok.json()
    assert body["within_tolerance"] and not body["rejected"]
    # Hand calculation: excess 20 W x 6000/kW + 100 W x 1500/kW = 120 + 150 = 270, times 2.
    assert body["penalty"] == pytest.approx(540.0)
    bad = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S2", 470, 4000)).json()
    assert not bad["within_tolerance"] and bad["rejected"]  # no-load +17.5 % > +15 %
    dup = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S1", 400, 4000))
    assert dup.status_code == 422


def test_credit_below_guarantee_is_a_contract_option(client):
    lot_id = _awarded_lot(client, penalty_credit_below=True)
    body = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S1", 380, 4000)).json()
    assert body["penalty"] == pytest.approx(-20 * 6.0)  # a credit of 20 W x 6000 per kW


def test_two_hundred_certificates_import_and_summary(client):
    lot_id = _awarded_lot(client)
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(["serial_number", "test_date", "laboratory", "oc_voltage_v", "oc_current_a", "oc_power_w",
                     "sc_voltage_v", "sc_current_a", "sc_power_w", "sc_winding_temp_c", "sc_i2r_w"])
    current = 400e3 / (3**0.5 * 20000)
    for k in range(200):
        writer.writerow([f"U{k:04d}", "2027-05-02", "Works bay", 400, 1.2, 390 + k % 20, 800, current,
                         3900 + k % 150, 75, 3300])
    r = client.post(f"/api/v1/lots/{lot_id}/test-certificates/import",
                    files={"file": ("certs.csv", out.getvalue().encode(), "text/csv")})
    assert r.status_code == 201, r.text[:500]
    summary = client.get(f"/api/v1/lots/{lot_id}/test-certificates/summary").json()
    assert summary["units_tested"] == 200 and summary["rejected_units"] == 0
    assert summary["no_load_deviation_worst_pct"] == pytest.approx(100 * (409 - 400) / 400)
    # Penalty by hand: sum over units of max(P0 - 400, 0) x 6 + max(Pk - 4000, 0) x 1.5 per W.
    expected = sum(max(390 + k % 20 - 400, 0) * 6.0 + max(3900 + k % 150 - 4000, 0) * 1.5 for k in range(200))
    assert summary["total_penalty"] == pytest.approx(expected)
    bad = "serial_number,test_date,laboratory,oc_voltage_v,oc_current_a,oc_power_w,sc_voltage_v,sc_current_a,sc_power_w,sc_winding_temp_c\nX1,2027-05-02,B,400,1.2,-3,800,11.547,4000,75\n"
    r = client.post(f"/api/v1/lots/{lot_id}/test-certificates/import", files={"file": ("c.csv", bad.encode(), "text/csv")})
    assert r.status_code == 422 and r.json()["problems"][0]["rows"] == [2]
    assert client.get(f"/api/v1/lots/{lot_id}/test-certificates/summary").json()["units_tested"] == 200


def test_a_rejected_unit_owes_no_penalty_and_the_summary_counts_it(client):
    lot_id = _awarded_lot(client)  # the tender's default terms reject a unit outside tolerance
    accepted = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S1", 420, 4100)).json()
    assert accepted["penalty"] == pytest.approx(270.0)  # 20 W x 6000/kW + 100 W x 1500/kW, by hand
    # No-load 470 W, +17.5 % > +15 % (IEC 60076-1 Table 1, as in test_certificates_need_...): rejected.
    # Accepted, it would owe 70 W x 6000/kW = 420; sent back, it owes nothing.
    rejected = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S2", 470, 4000)).json()
    assert rejected["rejected"] and not rejected["within_tolerance"]
    assert rejected["penalty"] == 0.0
    listed = {c["serial_number"]: c for c in client.get(f"/api/v1/lots/{lot_id}/test-certificates").json()}
    assert listed["S2"]["penalty"] == 0.0 and listed["S2"]["rejected"]
    summary = client.get(f"/api/v1/lots/{lot_id}/test-certificates/summary").json()
    assert (summary["units_tested"], summary["rejected_units"], summary["outside_tolerance_units"]) == (2, 1, 1)
    assert summary["total_penalty"] == pytest.approx(270.0)  # the accepted unit's alone


def test_a_unit_outside_tolerance_that_is_kept_owes_its_penalty(client):
    lot_id = _awarded_lot(client, reference="T-KEEP", reject_beyond_tolerance=False)
    kept = client.post(f"/api/v1/lots/{lot_id}/test-certificates", json=_certificate("S2", 470, 4000)).json()
    assert not kept["within_tolerance"] and not kept["rejected"]
    assert kept["penalty"] == pytest.approx(420.0)  # 70 W x 6000/kW, by hand
    summary = client.get(f"/api/v1/lots/{lot_id}/test-certificates/summary").json()
    assert (summary["rejected_units"], summary["outside_tolerance_units"]) == (0, 1)
    assert summary["total_penalty"] == pytest.approx(420.0)


# --- the import template and serial numbers as typed ---------------------------------------------

def _filled_row(serial: object) -> dict[str, object]:
    """One certificate row in the template's column names: a unit within tolerance (invented readings)."""
    return {"serial_number": serial, "test_date": "2027-05-02", "laboratory": "Works bay (invented)",
            "conductor": "copper", "reference_temp_c": 75, "oc_side": "lv", "oc_voltage_v": 400,
            "oc_current_a": 1.2, "oc_power_w": 410, "sc_side": "hv", "sc_voltage_v": 800,
            "sc_current_a": 400e3 / (3**0.5 * 20000), "sc_power_w": 4100, "sc_winding_temp_c": 75,
            "sc_i2r_w": 3500}


def test_cell_text_reads_a_cell_as_typed():
    from server.tabular import cell_text

    assert cell_text(None) == ""
    for typed in ("TX-10.05", "0012", "A.0B", "2026.0A", "12345.0"):
        assert cell_text(typed) == typed  # text is kept, ".0" and all
        assert cell_text(f"  {typed} ") == typed
    # A spreadsheet's number cell arrives as a float.
    assert cell_text(12345.0) == "12345" and cell_text(-7.0) == "-7" and cell_text(12345) == "12345"
    assert cell_text(10.05) == "10.05" and cell_text(1e20) == "100000000000000000000"
    assert cell_text(float("inf")) == "inf"


def test_csv_template_has_the_import_columns_and_imports_once_filled(client):
    from server.services.test_certificates import CERTIFICATE_COLUMNS

    lot_id = _awarded_lot(client)
    r = client.get(f"/api/v1/lots/{lot_id}/test-certificates/template.csv", headers=auth("viewer"))
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert f'filename="lot-{lot_id}-certificates.csv"' in r.headers["content-disposition"]
    rows = list(csv.reader(io.StringIO(r.text)))
    assert rows == [list(CERTIFICATE_COLUMNS)]  # the header alone: no invented row to import by mistake

    out = io.StringIO(r.text)
    out.seek(0, io.SEEK_END)
    writer = csv.DictWriter(out, fieldnames=rows[0], lineterminator="\r\n")
    # "2026.0A" and "TX-10.05" were cut at ".0" before (to "2026" and "TX-1").
    typed = ["TX-10.05", "0012", "A.0B", "2026.0A", " 12345.0 "]
    for serial in typed:
        writer.writerow(_filled_row(serial))
    r = client.post(f"/api/v1/lots/{lot_id}/test-certificates/import",
                    files={"file": ("filled.csv", out.getvalue().encode(), "text/csv")})
    assert r.status_code == 201, r.text[:500]
    assert sorted(c["serial_number"] for c in r.json()) == sorted(["TX-10.05", "0012", "A.0B", "2026.0A", "12345.0"])
    stored = {c["serial_number"] for c in client.get(f"/api/v1/lots/{lot_id}/test-certificates").json()}
    assert stored == {"TX-10.05", "0012", "A.0B", "2026.0A", "12345.0"}


def test_xlsx_template_has_the_import_columns_and_imports_once_filled(client):
    from openpyxl import load_workbook

    from server.services.test_certificates import CERTIFICATE_COLUMNS

    lot_id = _awarded_lot(client)
    r = client.get(f"/api/v1/lots/{lot_id}/test-certificates/template.xlsx")
    assert r.status_code == 200
    assert r.headers["content-type"] == "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
    book = load_workbook(io.BytesIO(r.content))
    sheet, notes = book.worksheets
    assert [c.value for c in sheet[1]] == list(CERTIFICATE_COLUMNS) and sheet.max_row == 1
    assert sheet.column_dimensions["A"].number_format == "@"  # typed serial numbers stay text
    assert [row[0] for row in notes.iter_rows(min_row=2, max_row=1 + len(CERTIFICATE_COLUMNS), values_only=True)] \
        == list(CERTIFICATE_COLUMNS)

    for serial in ("TX-10.05", "0012", "A.0B", 12345, 10.05):  # the last two typed as numbers
        row = _filled_row(serial)
        sheet.append([row[name] for name in CERTIFICATE_COLUMNS])
    filled = io.BytesIO()
    book.save(filled)
    r = client.post(f"/api/v1/lots/{lot_id}/test-certificates/import",
                    files={"file": ("filled.xlsx", filled.getvalue(), "application/octet-stream")})
    assert r.status_code == 201, r.text[:500]
    stored = {c["serial_number"] for c in client.get(f"/api/v1/lots/{lot_id}/test-certificates").json()}
    assert stored == {"TX-10.05", "0012", "A.0B", "12345", "10.05"}


def test_the_template_is_for_an_awarded_lot(client):
    _, _, open_lot = f.setup_lot(client)
    for kind in ("csv", "xlsx"):
        assert client.get(f"/api/v1/lots/{open_lot}/test-certificates/template.{kind}").status_code == 409
        assert client.get(f"/api/v1/lots/999999/test-certificates/template.{kind}").status_code == 404
