"""Fixtures shared by the integration and end-to-end tests.

Every test that asks for ``db_url`` runs once on SQLite and once on PostgreSQL. The
PostgreSQL run needs ``LOSSLEDGER_TEST_DATABASE_URL``; without it the run is skipped,
unless ``LOSSLEDGER_REQUIRE_ALL=1`` (as in CI), when it fails instead.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text

from server.app import create_app
from server.security import hash_password, token_hash
from server.settings import Settings
from server.storage.migrate import upgrade
from server.storage.models import ROLES, AuthSession, Base, User, utcnow

PG_URL = os.environ.get("LOSSLEDGER_TEST_DATABASE_URL")
REQUIRE_ALL = os.environ.get("LOSSLEDGER_REQUIRE_ALL") == "1"


def require_or_skip(reason: str) -> None:
    """Skip a test that needs something absent, or fail when CI demands everything."""
    if REQUIRE_ALL:
        pytest.fail(f"{reason} (LOSSLEDGER_REQUIRE_ALL=1 forbids skipping)")
    pytest.skip(reason)


# Test users: one per role, one with every role ("tester") and one with none ("nobody").
# Each has a ready API token "token-<name>" so tests need not pay for a password check.
TEST_PASSWORD = "correct horse battery"
TEST_USERS = {**{role: [role] for role in ROLES}, "tester": list(ROLES), "nobody": []}


@pytest.fixture(scope="session")
def test_password_hash() -> str:
    return hash_password(TEST_PASSWORD)


def seed_test_users(url: str, password_hash: str) -> None:
    from datetime import timedelta

    engine = create_engine(url)
    now = utcnow()
    with engine.begin() as conn:
        for index, (name, roles) in enumerate(TEST_USERS.items(), start=1):
            conn.execute(User.__table__.insert().values(
                id=1000 + index, username=name, password_hash=password_hash, roles=roles, disabled=False,
                version=1, created_at=now, updated_at=now,
            ))
            conn.execute(AuthSession.__table__.insert().values(
                token_hash=token_hash(f"token-{name}"), user_id=1000 + index, kind="api",
                created_at=now, last_seen_at=now, expires_at=now + timedelta(days=1),
            ))
    engine.dispose()


def add_user_with_token(url: str, name: str, roles: list[str], password_hash: str = "x") -> dict[str, str]:
    """Insert a user with an API token; returns its auth headers."""
    from datetime import timedelta

    engine = create_engine(url)
    now = utcnow()
    with engine.begin() as conn:
        user_id = conn.execute(User.__table__.insert().values(
            username=name, password_hash=password_hash, roles=roles, disabled=False,
            version=1, created_at=now, updated_at=now,
        ).returning(User.__table__.c.id)).scalar_one()
        conn.execute(AuthSession.__table__.insert().values(
            token_hash=token_hash(f"token-{name}"), user_id=user_id, kind="api",
            created_at=now, last_seen_at=now, expires_at=now + timedelta(days=1),
        ))
    engine.dispose()
    return auth(name)


def auth(name: str) -> dict[str, str]:
    """Headers that authenticate as one of TEST_USERS."""
    return {"Authorization": f"Bearer token-{name}"}


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory, test_password_hash) -> str:
    """A migrated SQLite file with the test users, copied for each test."""
    path = tmp_path_factory.mktemp("template") / "template.db"
    upgrade(f"sqlite:///{path}")
    seed_test_users(f"sqlite:///{path}", test_password_hash)
    return str(path)


@pytest.fixture(scope="session")
def postgres_migrated() -> str:
    if not PG_URL:
        require_or_skip("LOSSLEDGER_TEST_DATABASE_URL is not set")
    engine = create_engine(PG_URL)
    with engine.begin() as conn:
        conn.execute(text("DROP SCHEMA public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    engine.dispose()
    upgrade(PG_URL)
    return PG_URL


def _truncate_postgres(url: str) -> None:
    engine = create_engine(url)
    tables = ", ".join(t.name for t in Base.metadata.sorted_tables)
    with engine.begin() as conn:
        # The audit trail and the evaluation records refuse TRUNCATE; a test database is emptied
        # as a replica would be, with ordinary triggers off for this transaction only.
        conn.execute(text("SET LOCAL session_replication_role = replica"))
        conn.execute(text(f"TRUNCATE {tables} RESTART IDENTITY CASCADE"))
    engine.dispose()


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def db_url(request, tmp_path) -> Iterator[str]:
    """A migrated, empty database for one test."""
    if request.param == "sqlite":
        path = tmp_path / "test.db"
        shutil.copyfile(request.getfixturevalue("sqlite_template"), path)
        yield f"sqlite:///{path}"
    else:
        url = request.getfixturevalue("postgres_migrated")
        _truncate_postgres(url)
        seed_test_users(url, request.getfixturevalue("test_password_hash"))
        yield url
        _truncate_postgres(url)


@pytest.fixture
def sqlite_url(tmp_path, sqlite_template) -> str:
    """A migrated, empty SQLite database, for tests that need only the embedded engine."""
    path = tmp_path / "test.db"
    shutil.copyfile(sqlite_template, path)
    return f"sqlite:///{path}"


def make_client(url: str) -> TestClient:
    return TestClient(create_app(Settings(database_url=url, env="test")))


@pytest.fixture
def client(db_url) -> Iterator[TestClient]:
    """An API client authenticated as "tester", who holds every role."""
    with make_client(db_url) as c:
        c.headers.update(auth("tester"))
        yield c


@pytest.fixture
def anon_client(db_url) -> Iterator[TestClient]:
    with make_client(db_url) as c:
        yield c


@pytest.fixture
def page_client(sqlite_url) -> Iterator[TestClient]:
    """A client for the HTML pages (SQLite only: the pages share the services with the API)."""
    with make_client(sqlite_url) as c:
        yield c


def pytest_terminal_summary(terminalreporter):
    """Say plainly how many PostgreSQL runs passed, so a CI log shows they were not skipped."""
    passed = [r for r in terminalreporter.stats.get("passed", []) if "[postgres" in r.nodeid]
    skipped = [r for r in terminalreporter.stats.get("skipped", []) if "[postgres" in r.nodeid]
    terminalreporter.write_line(f"PostgreSQL runs: {len(passed)} passed, {len(skipped)} skipped")
