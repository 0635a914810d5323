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
from server.settings import Settings
from server.storage.migrate import upgrade
from server.storage.models import Base

PG_URL = os.environ.get("LOSSLEDGER_TEST_DATABASE_URL")
REQUIRE_ALL = os.environ.get("LOSSLEDGER_REQUIRE_ALL") == "1"


def require_or_skip(reason: str) -> None:
    """Skip a test that needs something absent, or fail when CI demands everything."""
    if REQUIRE_ALL:
        pytest.fail(f"{reason} (LOSSLEDGER_REQUIRE_ALL=1 forbids skipping)")
    pytest.skip(reason)


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory) -> str:
    """A migrated SQLite file, copied for each test (faster than migrating each time)."""
    path = tmp_path_factory.mktemp("template") / "template.db"
    upgrade(f"sqlite:///{path}")
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
    with make_client(db_url) as c:
        yield c


@pytest.fixture
def page_client(sqlite_url) -> Iterator[TestClient]:
    """A client for the HTML pages (SQLite only: the pages share the services with the API)."""
    with make_client(sqlite_url) as c:
        yield c
