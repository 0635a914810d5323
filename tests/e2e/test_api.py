"""The JSON API end to end through HTTP, on SQLite and on PostgreSQL."""

from __future__ import annotations

import csv
import io

import pytest

from tests import factories as f


def _count(client, path: str) -> int:
    return len(client.get(path).json())


def _field_named(response, field: str) -> bool:
    return any(field in [str(p) for p in err["loc"]] for err in response.json()["detail"])


# --- cost bases -----------------------------------------------------------------------------

def test_cost_basis_direct_round_trip(client):
    r = client.post("/api/v1/cost-bases", json=f.direct_basis())
    assert r.status_code == 201, r.text
    body = r.json()
    assert body["revision"] == 1 and body["version"] == 1
    assert body["no_load_rate_per_kw"] == 6000.0
    assert body["load_rate_per_kw"] == 1500.0
    assert body["aux_rate_per_kw"] == 800.0
    assert client.get(f"/api/v1/cost-bases/{body['id']}").json()["name"] == "Test basis"


def test_cost_basis_present_worth_level_series(client):
    # With no escalation and no growth, A = (capacity cost + price * 8760) * PWF(i, n);
    # PWF(8 %, 30) = 11.2578 (standard finance identity, docs/references.md R3).
    body = f.present_worth_basis(
        energy_escalation_pct=0.0, load_growth_pct=0.0, discount_rate_pct=8.0, years=30,
        capacity_cost_per_kw_year=50.0, energy_price_per_kwh=0.1,
    )
    r = client.post("/api/v1/cost-bases", json=body)
    assert r.status_code == 201, r.text
    pwf = (1 - 1.08**-30) / 0.08
    assert r.json()["no_load_rate_per_kw"] == pytest.approx((50 + 0.1 * 8760) * pwf, rel=1e-12)


def test_cost_basis_fixed_charge_rate(client):
    body = {
        "name": "FCR", "currency": "USD", "method": "fixed_charge_rate",
        "system_capacity_cost_per_kw_year": 100.0, "energy_cost_per_kwh": 0.05,
        "fixed_charge_rate_pct": 10.0, "responsibility_factor": 0.8, "peak_load_pu": 0.9,
        "loss_factor": 0.25,
    }
    r = client.post("/api/v1/cost-bases", json=body)
    assert r.status_code == 201, r.text
    # Hand calculation of docs/references.md R3's formulas (from memory there).
    assert r.json()["no_load_rate_per_kw"] == pytest.approx((100 + 0.05 * 8760) / 0.10)
    assert r.json()["load_rate_per_kw"] == pytest.approx((100 * 0.8 + 0.05 * 8760 * 0.25) * 0.81 / 0.10)


def test_cost_basis_patch_makes_revision_and_keeps_old(client):
    created = client.post("/api/v1/cost-bases", json=f.present_worth_basis()).json()
    r = client.patch(
        f"/api/v1/cost-bases/{created['id']}", json=f.revision(1, energy_price_per_kwh=0.12)
    )
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["revision"] == 2 and body["version"] == 2
    assert body["inputs"]["energy_price_per_kwh"] == 0.12
    assert body["inputs"]["discount_rate_pct"] == 6.0  # kept from revision 1
    assert body["no_load_rate_per_kw"] > created["no_load_rate_per_kw"]
    old = body["revisions"][0]
    assert old["revision"] == 1 and old["inputs"]["energy_price_per_kwh"] == 0.08


def test_cost_basis_change_of_method_needs_its_inputs(client):
    created = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    r = client.patch(f"/api/v1/cost-bases/{created['id']}", json=f.revision(1, method="present_worth"))
    assert r.status_code == 422
    assert _field_named(r, "discount_rate_pct")
    assert client.get(f"/api/v1/cost-bases/{created['id']}").json()["revision"] == 1


def test_cost_basis_stale_patch_is_409_and_loses_nothing(client):
    created = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    first = client.patch(f"/api/v1/cost-bases/{created['id']}", json=f.revision(1, load_rate_per_kw=1700))
    assert first.status_code == 200
    stale = client.patch(f"/api/v1/cost-bases/{created['id']}", json=f.revision(1, load_rate_per_kw=99))
    assert stale.status_code == 409
    assert "changed by someone else" in stale.json()["detail"]
    assert stale.json()["current"]["load_rate_per_kw"] == 1700
    assert client.get(f"/api/v1/cost-bases/{created['id']}").json()["load_rate_per_kw"] == 1700


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"method": "guesswork"}, "method"),
        ({"no_load_rate_per_kw": -1}, "no_load_rate_per_kw"),
        ({"no_load_rate_per_kw": "lots"}, "no_load_rate_per_kw"),
        ({"currency": "euro"}, "currency"),
        ({"name": ""}, "name"),
        ({"no_load_rate_per_kw": 1e12}, "no_load_rate_per_kw"),
    ],
)
def test_cost_basis_bad_input_is_422_naming_the_field(client, change, field):
    r = client.post("/api/v1/cost-bases", json=f.direct_basis(**change))
    assert r.status_code == 422
    assert _field_named(r, field), r.json()
    assert _count(client, "/api/v1/cost-bases") == 0


def test_cost_basis_missing_field_and_nan(client):
    body = f.direct_basis()
    del body["load_rate_per_kw"]
    r = client.post("/api/v1/cost-bases", json=body)
    assert r.status_code == 422 and _field_named(r, "load_rate_per_kw")
    raw = b'{"name": "n", "currency": "EUR", "method": "direct", "no_load_rate_per_kw": NaN, "load_rate_per_kw": 1}'
    r = client.post("/api/v1/cost-bases", content=raw, headers={"content-type": "application/json"})
    assert r.status_code == 422 and _field_named(r, "no_load_rate_per_kw")
    assert _count(client, "/api/v1/cost-bases") == 0


def test_cost_basis_name_must_be_unique(client):
    assert client.post("/api/v1/cost-bases", json=f.direct_basis()).status_code == 201
    r = client.post("/api/v1/cost-bases", json=f.direct_basis())
    assert r.status_code == 422 and _field_named(r, "name")


# --- tenders, lots ----------------------------------------------------------------------------

def test_tender_with_lots_round_trip(client):
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    body = f.tender(basis_id, lots=[f.lot(), f.lot(name="1000 kVA", rating_kva=1000, quantity=2)])
    r = client.post("/api/v1/tenders", json=body)
    assert r.status_code == 201, r.text
    tender = r.json()
    assert tender["cost_basis_id"] == basis_id and tender["cost_basis_revision"] == 1
    assert [lot["name"] for lot in tender["lots"]] == ["400 kVA ground-mounted", "1000 kVA"]
    lot = client.get(f"/api/v1/lots/{tender['lots'][1]['id']}").json()
    assert lot["tender_id"] == tender["id"] and lot["rating_kva"] == 1000
    assert [t["id"] for t in client.get("/api/v1/tenders").json()] == [tender["id"]]


def test_tender_patch_moves_cost_basis_and_checks_version(client):
    basis_id, tender_id, _ = f.setup_lot(client)
    other = client.post("/api/v1/cost-bases", json=f.present_worth_basis()).json()["id"]
    r = client.patch(f"/api/v1/tenders/{tender_id}", json={"version": 1, "cost_basis_id": other})
    assert r.status_code == 200, r.text
    assert r.json()["cost_basis_id"] == other and r.json()["version"] == 2
    stale = client.patch(f"/api/v1/tenders/{tender_id}", json={"version": 1, "title": "lost edit"})
    assert stale.status_code == 409
    assert client.get(f"/api/v1/tenders/{tender_id}").json()["title"] == "Test tender"


def test_tender_pins_a_revision(client):
    basis = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()
    client.patch(f"/api/v1/cost-bases/{basis['id']}", json=f.revision(1, load_rate_per_kw=2000))
    created = client.post("/api/v1/tenders", json=f.tender(basis["id"], cost_basis_revision=1)).json()
    ranking = client.get(f"/api/v1/lots/{created['lots'][0]['id']}/ranking").json()
    assert ranking["cost_basis_revision"] == 1 and ranking["load_rate_per_kw"] == 1500
    r = client.post("/api/v1/tenders", json=f.tender(basis["id"], reference="T-2", cost_basis_revision=9))
    assert r.status_code == 404


@pytest.mark.parametrize(
    ("lot_change", "field"),
    [
        ({"rating_kva": 0}, "rating_kva"),
        ({"rating_kva": 1e9}, "rating_kva"),
        ({"phases": 2}, "phases"),
        ({"quantity": 0}, "quantity"),
        ({"insulation": "gas"}, "insulation"),
        ({"max_no_load_loss_w": -5}, "max_no_load_loss_w"),
    ],
)
def test_tender_bad_lot_is_422_and_stores_nothing(client, lot_change, field):
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    r = client.post("/api/v1/tenders", json=f.tender(basis_id, lots=[f.lot(), f.lot(**lot_change)]))
    assert r.status_code == 422
    assert _field_named(r, field), r.json()
    assert _count(client, "/api/v1/tenders") == 0


def test_tender_needs_a_lot_and_a_known_basis(client):
    basis_id = client.post("/api/v1/cost-bases", json=f.direct_basis()).json()["id"]
    r = client.post("/api/v1/tenders", json=f.tender(basis_id, lots=[]))
    assert r.status_code == 422 and _field_named(r, "lots")
    assert client.post("/api/v1/tenders", json=f.tender(999)).status_code == 404
    assert _count(client, "/api/v1/tenders") == 0


def test_tender_reference_unique(client):
    basis_id, _, _ = f.setup_lot(client)
    r = client.post("/api/v1/tenders", json=f.tender(basis_id))
    assert r.status_code == 422 and _field_named(r, "reference")


def test_lot_add_patch_delete(client):
    _, tender_id, lot_id = f.setup_lot(client)
    added = client.post(f"/api/v1/tenders/{tender_id}/lots", json=f.lot(name="Second")).json()
    r = client.patch(f"/api/v1/lots/{added['id']}", json={"version": 1, "quantity": 7})
    assert r.status_code == 200 and r.json()["quantity"] == 7
    r = client.patch(f"/api/v1/lots/{added['id']}", json={"version": 2, "name": None})
    assert r.status_code == 422 and _field_named(r, "name")
    assert client.delete(f"/api/v1/lots/{added['id']}").status_code == 204
    assert client.delete(f"/api/v1/lots/{lot_id}").status_code == 422  # the last lot stays
    assert client.get(f"/api/v1/lots/{added['id']}").status_code == 404


def test_tender_delete_removes_lots_and_offers(client):
    _, tender_id, lot_id = f.setup_lot(client)
    offer_id = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer()).json()["id"]
    assert client.delete(f"/api/v1/tenders/{tender_id}").status_code == 204
    assert client.get(f"/api/v1/lots/{lot_id}").status_code == 404
    assert client.get(f"/api/v1/offers/{offer_id}").status_code == 404


# --- offers -------------------------------------------------------------------------------------

def test_offer_crud_and_stale_edit(client):
    _, _, lot_id = f.setup_lot(client)
    r = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
    assert r.status_code == 201, r.text
    offer = r.json()
    assert offer["version"] == 1 and offer["aux_loss_w"] == 0.0
    first = client.patch(f"/api/v1/offers/{offer['id']}", json={"version": 1, "unit_price": 11500})
    assert first.status_code == 200 and first.json()["version"] == 2
    stale = client.patch(f"/api/v1/offers/{offer['id']}", json={"version": 1, "unit_price": 1})
    assert stale.status_code == 409
    assert stale.json()["current"]["unit_price"] == 11500
    assert client.get(f"/api/v1/offers/{offer['id']}").json()["unit_price"] == 11500
    missing_version = client.patch(f"/api/v1/offers/{offer['id']}", json={"unit_price": 2})
    assert missing_version.status_code == 422 and _field_named(missing_version, "version")
    assert client.delete(f"/api/v1/offers/{offer['id']}").status_code == 204
    assert client.get(f"/api/v1/lots/{lot_id}/offers").json() == []


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"no_load_loss_w": -1}, "no_load_loss_w"),
        ({"load_loss_w": "high"}, "load_loss_w"),
        ({"unit_price": -100}, "unit_price"),
        ({"unit_price": 1e15}, "unit_price"),
        ({"impedance_pct": 0}, "impedance_pct"),
        ({"bidder": "  "}, "bidder"),
        ({"colour": "blue"}, "colour"),
    ],
)
def test_offer_bad_input_is_422_and_stores_nothing(client, change, field):
    _, _, lot_id = f.setup_lot(client)
    r = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(**change))
    assert r.status_code == 422
    assert _field_named(r, field), r.json()
    assert client.get(f"/api/v1/lots/{lot_id}/offers").json() == []


def test_offer_infinite_loss_refused(client):
    _, _, lot_id = f.setup_lot(client)
    raw = (
        b'{"bidder": "B", "unit_price": 1, "no_load_loss_w": Infinity, "load_loss_w": 1,'
        b' "impedance_pct": 4}'
    )
    r = client.post(f"/api/v1/lots/{lot_id}/offers", content=raw, headers={"content-type": "application/json"})
    assert r.status_code == 422 and _field_named(r, "no_load_loss_w")


def test_unknown_ids_are_404(client):
    assert client.get("/api/v1/lots/12345/ranking").status_code == 404
    assert client.post("/api/v1/lots/12345/offers", json=f.offer()).status_code == 404
    assert client.patch("/api/v1/offers/12345", json={"version": 1}).status_code == 404


# --- ranking ------------------------------------------------------------------------------------

def test_ranking_matches_hand_calculation(client):
    # Hand calculation, common practice (docs/references.md R2): TOC = price + A*P0 + B*Pk + C*Paux,
    # with A = 6000, B = 1500, C = 800 per kW.
    _, _, lot_id = f.setup_lot(client)
    offers = [
        f.offer(bidder="Cheap and lossy", unit_price=10000, no_load_loss_w=600, load_loss_w=5000),
        f.offer(bidder="Dear and lean", unit_price=12000, no_load_loss_w=300, load_loss_w=4000, aux_loss_w=100),
    ]
    for body in offers:
        assert client.post(f"/api/v1/lots/{lot_id}/offers", json=body).status_code == 201
    ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
    assert ranking["no_load_rate_per_kw"] == 6000 and ranking["quantity"] == 10
    first, second = ranking["rows"]
    assert first["bidder"] == "Dear and lean" and first["rank"] == 1
    assert first["capitalised_no_load"] == pytest.approx(1800.0)
    assert first["capitalised_load"] == pytest.approx(6000.0)
    assert first["capitalised_aux"] == pytest.approx(80.0)
    assert first["toc_per_unit"] == pytest.approx(19880.0)
    assert first["toc_total"] == pytest.approx(198800.0)
    assert second["toc_per_unit"] == pytest.approx(10000 + 3600 + 7500)
    # Efficiency at half load, unity power factor, without the auxiliary loss (cooling runs over
    # part of the load range only): 200 kW / (200 kW + 0.3 kW + 0.25 * 4.0 kW).
    assert first["efficiency_50_pct"] == pytest.approx(100 * 200 / (200 + 0.3 + 1.0))


def test_ranking_follows_the_cost_basis_revision(client):
    basis_id, tender_id, lot_id = f.setup_lot(client)
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="A", unit_price=10000, no_load_loss_w=600))
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="B", unit_price=11000, no_load_loss_w=400))
    assert client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"][0]["bidder"] == "B"
    client.patch(f"/api/v1/cost-bases/{basis_id}", json=f.revision(1, no_load_rate_per_kw=1000))
    # The tender stays on revision 1 until it is moved.
    assert client.get(f"/api/v1/lots/{lot_id}/ranking").json()["rows"][0]["bidder"] == "B"
    client.patch(f"/api/v1/tenders/{tender_id}", json={"version": 1, "cost_basis_id": basis_id})
    ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
    assert ranking["cost_basis_revision"] == 2
    assert ranking["rows"][0]["bidder"] == "A"


def test_ranking_csv_numbers_and_formula_neutralisation(client):
    _, _, lot_id = f.setup_lot(client)
    evil = ['=HYPERLINK("http://example.invalid","x")', "+1+2", "-3", "@SUM(A1)", "=cmd|' /C calc'!A0"]
    for i, name in enumerate(evil):
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder=name, unit_price=10000 + i))
    r = client.get(f"/api/v1/lots/{lot_id}/ranking.csv")
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/csv")
    assert "attachment" in r.headers["content-disposition"]
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == len(evil)
    for row in rows:
        assert row["bidder"].startswith("'"), row["bidder"]
        float(row["toc_per_unit"])  # numbers stay numbers
        assert not row["toc_per_unit"].startswith("'")
        assert row["cost_basis"] == "Test basis" and row["no_load_rate_per_kw"] == "6000.0"
    assert {row["bidder"][1:] for row in rows} == set(evil)


def test_ranking_empty_lot(client):
    _, _, lot_id = f.setup_lot(client)
    body = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
    assert body["rows"] == []
    assert client.get(f"/api/v1/lots/{lot_id}/ranking.csv").text.count("\n") == 1


def test_openapi_and_health(client):
    schema = client.get("/openapi.json").json()
    for path in ["/api/v1/cost-bases", "/api/v1/tenders/{tender_id}", "/api/v1/lots/{lot_id}/ranking.csv"]:
        assert path in schema["paths"]
    assert client.get("/healthz").json()["status"] == "ok"
