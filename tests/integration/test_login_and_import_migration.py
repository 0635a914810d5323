"""Migration 0011 on data written before it: offers a double commit stored twice are all kept,
the constraint holds for the rest, and stored log-in names are cut to 64 characters with the
hash of what was stored."""

from __future__ import annotations

import hashlib

import pytest
from sqlalchemy import create_engine
from sqlalchemy.exc import IntegrityError

from server.storage.migrate import downgrade, upgrade

BIDDERS = ["Acme", "ACME ", "acme  ltd", "Acme Ltd", "Other"]


def _fill_before_0011(conn, sqlite: bool) -> None:
    conn.exec_driver_sql("INSERT INTO cost_bases (id, name, currency, version, created_at, updated_at) "
                         "VALUES (1, 'b', 'EUR', 1, '2026-01-01', '2026-01-01')")
    conn.exec_driver_sql("INSERT INTO cost_basis_revisions (id, cost_basis_id, revision, method, inputs, "
                         "no_load_rate_per_kw, load_rate_per_kw, aux_rate_per_kw, created_at) "
                         "VALUES (1, 1, 1, 'direct', '{}', 1, 2, 3, '2026-01-01')")
    conn.exec_driver_sql("INSERT INTO tenders (id, reference, title, currency, status, cost_basis_revision_id, "
                         "version, created_at, updated_at, exchange_rates, tolerance_standard, penalty_multiplier, "
                         "penalty_credit_below, reject_beyond_tolerance) VALUES (1, 'R', 'T', 'EUR', 'draft', 1, 1, "
                         "'2026-01-01', '2026-01-01', '{}', 'iec', 1, false, true)")
    conn.exec_driver_sql("INSERT INTO lots (id, tender_id, name, rating_kva, phases, hv_kv, lv_kv, frequency_hz, "
                         "insulation, quantity, reference_temp_c, version, created_at, updated_at, limit_tables) "
                         "VALUES (1, 1, 'L', 400, 3, 20, 0.4, 50, 'liquid', 2, 75, 1, '2026-01-01', '2026-01-01', '[]')")
    for offer_id, bidder in enumerate(BIDDERS, start=1):
        conn.exec_driver_sql(
            "INSERT INTO offers (id, lot_id, bidder, unit_price, no_load_loss_w, load_loss_w, aux_loss_w, "
            f"impedance_pct, version, created_at, updated_at) VALUES ({offer_id}, 1, '{bidder}', 100, 1, 2, 0, 4, 1, "
            "'2026-01-01', '2026-01-01')")
    # PostgreSQL refused names over 64 characters; SQLite kept them whole.
    for name in ["bob"] + (["y" * 5000] if sqlite else []):
        conn.exec_driver_sql("INSERT INTO login_attempts (at, username, address, succeeded) "
                             f"VALUES ('2026-01-01', '{name}', '1.2.3.4', false)")


def test_duplicates_are_kept_without_a_key_and_names_are_cut(db_url):
    sqlite = db_url.startswith("sqlite")
    downgrade(db_url, "0010")
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:
            _fill_before_0011(conn, sqlite)
        upgrade(db_url)
        with engine.connect() as conn:
            keys = conn.exec_driver_sql("SELECT bidder, bidder_key FROM offers ORDER BY id").all()
            names = conn.exec_driver_sql("SELECT username, username_hash FROM login_attempts ORDER BY id").all()
        # The oldest of each bidder keeps the key; its copies are kept, without one.
        assert keys == [("Acme", "acme"), ("ACME ", None), ("acme  ltd", "acme ltd"), ("Acme Ltd", None),
                        ("Other", "other")]
        expected = [("bob", hashlib.sha256(b"bob").hexdigest())]
        if sqlite:
            expected.append(("y" * 64, hashlib.sha256(b"y" * 5000).hexdigest()))
        assert names == expected
        with pytest.raises(IntegrityError), engine.begin() as conn:
            conn.exec_driver_sql("UPDATE offers SET bidder_key = 'acme' WHERE id = 2")
        downgrade(db_url, "0010")
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT count(*) FROM offers").scalar() == len(BIDDERS)
        upgrade(db_url)
    finally:
        engine.dispose()
