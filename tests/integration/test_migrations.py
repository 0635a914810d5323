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


def test_data_survives_upgrades_from_the_first_migration(db_url):
    """Rows written under the first schema are all there after upgrading to head."""
    downgrade(db_url, "base")
    upgrade(db_url, "0001")
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:
            conn.exec_driver_sql(
                "INSERT INTO cost_bases (id, name, currency, version, created_at, updated_at) "
                "VALUES (1, 'b', 'EUR', 1, '2026-01-01', '2026-01-01')"
            )
            conn.exec_driver_sql(
                "INSERT INTO cost_basis_revisions (id, cost_basis_id, revision, method, inputs, "
                "no_load_rate_per_kw, load_rate_per_kw, aux_rate_per_kw, created_at) "
                "VALUES (1, 1, 1, 'direct', '{}', 1, 2, 3, '2026-01-01')"
            )
            conn.exec_driver_sql(
                "INSERT INTO tenders (id, reference, title, currency, status, cost_basis_revision_id, version, "
                "created_at, updated_at) VALUES (1, 'R', 'T', 'EUR', 'draft', 1, 1, '2026-01-01', '2026-01-01')"
            )
            conn.exec_driver_sql(
                "INSERT INTO lots (id, tender_id, name, rating_kva, phases, hv_kv, lv_kv, frequency_hz, insulation, "
                "quantity, reference_temp_c, version, created_at, updated_at) "
                "VALUES (1, 1, 'L', 400, 3, 20, 0.4, 50, 'liquid', 2, 75, 1, '2026-01-01', '2026-01-01')"
            )
            for offer_id in (1, 2, 3):
                conn.exec_driver_sql(
                    "INSERT INTO offers (id, lot_id, bidder, unit_price, no_load_loss_w, load_loss_w, aux_loss_w, "
                    "impedance_pct, version, created_at, updated_at) "
                    f"VALUES ({offer_id}, 1, 'B{offer_id}', 100, 1, 2, 0, 4, 1, '2026-01-01', '2026-01-01')"
                )
        upgrade(db_url)
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT count(*) FROM offers").scalar() == 3
            assert conn.exec_driver_sql("SELECT count(*) FROM lots").scalar() == 1
            assert conn.exec_driver_sql("SELECT name FROM lots").scalar() == "L"
    finally:
        engine.dispose()
