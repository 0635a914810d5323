"""The planner's workflow: load shapes, per-lot loading, revisions, price paths and workings."""

from __future__ import annotations

import calendar
import csv
import io
from datetime import datetime, timedelta

import numpy as np
import pytest
from openpyxl import Workbook

from tests import factories as f

YEAR = 2026  # not a leap year: 8760 hours


def _year_series(seed: int = 1) -> np.ndarray:
    hours = np.arange(8760)
    rng = np.random.default_rng(seed)
    daily = 0.55 + 0.35 * np.sin((hours % 24 - 7) / 24 * 2 * np.pi).clip(0)
    seasonal = 1 + 0.25 * np.cos(hours / 8760 * 2 * np.pi)
    return 300 * daily * seasonal * (1 + 0.05 * rng.standard_normal(8760)).clip(0.5)


def _csv(values, header=("timestamp", "kva"), start=datetime(YEAR, 1, 1), extra=None) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(header)
    for k, value in enumerate(values):
        row = [(start + timedelta(hours=k)).strftime("%Y-%m-%d %H:%M"), value]
        if extra:
            row.extend(extra(k))
        writer.writerow(row)
    return out.getvalue().encode()


def _import(client, content: bytes, name="Metered feeder", filename="year.csv", **form):
    return client.post(
        "/api/v1/load-shapes/import",
        data={"name": name, **{k: str(v) for k, v in form.items()}},
        files={"file": (filename, content, "text/csv")},
    )


def test_uploaded_year_loss_factor_equals_independent_value(client):
    values = _year_series()
    r = _import(client, _csv(values))
    assert r.status_code == 201, r.text
    body = r.json()
    # Independent computation of the definitions in docs/references.md R4.
    assert body["loss_factor"] == pytest.approx(np.mean(values**2) / values.max() ** 2, rel=1e-12)
    assert body["load_factor"] == pytest.approx(values.mean() / values.max(), rel=1e-12)
    assert body["peak"] == pytest.approx(values.max())
    assert body["equivalent_hours"] == pytest.approx(8760 * np.mean(values**2) / values.max() ** 2)
    assert body["hours"] == 8760 and body["unit"] == "kva"
    shapes = client.get("/api/v1/load-shapes").json()
    assert [s["name"] for s in shapes] == ["Metered feeder"] and shapes[0]["peak_pu"] == 1.0
    values_out = client.get(f"/api/v1/load-shapes/{body['id']}/values").json()
    assert values_out["duration_curve"][0] == pytest.approx(values.max())
    assert values_out["duration_curve"] == sorted(values_out["duration_curve"], reverse=True)


def test_xlsx_in_kw_with_power_factor_becomes_apparent_power(client):
    values = _year_series(2)
    pf = np.where(np.arange(8760) % 2 == 0, 0.9, 0.8)
    book = Workbook()
    sheet = book.active
    sheet.append(["timestamp", "kw", "power_factor"])
    for k in range(8760):
        sheet.append([datetime(YEAR, 1, 1) + timedelta(hours=k), float(values[k]), float(pf[k])])
    buffer = io.BytesIO()
    book.save(buffer)
    r = _import(client, buffer.getvalue(), filename="year.xlsx")
    assert r.status_code == 201, r.text
    kva = values / pf  # losses follow the current, so the apparent power
    assert r.json()["loss_factor"] == pytest.approx(np.mean(kva**2) / kva.max() ** 2, rel=1e-12)


def test_daily_curves_expand_to_the_year_built_by_hand(client):
    winter = {"name": "Winter", "months": [1, 2, 3, 10, 11, 12],
              "weekday": [0.4] * 7 + [0.8] * 10 + [1.0] * 4 + [0.6] * 3, "weekend": [0.5] * 24}
    summer = {"name": "Summer", "months": [4, 5, 6, 7, 8, 9],
              "weekday": [0.3] * 8 + [0.6] * 12 + [0.4] * 4, "weekend": [0.35] * 24}
    r = client.post("/api/v1/load-shapes", json={"kind": "daily", "name": "Residential", "year": YEAR,
                                                 "seasons": [winter, summer]})
    assert r.status_code == 201, r.text
    # The same year built by hand with a plain loop over the calendar.
    by_hand = []
    for month in range(1, 13):
        season = winter if month in winter["months"] else summer
        for day in range(1, calendar.monthrange(YEAR, month)[1] + 1):
            weekend = datetime(YEAR, month, day).weekday() >= 5
            by_hand.extend(season["weekend"] if weekend else season["weekday"])
    stored = client.get(f"/api/v1/load-shapes/{r.json()['id']}/values").json()["values"]
    assert stored == by_hand
    values = np.array(by_hand)
    assert r.json()["loss_factor"] == pytest.approx(np.mean(values**2) / values.max() ** 2, rel=1e-12)


def _pw_by_hand(price, escalation, capacity, discount, years, peak, growth, lsf, rf, cooling=0.0):
    """An independent year-by-year present-worth loop (docs/references.md R3 conventions)."""
    a = b = c = 0.0
    for t in range(1, years + 1):
        d = (1 + discount) ** t
        price_t = price * (1 + escalation) ** (t - 1)
        peak_t = peak * (1 + growth) ** (t - 1)
        a += (capacity + price_t * 8760) / d
        b += (capacity * rf + price_t * 8760 * lsf) * peak_t**2 / d
        c += (capacity * rf + price_t * cooling) / d
    return a, b, c


def test_per_lot_loading_gives_lot_rates_matching_a_hand_table(client):
    basis = client.post("/api/v1/cost-bases", json=f.present_worth_basis()).json()
    shape = _import(client, _csv(_year_series())).json()
    lots = [
        f.lot(name="Basis loading"),
        f.lot(name="Own loading", load_shape_id=shape["id"], peak_load_pu=1.1, load_growth_pct=2.5),
    ]
    tender = client.post("/api/v1/tenders", json=f.tender(basis["id"], lots=lots)).json()
    plain, own = (client.get(f"/api/v1/lots/{lot['id']}/ranking").json() for lot in tender["lots"])
    # Basis: 0.08/kWh +2 %, 60/kW-year, 6 %, 30 years, peak 0.8 +1 %, LsF 0.3, RF 0.9, 500 h cooling.
    a, b, c = _pw_by_hand(0.08, 0.02, 60.0, 0.06, 30, 0.8, 0.01, 0.3, 0.9, 500.0)
    assert plain["no_load_rate_per_kw"] == pytest.approx(a, rel=1e-9)
    assert plain["load_rate_per_kw"] == pytest.approx(b, rel=1e-9)
    assert plain["aux_rate_per_kw"] == pytest.approx(c, rel=1e-9)
    assert plain["loading"]["source"] == "cost basis"
    a2, b2, _ = _pw_by_hand(0.08, 0.02, 60.0, 0.06, 30, 1.1, 0.025, shape["loss_factor"], 0.9)
    assert own["no_load_rate_per_kw"] == pytest.approx(a2, rel=1e-9)
    assert own["load_rate_per_kw"] == pytest.approx(b2, rel=1e-9)
    assert own["load_rate_per_kw"] != pytest.approx(plain["load_rate_per_kw"])
    assert own["loading"]["source"] == "lot" and "Metered feeder" in own["loading"]["note"]


def test_two_lots_with_different_shapes_get_different_b(client):
    basis = client.post("/api/v1/cost-bases", json=f.present_worth_basis()).json()
    flat = _import(client, _csv(np.full(8760, 100.0)), name="Flat").json()
    peaky = _import(client, _csv(_year_series()), name="Peaky").json()
    assert flat["loss_factor"] == pytest.approx(1.0)
    lots = [f.lot(name="Factory", load_shape_id=flat["id"]), f.lot(name="Houses", load_shape_id=peaky["id"])]
    tender = client.post("/api/v1/tenders", json=f.tender(basis["id"], lots=lots)).json()
    factory, houses = (client.get(f"/api/v1/lots/{lot['id']}/ranking").json() for lot in tender["lots"])
    assert factory["load_rate_per_kw"] > houses["load_rate_per_kw"]
    assert factory["no_load_rate_per_kw"] == pytest.approx(houses["no_load_rate_per_kw"])
    assert "Flat" in factory["loading"]["note"] and "Peaky" in houses["loading"]["note"]


def test_direct_basis_says_lot_loading_is_not_used(client):
    shape = _import(client, _csv(_year_series())).json()
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    tender = client.post("/api/v1/tenders", json=f.tender(basis_id, lots=[f.lot(load_shape_id=shape["id"])])).json()
    ranking = client.get(f"/api/v1/lots/{tender['lots'][0]['id']}/ranking").json()
    assert ranking["load_rate_per_kw"] == 1500.0 and "directly" in ranking["loading"]["note"]


def test_unknown_load_shape_on_a_lot_is_422(client):
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    r = client.post("/api/v1/tenders", json=f.tender(basis_id, lots=[f.lot(load_shape_id=999)]))
    assert r.status_code == 422
    assert client.get("/api/v1/tenders").json() == []


# --- bad uploads -------------------------------------------------------------------------------

def _state(client):
    return client.get("/api/v1/load-shapes").json()


@pytest.mark.parametrize(
    ("make", "expected_rows", "words"),
    [
        (lambda v: _csv([*v[:100], -5.0, *v[101:]]), [102], "negative"),
        (lambda v: _csv([*v[:10], "lots", *v[11:]]), [12], "not a number"),
        (lambda v: _csv(v[:8000]), [], "8000 data rows"),
        (lambda v: _csv(v, header=("when", "kva")), [], "timestamp"),
        (lambda v: _csv(v, header=("timestamp", "kva", "unit"), extra=lambda k: ["kW" if k in (5, 6) else "kVA"]),
         [7, 8], "mixed units"),
    ],
    ids=["negative", "text", "short", "no-timestamp", "mixed-units"],
)
def test_bad_uploads_are_refused_with_rows_and_store_nothing(client, make, expected_rows, words):
    values = [round(float(v), 3) for v in _year_series()]
    r = _import(client, make(values))
    assert r.status_code == 422, r.text
    problems = r.json()["problems"]
    text = " ".join(p["message"] for p in problems)
    assert words in text, problems
    if expected_rows:
        assert any(p["rows"] == expected_rows for p in problems), problems
    assert _state(client) == []


def test_duplicate_and_missing_hours(client):
    values = [round(float(v), 3) for v in _year_series()]
    content = _csv(values).decode().splitlines()
    duplicated = "\n".join(content[:51] + [content[50]] + content[51:]).encode()
    r = _import(client, duplicated)
    assert r.status_code == 422 and any("duplicate hour" in p["message"] for p in r.json()["problems"])
    gap = "\n".join(content[:1001] + content[1004:]).encode()  # three hours missing
    r = _import(client, gap)
    assert r.status_code == 422
    assert _state(client) == []
    r = _import(client, gap, fill_gaps_up_to_hours=2)
    assert r.status_code == 422 and "missing hours" in r.json()["problems"][0]["message"]
    r = _import(client, gap, fill_gaps_up_to_hours=3)
    assert r.status_code == 201, r.text
    assert r.json()["filled_hours"] == 3 and "3 h filled" in r.json()["source"]


# --- revisions ---------------------------------------------------------------------------------

def test_revision_list_diff_and_preview_lists_exactly_the_changed_lots(client):
    basis = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    lots = [f.lot(name="Sensitive"), f.lot(name="Stable")]
    tender = client.post("/api/v1/tenders", json=f.tender(basis["id"], lots=lots)).json()
    sensitive, stable = (lot["id"] for lot in tender["lots"])
    # Sensitive lot: a cheap lossy offer wins only while the no-load rate is low.
    client.post(f"/api/v1/lots/{sensitive}/offers", json=f.offer(bidder="Lean", unit_price=12000, no_load_loss_w=300))
    client.post(f"/api/v1/lots/{sensitive}/offers", json=f.offer(bidder="Lossy", unit_price=11000, no_load_loss_w=600))
    # Stable lot: one offer is better on price and on losses.
    client.post(f"/api/v1/lots/{stable}/offers", json=f.offer(bidder="Good", unit_price=10000, no_load_loss_w=300))
    client.post(f"/api/v1/lots/{stable}/offers", json=f.offer(bidder="Bad", unit_price=12000, no_load_loss_w=600))
    client.patch(f"/api/v1/cost-bases/{basis['id']}", json=f.revision(1, no_load_rate_per_kw=1000))

    revisions = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions").json()
    assert [r["revision"] for r in revisions] == [1, 2] and revisions[1]["created_by"] == "tester"
    diff = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions/2/diff", params={"against": 1}).json()
    changed = {c["field"]: c for c in diff["changes"]}
    assert set(changed) == {"no_load_rate_per_kw"}
    assert changed["no_load_rate_per_kw"]["before"] == 6000 and changed["no_load_rate_per_kw"]["after"] == 1000

    preview = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions/2/preview").json()
    assert preview["changed_lot_ids"] == [sensitive]
    lot = next(lot for lot in preview["lots"] if lot["lot_id"] == sensitive)
    assert lot["leader_changes"] and lot["current_revision"] == 1
    lean = next(row for row in lot["rows"] if row["bidder"] == "Lean")
    assert lean["rank_now"] == 1 and lean["rank_then"] == 2
    assert lean["toc_change"] == pytest.approx(-5000 * 0.3)  # (1000 - 6000) per kW x 0.3 kW
    # Nothing moved: the tender is still on revision 1 until someone moves it (an audited edit).
    assert client.get(f"/api/v1/tenders/{tender['id']}").json()["cost_basis_revision"] == 1
    moved = client.patch(f"/api/v1/tenders/{tender['id']}", json={"version": 1, "cost_basis_revision": 2})
    assert moved.status_code == 200
    audit = client.get("/api/v1/audit", params={"object_type": "tender", "object_id": tender["id"]}).json()
    assert audit[0]["action"] == "update" and "cost_basis_revision_id" in audit[0]["after"]


def test_price_path_and_carbon_in_the_workings(client):
    path = [0.08, 0.085, 0.09, 0.095, 0.10]
    body = f.present_worth_basis(years=5, energy_price_path_per_kwh=path, carbon_price_per_t=80.0,
                                 emission_factor_t_per_mwh=0.25)
    r = client.post("/api/v1/cost-bases", json=body)
    assert r.status_code == 201, r.text
    basis = r.json()
    work = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions/1/workings").json()
    assert work["table_columns"][0] == "year" and len(work["table"]) == 5
    terms = {(t["rate"], t["component"]): t["value_per_kw"] for t in work["terms"]}
    # Independent loop: carbon 80 EUR/t x 0.25 t/MWh = 0.02 EUR/kWh on top of each year's price.
    carbon_a = sum(0.02 * 8760 / 1.06**t for t in range(1, 6))
    energy_a = sum(path[t - 1] * 8760 / 1.06**t for t in range(1, 6))
    assert terms[("A", "carbon")] == pytest.approx(carbon_a, rel=1e-12)
    assert terms[("A", "energy")] == pytest.approx(energy_a, rel=1e-12)
    assert sum(v for (rate, _), v in terms.items() if rate == "A") == pytest.approx(basis["no_load_rate_per_kw"])
    csv_text = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions/1/workings.csv").text
    rows = list(csv.reader(io.StringIO(csv_text)))
    assert rows[0][0] == "year" and len(rows) == 6


def test_price_path_length_must_match_years(client):
    r = client.post("/api/v1/cost-bases", json=f.present_worth_basis(years=3, energy_price_path_per_kwh=[0.1, 0.1]))
    assert r.status_code == 422
    assert "energy_price_path_per_kwh" in str(r.json()["detail"])


# --- cost basis warnings and the reason for each revision ----------------------------------------

def _warnings(body) -> dict[str, dict]:
    return {w["field"]: w for w in body["warnings"]}


def test_unusual_inputs_are_warned_about_and_still_saved(client):
    # -2 % discount; 0.9 pu growing 2 % a year is above 1.0 pu from year 7 (0.9 x 1.02^6 = 1.0135).
    r = client.post("/api/v1/cost-bases", json=f.present_worth_basis(discount_rate_pct=-2.0, peak_load_pu=0.9,
                                                                     load_growth_pct=2.0, energy_escalation_pct=0.0))
    assert r.status_code == 201, r.text
    created = r.json()
    found = _warnings(created)
    assert set(found) == {"discount_rate_pct", "peak_load_pu"}
    assert found["discount_rate_pct"]["code"] == "negative_discount_rate"
    assert found["discount_rate_pct"]["message"].startswith("Discount rate is -2 % a year")
    assert "first in year 7" in found["peak_load_pu"]["message"]
    assert created["revisions"][0]["warnings"] == created["warnings"]
    # A price path with one year out of band: a warning naming that year, and the revision is made.
    path = [0.08] * 29 + [2.5]
    change = f.revision(1, "Price forecast with a spike", discount_rate_pct=6.0, energy_price_path_per_kwh=path)
    r = client.patch(f"/api/v1/cost-bases/{created['id']}", json=change)
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["revision"] == 2 and body["inputs"]["energy_price_path_per_kwh"] == path
    assert set(_warnings(body)) == {"peak_load_pu", "energy_price_path_per_kwh"}
    assert "the price of year 30, 2.5 EUR/kWh, is outside" in _warnings(body)["energy_price_path_per_kwh"]["message"]
    listed = client.get(f"/api/v1/cost-bases/{created['id']}/revisions").json()
    assert [set(_warnings(rev)) for rev in listed] == [{"discount_rate_pct", "peak_load_pu"},
                                                       {"peak_load_pu", "energy_price_path_per_kwh"}]
    assert client.get("/api/v1/cost-bases").json()[0]["warnings"] == body["warnings"]


def test_fixed_charge_rate_levelised_peak_above_the_rating_is_warned_about(client):
    body = {"name": "FCR", "currency": "EUR", "method": "fixed_charge_rate", "system_capacity_cost_per_kw_year": 90.0,
            "energy_cost_per_kwh": 0.06, "fixed_charge_rate_pct": 10.0, "peak_load_pu": 1.0, "loss_factor": 0.3}
    at_rating = client.post("/api/v1/cost-bases", json=body).json()
    assert at_rating["warnings"] == []
    above = client.post("/api/v1/cost-bases", json=body | {"name": "FCR 2", "peak_load_pu": 1.1}).json()
    assert [w["code"] for w in above["warnings"]] == ["levelised_peak_above_rating"]


@pytest.mark.parametrize("reason", [None, "", "   "])
def test_a_new_revision_without_a_reason_is_422_naming_change_reason(client, reason):
    basis = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    change = {"version": 1, "load_rate_per_kw": 1700} | ({} if reason is None else {"change_reason": reason})
    r = client.patch(f"/api/v1/cost-bases/{basis['id']}", json=change)
    assert r.status_code == 422
    assert [err["loc"][-1] for err in r.json()["detail"]] == ["change_reason"]
    stored = client.get(f"/api/v1/cost-bases/{basis['id']}").json()
    assert stored["revision"] == 1 and stored["version"] == 1
    # A change that makes no revision (the name alone) needs no reason.
    renamed = client.patch(f"/api/v1/cost-bases/{basis['id']}", json={"version": 1, "name": "Renamed"})
    assert renamed.status_code == 200 and renamed.json()["revision"] == 1


def test_the_reason_is_kept_in_the_api_the_diff_and_the_audit_trail(client):
    basis = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    assert basis["revisions"][0]["change_reason"] is None  # a first revision changes nothing
    reason = "Utility published new A and B for 2027"
    r = client.patch(f"/api/v1/cost-bases/{basis['id']}", json=f.revision(1, f"  {reason}  ", load_rate_per_kw=1700))
    assert r.status_code == 200, r.text
    assert [rev["change_reason"] for rev in r.json()["revisions"]] == [None, reason]
    listed = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions").json()
    assert listed[1]["change_reason"] == reason
    diff = client.get(f"/api/v1/cost-bases/{basis['id']}/revisions/2/diff", params={"against": 1}).json()
    assert diff["change_reason"] == reason
    events = client.get("/api/v1/audit", params={"object_type": "cost_basis_revision"}).json()
    created = [e for e in events if e["action"] == "create" and e["after"]["revision"] == 2]
    assert len(created) == 1 and created[0]["after"]["change_reason"] == reason
