"""The HTML pages through HTTP: rendering, plain form posts, htmx partials, conflicts, escaping."""

from __future__ import annotations

import html
import json
import re

import pytest

from server import schemas
from server.pages.charts import toc_breakdown_chart
from server.pages.forms import field_errors
from tests import factories
from tests.conftest import TEST_PASSWORD, auth

HX = {"HX-Request": "true"}
API = auth("tester")


def log_in(client, name: str = "tester") -> str:
    """Log in through the form; return the session's CSRF token as the pages embed it."""
    response = client.post(
        "/login", data={"username": name, "password": TEST_PASSWORD, "next": "/tenders"}, follow_redirects=False
    )
    assert response.status_code == 303, response.text
    page = client.get("/tenders").text
    return re.search(r'name="csrf_token" value="([^"]+)"', page).group(1)


def setup_lot(client) -> tuple[int, int, int]:
    """A basis, a tender and its lot, made through the API with a bearer token."""
    basis_id = client.post("/api/v1/cost-bases", json=factories.direct_basis(), headers=API).json()["id"]
    created = client.post("/api/v1/tenders", json=factories.tender(basis_id), headers=API).json()
    return basis_id, created["id"], created["lots"][0]["id"]


def api_offer(client, lot_id: int, **overrides) -> dict:
    response = client.post(f"/api/v1/lots/{lot_id}/offers", json=factories.offer(**overrides), headers=API)
    assert response.status_code == 201, response.text
    return response.json()


def api_offers(client, lot_id: int) -> list[dict]:
    return client.get(f"/api/v1/lots/{lot_id}/offers", headers=API).json()


def offer_form(csrf: str, **overrides) -> dict[str, str]:
    values = {k: "" if v is None else str(v) for k, v in factories.offer(**overrides).items()}
    return values | {"csrf_token": csrf}


def error_beside(page: str, box_id: str) -> str:
    """The message tied to a box: the element its aria-describedby names, as plain text."""
    tag = re.search(rf'<(?:input|select|textarea) id="{re.escape(box_id)}"[^>]*>', page)
    assert tag, f"no box {box_id}"
    described = re.search(r'aria-describedby="([^"]+)"', tag.group(0))
    assert described and f"{box_id}-error" in described.group(1).split(), tag.group(0)
    message = re.search(rf'id="{re.escape(box_id)}-error">(.*?)</p>', page, re.S)
    return html.unescape(message.group(1)).strip()


def chart_options(page: str) -> dict:
    found = re.search(r"data-chart='([^']*)'", page)
    assert found, "no chart on the page"
    return json.loads(html.unescape(found.group(1)))


# --- access ------------------------------------------------------------------------------

def test_pages_send_a_stranger_to_the_log_in_page(page_client):
    response = page_client.get("/lots/1", follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"] == "/login?next=/lots/1"
    login = page_client.get(response.headers["location"])
    assert login.status_code == 200
    assert 'name="next" value="/lots/1"' in login.text


def test_wrong_password_is_refused_on_the_form(page_client):
    response = page_client.post("/login", data={"username": "tester", "password": "wrong", "next": "/tenders"})
    assert response.status_code == 401
    assert "Wrong user name or password." in response.text


def test_log_in_returns_only_to_a_path_on_this_site(page_client):
    data = {"username": "tester", "password": TEST_PASSWORD, "next": "https://elsewhere.example/"}
    response = page_client.post("/login", data=data, follow_redirects=False)
    assert response.headers["location"] == "/tenders"


def test_a_post_without_the_form_token_is_refused(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    response = page_client.post(f"/lots/{lot_id}/offers", data=offer_form(""))
    assert response.status_code == 403
    assert api_offers(page_client, lot_id) == []


def test_a_viewer_sees_the_ranking_but_no_edit_forms(page_client):
    _, _, lot_id = setup_lot(page_client)
    api_offer(page_client, lot_id)
    log_in(page_client, "viewer")
    page = page_client.get(f"/lots/{lot_id}").text
    assert "Ranking by total owning cost" in page
    assert "Add an offer" not in page
    assert "/offers/1/edit" not in page


def test_log_out_ends_the_session(page_client):
    csrf = log_in(page_client)
    response = page_client.post("/logout", data={"csrf_token": csrf}, follow_redirects=False)
    assert response.status_code == 303
    assert page_client.get("/tenders", follow_redirects=False).status_code == 303


# --- pages render --------------------------------------------------------------------------

def test_home_goes_to_the_tenders(page_client):
    log_in(page_client)
    response = page_client.get("/", follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"] == "/tenders"


def test_every_page_renders_with_its_key_content(page_client):
    log_in(page_client)
    basis_id, tender_id, lot_id = setup_lot(page_client)
    api_offer(page_client, lot_id)
    expected = {
        "/tenders": ["T-001", "Test tender", "Test basis", "New tender"],
        f"/tenders/{tender_id}": ["T-001", "400 kVA ground-mounted", "Add a lot", f'href="/lots/{lot_id}"'],
        f"/lots/{lot_id}": ["Bidder One", "12,000", "Ranking by total owning cost", "Download CSV"],
        "/cost-bases": ["Test basis", "6,000.0", "New cost basis"],
        f"/cost-bases/{basis_id}": ["Test basis", "Revisions", "Derived rates", "(1 + e)"],
    }
    for path, needles in expected.items():
        response = page_client.get(path)
        assert response.status_code == 200, path
        assert response.headers["content-type"].startswith("text/html")
        for needle in needles:
            assert needle in response.text, (path, needle)
        assert "it does not replace the engineer's judgement" in html.unescape(response.text)
        assert 'href="/docs"' in response.text


def test_pages_carry_no_inline_script(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    api_offer(page_client, lot_id)
    page = page_client.get(f"/lots/{lot_id}").text
    assert re.findall(r"<script(?![^>]*\bsrc=)[^>]*>", page) == []
    assert not re.search(r"\son[a-z]+=", page)


def test_a_missing_record_gets_a_friendly_page(page_client):
    log_in(page_client)
    response = page_client.get("/lots/999")
    assert response.status_code == 404
    assert "Lot 999 does not exist." in response.text
    assert "Traceback" not in response.text
    assert "<nav" in response.text  # the layout, not a bare message


# --- tenders -------------------------------------------------------------------------------

def _tender_form(csrf: str, basis_id: int, **overrides) -> dict[str, str]:
    form = {
        "csrf_token": csrf, "reference": "T-100", "title": "Ring-main units 2025", "currency": "eur",
        "cost_basis": f"{basis_id}:1", "name": "630 kVA", "rating_kva": "630", "phases": "3",
        "hv_kv": "11", "lv_kv": "0.42", "frequency_hz": "50", "insulation": "liquid", "quantity": "4",
    }
    return form | overrides


def test_creating_a_tender_through_the_form_redirects_to_it(page_client):
    csrf = log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    response = page_client.post("/tenders", data=_tender_form(csrf, basis_id), follow_redirects=False)
    assert response.status_code == 303
    shown = page_client.get(response.headers["location"])
    assert "Ring-main units 2025" in shown.text
    assert "630 kVA" in shown.text
    assert "EUR" in shown.text


def test_a_bad_tender_form_comes_back_with_messages_and_stores_nothing(page_client):
    csrf = log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    form = _tender_form(csrf, basis_id, title="", currency="euro", rating_kva="-5")
    response = page_client.post("/tenders", data=form)
    assert response.status_code == 422
    assert error_beside(response.text, "new-title") == "Fill this in."
    assert error_beside(response.text, "new-currency") == "Must be a three-letter code such as EUR."
    assert error_beside(response.text, "lot-rating_kva") == "Must be more than 0."
    assert 'value="euro"' in response.text  # what was typed stays
    assert len(page_client.get("/api/v1/tenders", headers=API).json()) == 1


def test_a_duplicate_reference_is_named_beside_its_box(page_client):
    csrf = log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    response = page_client.post("/tenders", data=_tender_form(csrf, basis_id, reference="T-001"), headers=HX)
    assert response.status_code == 422
    assert "<html" not in response.text
    assert "already exists" in error_beside(response.text, "new-reference")


def test_htmx_tender_creation_is_told_where_to_go(page_client):
    csrf = log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    response = page_client.post("/tenders", data=_tender_form(csrf, basis_id), headers=HX, follow_redirects=False)
    assert response.status_code == 200
    assert re.fullmatch(r"/tenders/\d+", response.headers["HX-Redirect"])


def test_editing_the_tender_header_and_a_stale_edit(page_client):
    csrf = log_in(page_client)
    basis_id, tender_id, _ = setup_lot(page_client)
    form = {"csrf_token": csrf, "version": "1", "title": "Renamed", "status": "evaluation",
            "cost_basis": f"{basis_id}:1", "cost_basis_was": f"{basis_id}:1"}
    saved = page_client.post(f"/tenders/{tender_id}", data=form, headers=HX)
    assert saved.status_code == 200
    assert "Renamed" in saved.text and "Under evaluation" in saved.text
    stale = page_client.post(f"/tenders/{tender_id}", data=form | {"title": "Mine"}, headers=HX)
    assert stale.status_code == 409
    assert "Someone else changed this tender" in stale.text
    assert "Renamed" in stale.text  # the stored title is shown
    assert page_client.get(f"/api/v1/tenders/{tender_id}", headers=API).json()["title"] == "Renamed"


def test_adding_a_lot(page_client):
    csrf = log_in(page_client)
    _, tender_id, _ = setup_lot(page_client)
    form = {"csrf_token": csrf, "name": "1000 kVA", "rating_kva": "1000", "phases": "3", "hv_kv": "20",
            "lv_kv": "0.4", "frequency_hz": "50", "insulation": "dry", "quantity": "2"}
    response = page_client.post(f"/tenders/{tender_id}/lots", data=form, headers=HX)
    assert response.status_code == 200
    assert 'id="lots"' in response.text and "1000 kVA" in response.text and "Dry-type" in response.text


# --- offers --------------------------------------------------------------------------------

def test_adding_an_offer_with_htmx_returns_the_offers_partial(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    response = page_client.post(f"/lots/{lot_id}/offers", data=offer_form(csrf, bidder="Bidder Two"), headers=HX)
    assert response.status_code == 200
    assert response.text.lstrip().startswith('<section id="offers"')
    assert "<html" not in response.text
    assert "Bidder Two" in response.text
    assert response.headers["HX-Trigger"] == "ranking-changed"
    assert [o["bidder"] for o in api_offers(page_client, lot_id)] == ["Bidder Two"]


def test_adding_an_offer_with_a_plain_post_redirects_to_the_lot(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    response = page_client.post(f"/lots/{lot_id}/offers", data=offer_form(csrf), follow_redirects=False)
    assert response.status_code == 303
    assert response.headers["location"] == f"/lots/{lot_id}"


@pytest.mark.parametrize(
    ("box", "typed", "message"),
    [
        ("no_load_loss_w", "-430", "Must be 0 or more."),
        ("load_loss_w", "1e400", "Must be a finite number."),
        ("unit_price", "abc", "Must be a number."),
        ("impedance_pct", "", "Fill this in."),
        ("delivery_weeks", "2.5", "Must be a whole number."),
    ],
)
def test_a_bad_value_is_named_beside_its_box_and_nothing_is_stored(page_client, box, typed, message):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    response = page_client.post(f"/lots/{lot_id}/offers", data=offer_form(csrf) | {box: typed}, headers=HX)
    assert response.status_code == 422
    assert error_beside(response.text, f"new-{box}") == message
    assert f'value="{typed}"' in response.text
    assert api_offers(page_client, lot_id) == []


def test_a_bad_value_without_script_shows_the_whole_page_with_the_message(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    response = page_client.post(f"/lots/{lot_id}/offers", data=offer_form(csrf, no_load_loss_w=-1))
    assert response.status_code == 422
    assert "<html" in response.text
    assert error_beside(response.text, "new-no_load_loss_w") == "Must be 0 or more."


def test_editing_an_offer_in_place(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    edit = page_client.get(f"/offers/{offer['id']}/edit", headers=HX)
    assert edit.status_code == 200
    assert edit.text.lstrip().startswith(f'<tr id="offer-{offer["id"]}" class="editing">')
    assert 'name="version" value="1"' in edit.text
    saved = page_client.post(
        f"/offers/{offer['id']}", data=offer_form(csrf, unit_price=11500) | {"version": "1"}, headers=HX
    )
    assert saved.status_code == 200
    assert saved.text.lstrip().startswith(f'<tr id="offer-{offer["id"]}">')
    assert "11,500" in saved.text
    assert saved.headers["HX-Trigger"] == "ranking-changed"
    assert api_offers(page_client, lot_id)[0]["unit_price"] == 11500


def test_cancelling_an_edit_returns_the_plain_row(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    row = page_client.get(f"/offers/{offer['id']}", headers=HX)
    assert row.text.lstrip().startswith(f'<tr id="offer-{offer["id"]}">')


def test_an_edit_without_script_opens_the_row_in_the_full_page(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    page = page_client.get(f"/offers/{offer['id']}/edit").text
    assert "<html" in page and 'class="editing"' in page and "Ranking by total owning cost" in page


def test_a_bad_edit_keeps_the_row_open_with_the_message_and_changes_nothing(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    response = page_client.post(
        f"/offers/{offer['id']}", data=offer_form(csrf, load_loss_w=-2) | {"version": "1"}, headers=HX
    )
    assert response.status_code == 422
    assert error_beside(response.text, f"offer-{offer['id']}-load_loss_w") == "Must be 0 or more."
    assert api_offers(page_client, lot_id)[0]["load_loss_w"] == offer["load_loss_w"]


def test_a_stale_edit_shows_the_conflict_and_does_not_overwrite(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    theirs = page_client.patch(f"/api/v1/offers/{offer['id']}", json={"version": 1, "unit_price": 13000}, headers=API)
    assert theirs.status_code == 200
    mine = offer_form(csrf, unit_price=11000) | {"version": "1"}
    response = page_client.post(f"/offers/{offer['id']}", data=mine, headers=HX)
    assert response.status_code == 409
    assert "Someone else changed this offer while you were editing" in response.text
    assert "Saved meanwhile: <strong>13000</strong>" in response.text
    assert 'value="11000"' in response.text  # mine kept in the box
    assert 'name="version" value="2"' in response.text  # saving again is a deliberate choice
    assert api_offers(page_client, lot_id)[0]["unit_price"] == 13000


def test_deleting_an_offer(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    offer = api_offer(page_client, lot_id)
    response = page_client.post(f"/offers/{offer['id']}/delete", data={"csrf_token": csrf}, headers=HX)
    assert response.status_code == 200
    assert "No offers yet" in response.text
    assert response.headers["HX-Trigger"] == "ranking-changed"
    assert api_offers(page_client, lot_id) == []


def test_bidder_text_is_escaped(page_client):
    csrf = log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    page_client.post(f"/lots/{lot_id}/offers", data=offer_form(csrf, bidder="<script>x</script>"))
    page = page_client.get(f"/lots/{lot_id}").text
    assert "<script>x</script>" not in page
    assert "&lt;script&gt;x&lt;/script&gt;" in page
    assert "<script>x</script>" in chart_options(page)["yAxis"]["data"][0]  # JSON text, shown as text


# --- ranking -------------------------------------------------------------------------------

def _two_offers(client, lot_id: int) -> None:
    # Direct basis A 6000, B 1500: "Low Price" saves 2,000 on price but loses 4,960 on losses.
    api_offer(client, lot_id, bidder="Low Price", unit_price=10000, no_load_loss_w=700, load_loss_w=6000)
    api_offer(client, lot_id, bidder="Low Loss", unit_price=12000, no_load_loss_w=430, load_loss_w=4600)


def test_the_lot_page_ranks_the_lowest_toc_first_with_rates_and_chart(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    page = page_client.get(f"/lots/{lot_id}").text
    ranking = page[page.index('id="ranking"'):]
    best = re.search(r'<tr class="best">(.*?)</tr>', ranking, re.S).group(1)
    assert "Low Loss" in best and "21,480" in best and "214,800" in best
    body = ranking[ranking.index("<tbody>"):ranking.index("</tbody>")]
    assert [b.strip() for b in re.findall(r'<th scope="row">([^<]+)', body)] == ["Low Loss", "Low Price"]
    assert "The lowest price is not the lowest total owning cost." in ranking
    assert "6,000.0" in ranking and "1,500.0" in ranking and "Test basis" in ranking
    assert f'href="/api/v1/lots/{lot_id}/ranking.csv"' in ranking
    options = chart_options(page)
    assert options["yAxis"]["data"] == ["1. Low Loss", "2. Low Price"]
    assert [s["name"] for s in options["series"]] == [
        "Price", "Capitalised no-load loss", "Capitalised load loss", "Capitalised auxiliary loss",
    ]
    assert options["series"][0]["data"] == [12000, 10000]


def test_the_ranking_partial_for_htmx(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    _two_offers(page_client, lot_id)
    response = page_client.get(f"/lots/{lot_id}/ranking", headers=HX)
    assert response.status_code == 200
    assert response.text.lstrip().startswith('<section id="ranking"')
    assert 'hx-trigger="ranking-changed from:body"' in response.text
    assert chart_options(response.text)["series"][0]["stack"] == "toc"


def test_an_empty_lot_says_so_and_draws_no_chart(page_client):
    log_in(page_client)
    _, _, lot_id = setup_lot(page_client)
    page = page_client.get(f"/lots/{lot_id}").text
    assert "No offers to rank yet." in page
    assert "data-chart=" not in page


def test_the_chart_options_follow_the_ranking():
    row = dict(
        no_load_loss_w=400.0, load_loss_w=4000.0, aux_loss_w=0.0, efficiency_25_pct=99.0,
        efficiency_50_pct=99.0, efficiency_75_pct=99.0, efficiency_100_pct=99.0,
    )
    ranking = schemas.RankingOut(
        loading=schemas.LoadingOut(source="cost basis", note="basis loading"),
        lot_id=1, tender_id=1, currency="EUR", quantity=2, cost_basis_id=1, cost_basis_name="B",
        cost_basis_revision=1, no_load_rate_per_kw=1.0, load_rate_per_kw=1.0, aux_rate_per_kw=1.0,
        rows=[
            schemas.RankingRowOut(rank=1, offer_id=7, bidder="X", unit_price=100.4, capitalised_no_load=10.6,
                                  capitalised_load=20.0, capitalised_aux=0.0, toc_per_unit=131.0,
                                  toc_total=262.0, **row),
        ],
    )
    options = toc_breakdown_chart(ranking)
    assert json.loads(json.dumps(options)) == options
    assert [s["data"] for s in options["series"]] == [[100], [11], [20], [0]]
    assert options["xAxis"]["name"] == "EUR per unit"


# --- cost bases ----------------------------------------------------------------------------

def test_the_preview_derives_the_rates_without_storing(page_client):
    csrf = log_in(page_client)
    form = {"csrf_token": csrf, "currency": "EUR", "method": "direct", "no_load_rate_per_kw": "5000",
            "load_rate_per_kw": "1234.56", "aux_rate_per_kw": ""}
    response = page_client.post("/cost-bases/preview", data=form, headers=HX)
    assert response.status_code == 200
    assert re.search(r'data-rate="no_load_rate_per_kw">5,000.0 ', response.text)
    assert re.search(r'data-rate="load_rate_per_kw">1,234.6 ', response.text)
    assert re.search(r'data-rate="aux_rate_per_kw">0.0 ', response.text)
    assert page_client.get("/api/v1/cost-bases", headers=API).json() == []


def test_the_preview_of_present_worth_matches_the_stored_rates(page_client):
    csrf = log_in(page_client)
    body = factories.present_worth_basis()
    stored = page_client.post("/api/v1/cost-bases", json=body, headers=API).json()
    form = {k: str(v) for k, v in body.items()} | {"csrf_token": csrf}
    response = page_client.post("/cost-bases/preview", data=form, headers=HX)
    for name in ("no_load_rate_per_kw", "load_rate_per_kw", "aux_rate_per_kw"):
        assert re.search(rf'data-rate="{name}">{stored[name]:,.1f} ', response.text), name


def test_the_preview_names_what_stops_the_rates(page_client):
    csrf = log_in(page_client)
    form = {"csrf_token": csrf, "method": "present_worth", "energy_price_per_kwh": "0.1", "discount_rate_pct": "6",
            "years": "0", "peak_load_pu": "0.8", "loss_factor": "1.5"}
    response = page_client.post("/cost-bases/preview", data=form, headers=HX)
    text = html.unescape(response.text)
    assert "Evaluation period n: must be 1 or more" in text
    assert "Loss factor: must be 1 or less" in text


def test_switching_method_returns_that_methods_boxes(page_client):
    log_in(page_client)
    response = page_client.get("/cost-bases", params={"method": "fixed_charge_rate", "loss_factor": "0.3"}, headers=HX)
    assert response.text.lstrip().startswith('<div id="method-inputs"')
    names = re.findall(r'<input id="basis-[^"]+" name="([^"]+)"', response.text)
    assert names == [n for n in schemas.FixedChargeRateInputs.model_fields if n != "method"]
    assert 'name="loss_factor" type="text" value="0.3"' in response.text


def test_without_script_a_method_is_chosen_by_link(page_client):
    log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    page = page_client.get(f"/cost-bases/{basis_id}", params={"method": "present_worth"}).text
    assert f'href="/cost-bases/{basis_id}?method=fixed_charge_rate"' in page
    assert 'name="discount_rate_pct"' in page and 'name="no_load_rate_per_kw"' not in page


def test_creating_a_cost_basis_through_the_form(page_client):
    csrf = log_in(page_client)
    form = {"csrf_token": csrf, "name": "Utility 2025", "currency": "EUR", "method": "direct",
            "no_load_rate_per_kw": "7000", "load_rate_per_kw": "1800", "aux_rate_per_kw": ""}
    response = page_client.post("/cost-bases", data=form, follow_redirects=False)
    assert response.status_code == 303
    page = page_client.get(response.headers["location"]).text
    assert "Utility 2025" in page and "7,000.0" in page


def test_saving_the_editor_makes_a_new_revision_and_a_stale_save_does_not(page_client):
    csrf = log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    form = {"csrf_token": csrf, "version": "1", "name": "Test basis", "currency": "EUR", "method": "direct",
            "no_load_rate_per_kw": "6500", "load_rate_per_kw": "1500", "aux_rate_per_kw": "800",
            "change_reason": "New published A"}
    saved = page_client.post(f"/cost-bases/{basis_id}", data=form, headers=HX)
    assert saved.status_code == 200
    assert "Saved. The current revision is 2." in saved.text
    assert "6,500.0" in saved.text
    stale = page_client.post(f"/cost-bases/{basis_id}", data=form | {"no_load_rate_per_kw": "9999"}, headers=HX)
    assert stale.status_code == 409
    assert "Someone else changed this cost basis" in stale.text
    stored = page_client.get(f"/api/v1/cost-bases/{basis_id}", headers=API).json()
    assert stored["revision"] == 2 and stored["no_load_rate_per_kw"] == 6500


def test_a_bad_editor_value_is_named_beside_its_box(page_client):
    csrf = log_in(page_client)
    basis_id, _, _ = setup_lot(page_client)
    form = {"csrf_token": csrf, "version": "1", "name": "Test basis", "currency": "EUR", "method": "direct",
            "no_load_rate_per_kw": "-1", "load_rate_per_kw": "1500", "aux_rate_per_kw": "800"}
    response = page_client.post(f"/cost-bases/{basis_id}", data=form, headers=HX)
    assert response.status_code == 422
    assert error_beside(response.text, "basis-no_load_rate_per_kw") == "Must be 0 or more."
    assert page_client.get(f"/api/v1/cost-bases/{basis_id}", headers=API).json()["revision"] == 1


def test_errors_of_a_tenders_first_lot_map_to_the_lot_boxes():
    try:
        schemas.TenderCreate.model_validate(
            {"reference": "R", "title": "T", "currency": "EUR", "cost_basis_id": "x", "lots": [{"name": ""}]}
        )
    except Exception as exc:  # pydantic's ValidationError
        errors = field_errors(exc)
    assert errors["cost_basis"] == "must be a whole number"
    assert errors["name"] == "fill this in"
    assert errors["rating_kva"] == "fill this in"
