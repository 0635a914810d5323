"""API fuzzing with schemathesis over the whole OpenAPI schema.

Every operation; each generated request is sent to SQLite and to PostgreSQL (with
``LOSSLEDGER_TEST_DATABASE_URL``: ``test_postgres_was_fuzzed`` is skipped without it, and fails
instead under ``LOSSLEDGER_REQUIRE_ALL=1``), as a user holding every role (an administrator among
them) and as a viewer. Valid and invalid inputs, boundary values among them: ids past the largest
a column holds, NUL and other control characters in text.

Checks: no 5xx, every response's status code documented, its content type and its body
matching the documented schema (timestamps with their time zone included). Each engine's
database is made once for the module, with a basis, a tender, a lot and an offer to find.

Time: generating the requests costs more than answering them, so each is generated once and
sent to every engine and role. The boundary values (schemathesis's coverage phase, most of the
requests) go to the all-roles user alone: a viewer is refused before any of them is read.
Random examples are bounded per operation.
"""

from __future__ import annotations

import shutil
import tempfile
from collections import Counter
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)

from server.app import create_app
from server.settings import Settings
from tests import factories as f
from tests.conftest import PG_URL, _truncate_postgres, auth, make_client, seed_test_users

CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]
# "tester" holds every role, administrator included, so every operation runs past its role
# check; a viewer holds the least, so most writes are refused, and the refusals are checked.
ROLES = ("tester", "viewer")

# The document is the same whatever the database; an app connects only when first asked, so
# each engine's app is made now and meets its database when the module's tests start.
DOCUMENT = create_app(Settings(database_url="sqlite://", env="test")).openapi()
SQLITE_FOLDER = Path(tempfile.mkdtemp(prefix="lossledger-fuzz-"))
SQLITE_URL = f"sqlite:///{SQLITE_FOLDER / 'fuzz.db'}"
APPS = {"sqlite": create_app(Settings(database_url=SQLITE_URL, env="test"))}
if PG_URL:
    APPS["postgres"] = create_app(Settings(database_url=PG_URL, env="test"))

schema = schemathesis.openapi.from_dict(DOCUMENT)
schema.app = APPS["sqlite"]

# Requests answered, by engine and role: test_postgres_was_fuzzed reads it.
SENT: Counter[tuple[str, str]] = Counter()


def _seed(url: str) -> None:
    with make_client(url) as client:
        client.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(client)
        assert client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer()).status_code == 201


@pytest.fixture(scope="module")
def databases(request, sqlite_template, test_password_hash):
    """Each engine's database, migrated, with the test users and a lot with an offer."""
    shutil.copyfile(sqlite_template, SQLITE_FOLDER / "fuzz.db")
    _seed(SQLITE_URL)
    if "postgres" in APPS:
        url = request.getfixturevalue("postgres_migrated")
        _truncate_postgres(url)
        seed_test_users(url, test_password_hash)
        _seed(url)
    yield APPS
    for app in APPS.values():
        app.state.db.dispose()
    shutil.rmtree(SQLITE_FOLDER, ignore_errors=True)
    if "postgres" in APPS:
        _truncate_postgres(PG_URL)


def _boundary(case) -> bool:
    meta = getattr(case, "meta", None)
    return meta is not None and meta.phase.name.value == "coverage"


@schema.parametrize()
@settings(max_examples=5, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
def test_api_conforms_to_its_schema(case, databases):
    for engine, app in databases.items():
        for role in ROLES:
            if role != "tester" and _boundary(case):
                continue
            try:
                case.call_and_validate(app=app, headers=auth(role), checks=CHECKS)
            except BaseException as exc:
                exc.add_note(f"on {engine} as {role}")
                raise
            SENT[engine, role] += 1


@pytest.mark.parametrize("engine", [pytest.param("postgres", marks=pytest.mark.postgres)])
def test_postgres_was_fuzzed(engine, postgres_migrated):
    """The PostgreSQL share of the fuzzing happened (it needs the test database URL)."""
    assert SENT[engine, "tester"] > len(DOCUMENT["paths"]) and SENT[engine, "viewer"] > len(DOCUMENT["paths"])
