"""API fuzzing with schemathesis over the whole OpenAPI schema, authenticated.

Checks: no 5xx, every response's status code documented, its content type and its body
matching the documented schema. The application runs on its own migrated SQLite file,
made when this module is collected, with a basis, a tender, a lot and an offer to find.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import schemathesis
from hypothesis import HealthCheck, settings
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)

from server.app import create_app
from server.security import hash_password
from server.settings import Settings
from server.storage.migrate import upgrade
from tests import factories as f
from tests.conftest import TEST_PASSWORD, auth, make_client, seed_test_users

CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]


def _app():
    folder = Path(tempfile.mkdtemp(prefix="lossledger-fuzz-"))
    url = f"sqlite:///{folder / 'fuzz.db'}"
    upgrade(url)
    seed_test_users(url, hash_password(TEST_PASSWORD))
    with make_client(url) as client:
        client.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(client)
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
    return create_app(Settings(database_url=url, env="test"))


schema = schemathesis.openapi.from_asgi("/openapi.json", _app(), headers=auth("tester"))


@schema.parametrize()
@settings(max_examples=8, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
def test_api_conforms_to_its_schema(case):
    case.call_and_validate(headers=auth("tester"), checks=CHECKS)
