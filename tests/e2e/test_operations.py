"""Operations: health and readiness, backup and restore, production guards."""

from __future__ import annotations

import pytest

from server import cli
from server.settings import Settings, get_settings
from server.storage import backup
from tests import factories as f
from tests.conftest import make_client


def test_health_and_readiness(client):
    assert client.get("/healthz").json()["status"] == "ok"
    assert client.get("/readyz").json() == {"status": "ready"}


def test_readiness_fails_without_a_database():
    from fastapi.testclient import TestClient

    from server.app import create_app

    app = create_app(Settings(database_url="postgresql+psycopg://nobody@127.0.0.1:1/none", env="test"))
    with TestClient(app) as client:
        r = client.get("/readyz")
    assert r.status_code == 503 and r.json()["status"] == "database unreachable"


def test_backup_and_restore_give_back_the_same_tenders(client, db_url, tmp_path):
    basis_id, tender_id, lot_id = f.setup_lot(client)
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
    before = client.get("/api/v1/tenders").json()
    target = tmp_path / ("backup.db" if db_url.startswith("sqlite") else "backup.dump")
    backup.backup(db_url, str(target))
    assert client.delete(f"/api/v1/tenders/{tender_id}").status_code == 204
    client.post("/api/v1/tenders", json=f.tender(basis_id, reference="AFTER-BACKUP"))
    assert [t["reference"] for t in client.get("/api/v1/tenders").json()] == ["AFTER-BACKUP"]
    client.app.state.db.engine.dispose()  # let the restore replace tables without open connections
    backup.restore(db_url, str(target))
    with make_client(db_url) as fresh:
        fresh.headers.update(client.headers)
        assert fresh.get("/api/v1/tenders").json() == before
        assert len(fresh.get(f"/api/v1/lots/{lot_id}/offers").json()) == 1


def test_production_refuses_sqlite_with_several_workers(monkeypatch, tmp_path):
    monkeypatch.setenv("LOSSLEDGER_ENV", "production")
    monkeypatch.setenv("LOSSLEDGER_SECRET_KEY", "x" * 40)
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", f"sqlite:///{tmp_path / 'p.db'}")
    get_settings.cache_clear()
    try:
        with pytest.raises(SystemExit, match="PostgreSQL"):
            cli.main(["serve", "--workers", "2"])
    finally:
        get_settings.cache_clear()


def test_production_refuses_the_default_secret(monkeypatch, tmp_path):
    monkeypatch.setenv("LOSSLEDGER_ENV", "production")
    monkeypatch.delenv("LOSSLEDGER_SECRET_KEY", raising=False)
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", f"sqlite:///{tmp_path / 'p.db'}")
    get_settings.cache_clear()
    try:
        with pytest.raises(RuntimeError, match="SECRET_KEY"):
            cli.main(["serve"])
    finally:
        get_settings.cache_clear()
