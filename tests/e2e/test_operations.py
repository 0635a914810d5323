"""Operations: health and readiness, backup and restore, production guards."""

from __future__ import annotations

import json
import os
import re
import shutil
import socket
import sqlite3
import stat
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from server import cli
from server.app import create_app
from server.settings import Settings, get_settings
from server.storage import backup
from server.storage.migrate import downgrade, upgrade
from tests import factories as f
from tests.conftest import auth, make_client, seed_test_users

REPO = Path(__file__).resolve().parents[2]


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


def test_production_refuses_the_default_secret(monkeypatch, tmp_path, capsys):
    monkeypatch.setenv("LOSSLEDGER_ENV", "production")
    monkeypatch.delenv("LOSSLEDGER_SECRET_KEY", raising=False)
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", f"sqlite:///{tmp_path / 'p.db'}")
    get_settings.cache_clear()
    try:
        assert cli.main(["serve"]) == 1
        assert capsys.readouterr().err.splitlines() == [
            "lossledger: error: LOSSLEDGER_SECRET_KEY must be set to a long random value (32+ characters) in production."]
        with pytest.raises(RuntimeError, match="SECRET_KEY"):
            cli.main(["--debug", "serve"])
    finally:
        get_settings.cache_clear()


# --- readiness -------------------------------------------------------------------------------

def test_readiness_needs_the_schema_at_the_latest_migration(sqlite_url):
    from server.app import head_revision

    downgrade(sqlite_url, "-1")
    with make_client(sqlite_url) as client:
        r = client.get("/readyz")
        assert r.status_code == 503 and r.json()["expected"] == head_revision()
        upgrade(sqlite_url)
        assert client.get("/readyz").json() == {"status": "ready"}


# --- request logs, compression, caching, origin ------------------------------------------------

def test_every_request_is_logged_with_its_request_id(client, caplog):
    caplog.set_level("INFO", logger="lossledger.request")
    kept = client.get("/api/v1/me", headers={"X-Request-ID": "lb-7f3a.1"})
    made = client.get("/healthz", headers={"X-Request-ID": "not plain; <script>"})
    assert kept.headers["x-request-id"] == "lb-7f3a.1"
    assert re.fullmatch(r"[0-9a-f]{32}", made.headers["x-request-id"])
    lines = [json.loads(r.getMessage()) for r in caplog.records if r.name == "lossledger.request"]
    me = next(line for line in lines if line["request_id"] == "lb-7f3a.1")
    assert me["user"] == "tester" and me["method"] == "GET" and me["path"] == "/api/v1/me"
    assert me["status"] == 200 and me["ms"] >= 0 and me["client"]
    health = next(line for line in lines if line["request_id"] == made.headers["x-request-id"])
    assert health["user"] is None and health["status"] == 200


def test_compression_spares_pages_and_static_files_cache_by_version(page_client):
    from tests.e2e.test_pages import log_in

    vendored = page_client.get("/static/vendor/htmx-2.0.11.min.js")
    assert vendored.headers["content-encoding"] == "gzip"
    assert vendored.headers["cache-control"] == "public, max-age=31536000, immutable"
    own = page_client.get("/static/js/app.js")
    assert own.headers["cache-control"] == "public, max-age=300"
    assert page_client.get("/static/vendor/none-1.0.0.js").headers["cache-control"] == "no-store"
    log_in(page_client)
    api = page_client.get("/openapi.json")
    assert api.headers["content-encoding"] == "gzip" and api.headers["cache-control"] == "no-store"
    page = page_client.get("/tenders")
    assert len(page.content) > 1000 and "content-encoding" not in page.headers  # carries the form token
    assert page.headers["x-frame-options"] == "DENY"


def test_the_public_origin_decides_which_forms_are_same_site(sqlite_url):
    from tests.e2e.test_pages import log_in

    settings = Settings(database_url=sqlite_url, env="test", public_origin="https://lossledger.example.org/")
    with TestClient(create_app(settings)) as client:
        csrf = log_in(client)
        # Behind a proxy the Host header is the application's own: it no longer decides.
        refused = client.post("/logout", data={"csrf_token": csrf}, headers={"Origin": "http://testserver"},
                              follow_redirects=False)
        assert refused.status_code == 403
        done = client.post("/logout", data={"csrf_token": csrf},
                           headers={"Origin": "https://LossLedger.example.org:443"}, follow_redirects=False)
        assert done.status_code == 303
    with pytest.raises(ValueError, match="scheme and host"):
        Settings(public_origin="lossledger.example.org")


def test_serve_passes_the_trusted_proxies_and_the_log_set_up(monkeypatch, tmp_path):
    import uvicorn

    seen = {}
    monkeypatch.setattr(uvicorn, "run", lambda *args, **kwargs: seen.update(kwargs))
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", f"sqlite:///{tmp_path / 's.db'}")
    monkeypatch.setenv("LOSSLEDGER_TRUSTED_PROXIES", "10.1.2.3,192.168.0.0/16")
    get_settings.cache_clear()
    try:
        assert cli.main(["serve", "--port", "8123"]) == 0
    finally:
        get_settings.cache_clear()
    assert seen["proxy_headers"] is True and seen["forwarded_allow_ips"] == "10.1.2.3,192.168.0.0/16"
    loggers = seen["log_config"]["loggers"]
    assert loggers["lossledger.request"]["handlers"] == ["requests"] and seen["access_log"] is False
    assert seen["log_config"]["handlers"]["requests"]["stream"] == "ext://sys.stdout"


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _get(port: int, path: str, headers: dict[str, str]) -> int:
    request = urllib.request.Request(f"http://127.0.0.1:{port}{path}", headers=headers)
    with urllib.request.urlopen(request, timeout=10) as response:
        return response.status


def test_serve_with_two_workers_logs_every_request_as_json_on_stdout(tmp_path, test_password_hash):
    url = f"sqlite:///{tmp_path / 'served.db'}"
    upgrade(url)
    seed_test_users(url, test_password_hash)
    port = _free_port()
    env = {**os.environ, "LOSSLEDGER_DATABASE_URL": url, "LOSSLEDGER_ENV": "development",
           "LOSSLEDGER_TRUSTED_PROXIES": "127.0.0.1"}
    server = subprocess.Popen([sys.executable, "-m", "server.cli", "serve", "--port", str(port), "--workers", "2"],
                              cwd=REPO, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                if _get(port, "/healthz", {"X-Request-ID": "wait"}) == 200:
                    break
            except OSError:
                if time.monotonic() > deadline or server.poll() is not None:
                    raise
                time.sleep(0.2)
        assert _get(port, "/healthz", {"X-Request-ID": "probe-1"}) == 200
        assert _get(port, "/api/v1/me", {"X-Request-ID": "probe-2", **auth("viewer")}) == 200
        # From a trusted proxy on this host: the address it forwards is the client's.
        assert _get(port, "/api/v1/tenders", {"X-Request-ID": "probe-3", "X-Forwarded-For": "203.0.113.7",
                                               **auth("tester")}) == 200
    finally:
        server.terminate()
        out, err = server.communicate(timeout=30)
    lines = [json.loads(line) for line in out.splitlines() if line.strip()]  # every line is JSON
    by_id = {line["request_id"]: line for line in lines}
    assert {"probe-1", "probe-2", "probe-3"} <= set(by_id), err
    assert by_id["probe-1"]["path"] == "/healthz" and by_id["probe-1"]["status"] == 200
    assert by_id["probe-2"]["user"] == "viewer" and by_id["probe-2"]["client"] == "127.0.0.1"
    assert by_id["probe-3"]["user"] == "tester" and by_id["probe-3"]["client"] == "203.0.113.7"
    assert all({"method", "path", "status", "ms", "client", "user"} <= set(line) for line in lines)


# --- backup and restore ----------------------------------------------------------------------

def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def test_backups_and_the_sqlite_file_are_private(client, db_url, tmp_path, monkeypatch):
    f.setup_lot(client)
    folder = tmp_path / "backups"
    folder.mkdir()
    monkeypatch.chdir(folder)
    # A name that starts with "-" is a file name to the tools, never an option.
    name = "-backup.db" if db_url.startswith("sqlite") else "-backup.dump"
    backup.backup(db_url, name)
    assert _mode(folder / name) == 0o600
    assert [p.name for p in folder.iterdir()] == [name]  # no partial file left behind
    client.app.state.db.engine.dispose()
    assert backup.restore(db_url, name) == backup.known_revisions()[0]
    with make_client(db_url) as fresh:
        assert len(fresh.get("/api/v1/tenders", headers=auth("tester")).json()) == 1
    fresh_db = folder / "new.db"
    upgrade(f"sqlite:///{fresh_db}")
    assert _mode(fresh_db) == 0o600


def test_restore_refuses_what_is_not_a_lossledger_database(client, db_url, tmp_path):
    _, tender_id, _ = f.setup_lot(client)
    empty = tmp_path / "empty.db"
    empty.touch()
    unrelated = tmp_path / "unrelated.db"
    with sqlite3.connect(unrelated) as conn:
        conn.execute("CREATE TABLE notes (body TEXT)")
    text_file = tmp_path / "notes.txt"
    text_file.write_text("not a database\n" * 50)
    client.app.state.db.engine.dispose()
    for path in (empty, unrelated, text_file, tmp_path / "missing.db"):
        with pytest.raises(backup.BackupError) as refused:
            backup.restore(db_url, str(path))
        assert "\n" not in str(refused.value)
        if db_url.startswith("postgresql") and path.exists():
            assert "pg_restore" in str(refused.value)  # the tool's own words
    assert client.get(f"/api/v1/tenders/{tender_id}").status_code == 200  # untouched


def test_restore_checks_the_schema_revision(sqlite_url, tmp_path, monkeypatch, capsys):
    older = tmp_path / "older.db"
    shutil.copyfile(sqlite_url.removeprefix("sqlite:///"), older)
    downgrade(f"sqlite:///{older}", "-1")
    newer = tmp_path / "newer.db"
    shutil.copyfile(sqlite_url.removeprefix("sqlite:///"), newer)
    with sqlite3.connect(newer) as conn:
        conn.execute("UPDATE alembic_version SET version_num = '9999'")
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", sqlite_url)
    get_settings.cache_clear()
    try:
        assert cli.main(["db", "restore", str(newer)]) == 1
        err = capsys.readouterr().err
        assert len(err.splitlines()) == 1 and "9999" in err and "Traceback" not in err
        assert cli.main(["db", "restore", str(older)]) == 0
        assert "lossledger db upgrade" in capsys.readouterr().out
    finally:
        get_settings.cache_clear()


def test_a_pg_dump_failure_shows_the_tool_s_own_words():
    with pytest.raises(backup.BackupError, match="pg_dump failed: .*(connect|connection)"):
        backup.backup("postgresql+psycopg://nobody@127.0.0.1:1/none", "/tmp/never-written.dump")
    assert not Path("/tmp/never-written.dump").exists()


def test_command_line_errors_are_one_line_and_the_version_prints(monkeypatch, tmp_path, capsys):
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", f"sqlite:///{tmp_path / 'c.db'}")
    get_settings.cache_clear()
    try:
        assert cli.main(["db", "restore", str(tmp_path / "nothing.db")]) == 1
        assert capsys.readouterr().err == f"lossledger: error: There is no backup file at {tmp_path / 'nothing.db'}.\n"
        with pytest.raises(backup.BackupError):
            cli.main(["--debug", "db", "restore", str(tmp_path / "nothing.db")])
        with pytest.raises(SystemExit) as done:
            cli.main(["--version"])
        assert done.value.code == 0
        from server.version import VERSION

        assert capsys.readouterr().out.strip() == f"lossledger {VERSION}"
    finally:
        get_settings.cache_clear()
