"""The demo scenario and the command line."""

from __future__ import annotations

import pytest

from server import cli
from server.settings import get_settings
from tests.conftest import make_client


@pytest.fixture
def cli_env(monkeypatch, tmp_path):
    url = f"sqlite:///{tmp_path / 'cli.db'}"
    monkeypatch.setenv("LOSSLEDGER_DATABASE_URL", url)
    get_settings.cache_clear()
    yield url
    get_settings.cache_clear()


def _demo_password(output: str, name: str) -> str:
    for line in output.splitlines():
        parts = line.split()
        if parts and parts[0] == name:
            return parts[1]
    raise AssertionError(f"{name} not printed")


def test_demo_seeds_once_and_every_lot_rewards_low_losses(cli_env, capsys):
    assert cli.main(["demo"]) == 0
    out = capsys.readouterr().out
    assert "Seeded the demo scenario" in out
    assert cli.main(["demo"]) == 0
    assert "not empty" in capsys.readouterr().out
    with make_client(cli_env) as client:
        password = _demo_password(out, "demo-viewer")
        token = client.post("/api/v1/token", data={"username": "demo-viewer", "password": password}).json()
        client.headers["Authorization"] = f"Bearer {token['access_token']}"
        tenders = client.get("/api/v1/tenders").json()
        assert len(tenders) == 1 and len(tenders[0]["lots"]) == 3
        assert len(client.get("/api/v1/cost-bases").json()) == 3
        leaders, excluded = set(), 0
        for lot in tenders[0]["lots"]:
            rows = client.get(f"/api/v1/lots/{lot['id']}/ranking", params={"include_non_compliant": True}).json()["rows"]
            assert len(rows) == 5
            cheapest = min(rows, key=lambda r: r["unit_price"])
            assert cheapest["rank"] != 1, "the demo must show that the cheapest price is not the lowest TOC"
            leaders.add(rows[0]["bidder"])
            excluded += sum(1 for r in rows if not r["compliant"])
        assert len(leaders) == 3
        assert excluded == 2  # one offer over the utility's cap, one over the EU Tier 1 losses [from memory]


def test_db_upgrade_and_downgrade_commands(cli_env, capsys):
    assert cli.main(["db", "upgrade"]) == 0
    assert cli.main(["db", "downgrade", "base"]) == 0
    assert cli.main(["db", "upgrade"]) == 0
    assert "latest schema" in capsys.readouterr().out


def test_demo_fiction_is_labelled():
    from server import demo

    assert "fictional" in demo.UTILITY
    assert all("(demo)" in name for name in demo.BIDDERS)


def test_users_commands(cli_env, capsys, monkeypatch):
    import io

    monkeypatch.setattr("sys.stdin", io.StringIO("a long enough password\n"))
    assert cli.main(["users", "create", "erin", "--role", "buyer", "--role", "viewer", "--password-stdin"]) == 0
    monkeypatch.setattr("sys.stdin", io.StringIO("short\n"))
    assert cli.main(["users", "create", "frank", "--role", "buyer", "--password-stdin"]) == 1
    assert "at least 10 characters" in capsys.readouterr().err
    assert cli.main(["users", "list"]) == 0
    listing = capsys.readouterr().out
    assert "erin" in listing and "buyer, viewer" in listing and "frank" not in listing
    monkeypatch.setattr("sys.stdin", io.StringIO("another long password\n"))
    assert cli.main(["users", "reset-password", "erin", "--password-stdin"]) == 0
    assert cli.main(["users", "disable", "erin"]) == 0
    with make_client(cli_env) as client:
        r = client.post("/api/v1/token", data={"username": "erin", "password": "another long password"})
        assert r.status_code == 401  # disabled


def test_demo_fleet_has_units_and_marks_estimates(cli_env, capsys):
    assert cli.main(["demo"]) == 0
    out = capsys.readouterr().out
    assert "invented fleet of 600 units" in out
    with make_client(cli_env) as client:
        password = _demo_password(out, "demo-viewer")
        token = client.post("/api/v1/token", data={"username": "demo-viewer", "password": password}).json()
        client.headers["Authorization"] = f"Bearer {token['access_token']}"
        basis = next(b for b in client.get("/api/v1/cost-bases").json() if b["method"] == "present_worth")
        summary = client.get("/api/v1/fleet/summary", params={"cost_basis_id": basis["id"]}).json()
        assert summary["units"] == 600 and summary["units_with_estimated_losses"] == 75
