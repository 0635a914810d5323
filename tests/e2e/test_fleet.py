"""The installed fleet through the API: import, annual losses, groups, loading, shortlist."""

from __future__ import annotations

import csv
import io

import pytest
from openpyxl import Workbook
from sqlalchemy import create_engine, text

from tests import factories as f

HEADER = ["asset_id", "site", "region", "rating_kva", "phases", "insulation", "year_installed",
          "no_load_loss_w", "load_loss_w", "peak_load_kva", "peak_load_pu", "loss_factor", "load_shape"]
FLEET = [
    ["A-1", "Mill Lane", "North", 400, 3, "liquid", 1985, 900, 6000, "", 0.8, 0.3, ""],
    ["A-2", "Mill Lane", "North", 250, 3, "liquid", 2010, 450, 3500, 150, "", 0.25, ""],
    ["A-3", "Quay Road", "South", 630, 3, "dry", 2018, 1100, 7600, "", 0.5, 0.35, ""],
    ["A-4", "Quay Road", "South", 1000, 3, "liquid", 1978, "", "", "", 1.2, 0.4, ""],
]


def _csv(rows, header=HEADER) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue().encode()


def _import(client, rows, commit=True, **form):
    return client.post("/api/v1/fleet/import", data={"commit": str(commit).lower(), **{k: str(v) for k, v in form.items()}},
                       files={"file": ("fleet.csv", _csv(rows), "text/csv")})


def _basis(client):
    # First-year energy 0.1 EUR/kWh, capacity 50 EUR/kW-year, RF 0.8, carbon 100 EUR/t at 0.4 t/MWh.
    body = f.present_worth_basis(name="Fleet basis", energy_price_per_kwh=0.1, capacity_cost_per_kw_year=50.0,
                                 responsibility_factor=0.8, carbon_price_per_t=100.0, emission_factor_t_per_mwh=0.4,
                                 discount_rate_pct=6.0, energy_escalation_pct=0.0, load_growth_pct=0.0)
    return client.post("/api/v1/cost-bases", json=body).json()["id"]


def test_annual_losses_match_hand_calculation_and_totals(client):
    r = _import(client, FLEET[:3])
    assert r.status_code == 201, r.text
    assert r.json()["committed_at"] and r.json()["creates"] == 3
    basis_id = _basis(client)
    summary = client.get("/api/v1/fleet/summary", params={"cost_basis_id": basis_id}).json()
    # Hand calculation: no-load energy = P0 x 8760 h; load energy = Pk x peak^2 x LsF x 8760 h.
    peaks = [0.8, 150 / 250, 0.5]
    p0 = [900, 450, 1100]
    pk = [6000, 3500, 7600]
    lsf = [0.3, 0.25, 0.35]
    nl = [p / 1000 * 8760 for p in p0]
    ld = [k / 1000 * s**2 * fct * 8760 for k, s, fct in zip(pk, peaks, lsf, strict=True)]
    assert summary["units"] == 3
    assert summary["no_load_energy_kwh_per_year"] == pytest.approx(sum(nl))
    assert summary["load_energy_kwh_per_year"] == pytest.approx(sum(ld))
    # Cost: (0.1 + carbon 100 x 0.4 / 1000) per kWh, plus 50 per kW of loss at system peak (RF on load loss).
    energy_cost = (0.1 + 0.04) * (sum(nl) + sum(ld))
    capacity = 50 * sum(p / 1000 + 0.8 * k / 1000 * s**2 for p, k, s in zip(p0, pk, peaks, strict=True))
    assert summary["loss_cost_per_year"] == pytest.approx(energy_cost + capacity)
    assert summary["co2_t_per_year"] == pytest.approx((sum(nl) + sum(ld)) / 1000 * 0.4)
    rows = list(csv.DictReader(io.StringIO(client.get("/api/v1/fleet/units.csv",
                                                      params={"cost_basis_id": basis_id}).text)))
    assert sum(float(r["loss_cost"]) for r in rows) == pytest.approx(summary["loss_cost_per_year"], rel=1e-6)
    for by in ("region", "site", "rating", "vintage", "insulation"):
        groups = client.get("/api/v1/fleet/groups", params={"cost_basis_id": basis_id, "by": by}).json()["groups"]
        assert sum(g["units"] for g in groups) == 3
        assert sum(g["loss_cost_per_year"] for g in groups) == pytest.approx(summary["loss_cost_per_year"])


def test_estimated_losses_are_marked_everywhere(client):
    _import(client, FLEET)
    basis_id = _basis(client)
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert units["A-4"]["no_load_loss_estimated"] and units["A-4"]["load_loss_estimated"]
    assert not units["A-1"]["no_load_loss_estimated"]
    assert units["A-4"]["no_load_loss_w"] > 0
    rows = {r["asset_id"]: r for r in csv.DictReader(io.StringIO(
        client.get("/api/v1/fleet/units.csv", params={"cost_basis_id": basis_id}).text))}
    assert rows["A-4"]["no_load_loss_source"] == "estimated" and rows["A-1"]["no_load_loss_source"] == "given"
    summary = client.get("/api/v1/fleet/summary", params={"cost_basis_id": basis_id}).json()
    assert summary["units_with_estimated_losses"] == 1


def test_bad_rows_are_named_and_nothing_is_stored(client):
    rows = [list(r) for r in FLEET]
    rows[1][3] = "big"
    rows[2][6] = 1700
    rows[3][0] = "A-1"
    r = _import(client, rows)
    body = r.json()
    assert r.status_code == 201 and not body["can_commit"] and body["committed_at"] is None
    messages = {(p["column"], p["rows"][0]) for p in body["problems"]}
    assert ("rating_kva", 3) in messages and ("year_installed", 4) in messages and ("asset_id", 5) in messages
    assert client.get("/api/v1/fleet/units").json()["total"] == 0
    commit = client.post(f"/api/v1/fleet/imports/{body['id']}/commit")
    assert commit.status_code == 422
    assert client.get("/api/v1/fleet/units").json()["total"] == 0


def test_reimport_updates_by_asset_id(client):
    _import(client, FLEET)
    changed = [list(r) for r in FLEET]
    changed[0][7] = 800
    r = _import(client, changed).json()
    assert r["updates"] == 4 and r["creates"] == 0
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert units["A-1"]["no_load_loss_w"] == 800 and client.get("/api/v1/fleet/units").json()["total"] == 4


def test_direct_basis_has_no_energy_price(client):
    _import(client, FLEET)
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    r = client.get("/api/v1/fleet/summary", params={"cost_basis_id": basis_id})
    assert r.status_code == 422 and "energy price" in str(r.json())


def test_loading_findings(client):
    _import(client, FLEET)
    body = client.get("/api/v1/fleet/loading", params={"max_loading_pu": 1.0, "min_loading_pu": 0.55}).json()
    assert body["overloaded_count"] == 1 and body["overloaded"][0]["asset_id"] == "A-4"
    assert body["oversized_count"] == 1 and body["oversized"][0]["asset_id"] == "A-3"


def test_shortlist_positive_npv_saving_recomputed_independently(client):
    _import(client, FLEET)
    basis_id = _basis(client)
    request = {"cost_basis_id": basis_id, "candidate": "limit_table", "limit_table": "eu-tier-2",
               "replacement_cost_per_kva": 10.0, "replacement_cost_fixed": 1000.0, "installation_cost": 500.0,
               "service_life_years": 60, "sizing_years": 0, "load_growth_pct": 0.0, "max_loading_pu": 1.0,
               "reference_year": 2027, "min_npv": 0.0}
    out = client.post("/api/v1/fleet/shortlist", json=request).json()
    assert out["units_on_shortlist"] >= 1
    row = next(r for r in out["rows"] if r["asset_id"] == "A-1")
    # 400 kVA at 0.8 pu -> right-sized 400 kVA (320 kVA peak); EU Tier 2 400 kVA: 387 W, 3,250 W.
    assert row["right_sized_rating_kva"] == 400
    assert row["right_sized_rating_kva"] >= 0.8 * 400
    old = (0.14 * (900 / 1000 * 8760 + 6000 / 1000 * 0.64 * 0.3 * 8760) + 50 * (0.9 + 0.8 * 6.0 * 0.64))
    new = (0.14 * (387 / 1000 * 8760 + 3250 / 1000 * 0.64 * 0.3 * 8760) + 50 * (0.387 + 0.8 * 3.25 * 0.64))
    assert row["annual_saving"] == pytest.approx(old - new)
    remaining = 60 - (2027 - 1985)  # 18 years left of a 60-year service life
    npv = -(10 * 400 + 1000 + 500) + sum((old - new) / 1.06**t for t in range(1, remaining + 1))
    assert row["npv"] == pytest.approx(npv) and row["npv"] > 0
    assert out["rows"] == sorted(out["rows"], key=lambda r: -r["npv"])
    for r in out["rows"]:
        assert r["right_sized_rating_kva"] >= r["peak_load_pu"] * r["rating_kva"]
    text = client.post("/api/v1/fleet/shortlist.csv", json=request).text
    assert text.splitlines()[0].startswith("asset_id,region,site")


def test_typical_losses_are_user_editable(client):
    table = client.get("/api/v1/fleet/typical-losses").json()
    assert "Illustrative" in table["source"] or "illustrative" in table["source"].lower()
    rows = [[0, 1900, 2100, 100, 300, 2000], [0, 1900, 2100, 2000, 3000, 20000],
            [1, 1900, 2100, 100, 400, 2500], [1, 1900, 2100, 2000, 4000, 22000]]
    r = client.put("/api/v1/fleet/typical-losses", json={"name": "Ours", "source": "Sample tests 2026", "rows": rows})
    assert r.status_code == 200, r.text
    _import(client, FLEET)
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert units["A-4"]["no_load_loss_w"] == pytest.approx(300 + (1000 - 100) / 1900 * 2700)


# --- the import at the edges: chunk boundaries, blanks, text, re-imports, load shapes, workbooks ---

def _units(count: int) -> list[list]:
    """``count`` clean units U0001, U0002, ... on spreadsheet rows 2 to count + 1."""
    return [[f"U{k:04d}", "Site", "North", 400, 3, "liquid", 2000, 600, 4800, "", 0.6, 0.3, ""]
            for k in range(1, count + 1)]


def _problems(body) -> list[tuple[str, str, list[int]]]:
    return [(p["column"], p["message"], p["rows"]) for p in body["problems"]]


def _stored(db_url: str, sql: str) -> list[tuple]:
    engine = create_engine(db_url)
    try:
        with engine.connect() as conn:
            return [tuple(row) for row in conn.execute(text(sql))]
    finally:
        engine.dispose()


def test_text_and_blank_cells_in_number_columns_are_named_by_row_across_the_file(client):
    # 1,300 rows: the file is read a few hundred rows at a time, and the rows named count on across.
    rows = _units(1300)
    rows[0][7] = ""  # row 2: no-load loss left blank -> estimated, not a problem
    rows[1][8] = "   "  # row 3: only spaces -> blank as well
    rows[1][3] = "n/a"  # row 3: text in a number column
    rows[698][10] = "high"  # row 700
    rows[899][10] = "inf"  # row 901: a number, but not a finite one
    rows[1099][0] = "U0001"  # row 1101: the id of row 2 again
    rows[1201][3] = "four hundred"  # row 1203
    r = _import(client, rows)
    body = r.json()
    assert r.status_code == 201 and not body["can_commit"] and body["committed_at"] is None
    # Every problem once, in the order the checks run, naming its rows.
    assert _problems(body) == [
        ("rating_kva", "not a number (rows 3 and 1203)", [3, 1203]),
        ("peak_load_pu", "not a number (row 700)", [700]),
        ("peak_load_pu", "not a finite number (row 901)", [901]),
        ("asset_id", "asset id appears twice (row 1101)", [1101]),
        ("rating_kva", "rating must be above 0 and at most 2,000,000 kVA (rows 3 and 1203)", [3, 1203]),
        ("peak_load_pu", "needs peak_load_pu or peak_load_kva (row 700)", [700]),
        ("peak_load_pu", "peak loading must be between 0 and 5 pu (row 901)", [901]),
    ]
    assert client.get("/api/v1/fleet/units").json()["total"] == 0
    for k in (1, 698, 899, 1201):
        rows[k] = _units(1300)[k]
    rows[1099][0] = "U1100"
    body = _import(client, rows).json()
    assert body["committed_at"] and body["creates"] == 1300
    assert (body["estimated_no_load"], body["estimated_load"]) == (1, 0)


def test_a_mixed_file_inserts_new_units_and_updates_known_ones(client, db_url):
    _import(client, FLEET)
    again = [list(FLEET[1]), list(FLEET[3]),
             ["B-1", "New Street", "East", 160, 1, "dry", 2021, 300, 2500, "", 0.4, 0.3, ""],
             ["B-2", "New Street", "East", 250, 3, "liquid", 2022, "", "", "", 0.5, 0.3, ""]]
    again[0][7] = 470  # A-2 measured again
    again[1][7], again[1][8] = 1500, 11000  # A-4's losses now measured, no longer estimated
    body = _import(client, again).json()
    assert body["committed_at"] and (body["creates"], body["updates"]) == (2, 2)
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert sorted(units) == ["A-1", "A-2", "A-3", "A-4", "B-1", "B-2"]
    assert units["A-2"]["no_load_loss_w"] == 470 and units["A-2"]["version"] == 2
    assert units["A-4"]["no_load_loss_w"] == 1500 and units["A-4"]["load_loss_w"] == 11000
    assert not units["A-4"]["no_load_loss_estimated"] and not units["A-4"]["load_loss_estimated"]
    assert units["A-4"]["version"] == 2
    assert units["A-1"]["version"] == 1 and units["A-3"]["version"] == 1  # not in the second file
    assert units["B-1"]["phases"] == 1 and units["B-1"]["insulation"] == "dry" and units["B-1"]["version"] == 1
    assert units["B-2"]["no_load_loss_estimated"] and units["B-2"]["load_loss_estimated"]
    assert units["B-2"]["no_load_loss_w"] > 0
    stamps = _stored(db_url, "SELECT asset_id, updated_at FROM fleet_units ORDER BY asset_id")
    assert stamps[1][1] == stamps[3][1] == stamps[4][1]  # one time for every row the import wrote
    assert stamps[0][1] != stamps[1][1]


def test_load_shape_names_give_the_loss_factor_and_an_unknown_name_is_named(client, db_url):
    day = [0.4] * 7 + [0.8] * 10 + [1.0] * 4 + [0.6] * 3
    shape = client.post("/api/v1/load-shapes", json={
        "kind": "daily", "name": "Residential", "year": 2026,
        "seasons": [{"name": "All year", "months": list(range(1, 13)), "weekday": day, "weekend": day}]}).json()
    rows = [list(r) for r in FLEET]
    rows[0][11], rows[0][12] = "", " residential "
    rows[1][11], rows[1][12] = "", "Nowhere"
    rows[2][12] = "Nowhere"  # a loss factor is given: the name is not looked at
    body = _import(client, rows).json()
    assert _problems(body) == [("load_shape", "no load shape of that name (row 3)", [3]),
                               ("loss_factor", "needs loss_factor or a known load_shape (row 3)", [3])]
    rows[1][12] = "RESIDENTIAL"
    assert _import(client, rows).json()["committed_at"]
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert units["A-1"]["loss_factor"] == units["A-2"]["loss_factor"] == pytest.approx(shape["loss_factor"])
    assert units["A-3"]["loss_factor"] == 0.35
    stored = dict(_stored(db_url, "SELECT asset_id, load_shape_id FROM fleet_units"))
    assert stored == {"A-1": shape["id"], "A-2": shape["id"], "A-3": None, "A-4": None}
    # Imported again with loss factors of their own, the units no longer follow the shape.
    assert _import(client, FLEET).json()["committed_at"]
    assert set(dict(_stored(db_url, "SELECT asset_id, load_shape_id FROM fleet_units")).values()) == {None}


def test_short_rows_are_read_as_blank_cells_and_empty_rows_are_dropped(client):
    lines = [",".join(HEADER),
             "A-1,Mill Lane,North,400,3,liquid,1985,900,6000,,0.8,0.3",  # no load_shape cell at all
             ",,,,,,,,,,,,",
             "",
             "A-2,,,250,3,,2010,450,3500,150,,0.25,,"]  # one cell too many, and empty
    r = client.post("/api/v1/fleet/import", data={"commit": "true"},
                    files={"file": ("fleet.csv", ("\n".join(lines) + "\n").encode(), "text/csv")})
    body = r.json()
    assert r.status_code == 201 and body["committed_at"], body["problems"]
    assert (body["rows"], body["creates"]) == (2, 2)
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert units["A-2"]["insulation"] == "liquid" and units["A-2"]["peak_load_pu"] == pytest.approx(0.6)


def test_a_workbook_with_numeric_ids_and_empty_cells(client):
    book = Workbook()
    sheet = book.active
    sheet.append(HEADER)
    sheet.append([1234, "Mill Lane", "North", 400, 3, "liquid", 1985, 900, 6000, None, 0.8, 0.3, None])
    sheet.append(["A-2", None, None, 250, None, "Dry", 2010, None, None, 150, None, 0.25, None])
    sheet.append(["A-3", None, None, "big", None, 7, 2010, None, None, None, 0.5, 0.25, None])
    buffer = io.BytesIO()
    book.save(buffer)
    body = client.post("/api/v1/fleet/import", data={"commit": "true"},
                       files={"file": ("fleet.xlsx", buffer.getvalue(), "application/octet-stream")}).json()
    assert [(p["column"], p["rows"]) for p in body["problems"]] == [
        ("rating_kva", [4]), ("rating_kva", [4]), ("insulation", [4])]
    sheet.delete_rows(4)
    buffer = io.BytesIO()
    book.save(buffer)
    body = client.post("/api/v1/fleet/import", data={"commit": "true"},
                       files={"file": ("fleet.xlsx", buffer.getvalue(), "application/octet-stream")}).json()
    assert body["committed_at"], body["problems"]
    units = {u["asset_id"]: u for u in client.get("/api/v1/fleet/units").json()["units"]}
    assert sorted(units) == ["1234", "A-2"]
    assert units["A-2"]["site"] == "" and units["A-2"]["phases"] == 3 and units["A-2"]["insulation"] == "dry"
    assert units["A-2"]["no_load_loss_estimated"] and units["A-2"]["peak_load_pu"] == pytest.approx(0.6)


def test_a_single_unit_loaded_beyond_5_pu_is_refused_and_the_fleet_stays_usable(client):
    # Found by the schema fuzzer: 625 kVA of peak on a 1 kVA unit was stored, and every
    # fleet-wide calculation then failed on it.
    unit = {"asset_id": "S-1", "rating_kva": 1, "year_installed": 2000, "peak_load_kva": 625, "loss_factor": 0.3}
    r = client.post("/api/v1/fleet/units", json=unit)
    assert r.status_code == 422 and "peak_load_kva" in r.text
    assert client.post("/api/v1/fleet/units", json=unit | {"peak_load_kva": 5}).status_code == 201
    assert client.get("/api/v1/fleet/loading").json()["overloaded_count"] == 1


def test_loading_limits_the_wrong_way_round_are_422(client):
    _import(client, FLEET)
    r = client.get("/api/v1/fleet/loading", params={"max_loading_pu": 0.5, "min_loading_pu": 0.8})
    assert r.status_code == 422 and "min_loading_pu" in r.text
