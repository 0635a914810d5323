"""Migrations are the only way a schema is made: they upgrade, downgrade and match the models."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import create_engine, inspect

from server.storage.migrate import downgrade, upgrade
from server.storage.models import Base

TABLES = {"cost_bases", "cost_basis_revisions", "tenders", "lots", "offers"}


def _tables(url: str) -> set[str]:
    engine = create_engine(url)
    try:
        return set(inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()


def test_upgrade_downgrade_upgrade(db_url):
    assert TABLES <= _tables(db_url)
    downgrade(db_url, "base")
    assert _tables(db_url) == set()
    upgrade(db_url)
    assert TABLES <= _tables(db_url)


def test_models_match_migrations(db_url):
    engine = create_engine(db_url)
    try:
        with engine.connect() as conn:
            diff = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    finally:
        engine.dispose()
    assert diff == [], f"models and migrations differ: {diff}"
