"""A cached page never shows one viewer another viewer's name or form token, and never
outlives a change."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from server.app import create_app
from server.security import hash_password
from server.settings import Settings
from tests import factories as f
from tests.conftest import TEST_PASSWORD, add_user_with_token, auth


def _browser(app, name: str) -> tuple[TestClient, str]:
    client = TestClient(app)
    response = client.post("/login", data={"username": name, "password": TEST_PASSWORD, "next": "/tenders"},
                           follow_redirects=False)
    assert response.status_code == 303
    token = re.search(r'name="csrf_token" value="([^"]+)"', client.get("/tenders").text).group(1)
    return client, token


def test_two_buyers_get_their_own_token_and_name(sqlite_url):
    add_user_with_token(sqlite_url, "second-buyer", ["buyer"], hash_password(TEST_PASSWORD))
    app = create_app(Settings(database_url=sqlite_url, env="test"))
    with TestClient(app) as api:
        api.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(api)
        first, first_token = _browser(app, "buyer")
        second, second_token = _browser(app, "second-buyer")
        page_one = first.get(f"/lots/{lot_id}").text
        page_two = second.get(f"/lots/{lot_id}").text  # same roles: served from the cache
        assert first_token != second_token
        assert first_token in page_one and second_token not in page_one
        assert second_token in page_two and first_token not in page_two
        assert "second-buyer" in page_two and "second-buyer" not in page_one
        # The token also travels in the htmx headers of the page; it must be the viewer's own there too.
        assert f'"X-CSRF-Token": "{second_token}"' in page_two.replace("&#34;", '"').replace("&quot;", '"')
        api.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Arrived Later"))
        assert "Arrived Later" in second.get(f"/lots/{lot_id}").text
