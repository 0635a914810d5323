"""Races and abuse against a real server: three uvicorn workers on one database, driven from
threads, on SQLite (a file) and PostgreSQL.

- A staged import committed twice at once is applied once: one 200, one 409 that carries the
  first commit's counts (offer imports and fleet imports alike).
- Guesses sent at once cannot pass the lock-out limit, and a locked account's right password
  gets no token.
- Two saves of one offer against the same version: one wins, the other gets 409, nothing lost.
- Failed log-ins with names of a million characters leave the database the same size.
"""

from __future__ import annotations

import csv
import io
import os
import shutil
import signal
import socket
import sqlite3
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path

import httpx
import pytest
from sqlalchemy import create_engine, text

from tests import factories as f
from tests.conftest import TEST_PASSWORD, _truncate_postgres, auth, seed_test_users
from tests.e2e.test_fleet import HEADER

WORKERS = 3
LOCKOUT_FAILURES = 10
LOCKED = "Too many failed log-ins"
WRONG = "Wrong user name or password."


@dataclass
class RaceServer:
    url: str
    db_url: str

    def client(self, user: str | None = "tester") -> httpx.Client:
        headers = auth(user) if user else {}
        return httpx.Client(base_url=self.url, headers=headers, timeout=60)


def _free_port() -> int:
    with closing(socket.socket()) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _start(db_url: str, log: Path) -> tuple[subprocess.Popen, str]:
    port = _free_port()
    env = {**os.environ, "LOSSLEDGER_DATABASE_URL": db_url, "LOSSLEDGER_ENV": "test",
           "LOSSLEDGER_LOCKOUT_FAILURES": str(LOCKOUT_FAILURES),
           # Every request here comes from 127.0.0.1: the per-address limit is checked in-process
           # (test_ownership_and_log_ins.py), not here, where it would lock the later tests out.
           "LOSSLEDGER_ADDRESS_LOCKOUT_FAILURES": "100000"}
    with log.open("wb") as out:
        process = subprocess.Popen(
            [sys.executable, "-m", "uvicorn", "--factory", "server.app:create_app", "--port", str(port),
             "--workers", str(WORKERS), "--log-level", "warning"],
            env=env, stdout=out, stderr=subprocess.STDOUT,
        )
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"{url}/healthz", timeout=1).status_code == 200:
                return process, url
        except httpx.HTTPError:
            time.sleep(0.1)
    process.kill()
    raise RuntimeError(f"the server did not start: {log.read_text()[-2000:]}")


@pytest.fixture(scope="module", params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def race_server(request, tmp_path_factory, test_password_hash) -> Iterator[RaceServer]:
    """One server of three workers per engine, shared by this module's tests (each makes its own
    tender, users and names)."""
    folder = tmp_path_factory.mktemp(f"races-{request.param}")
    if request.param == "sqlite":
        path = folder / "races.db"
        shutil.copyfile(request.getfixturevalue("sqlite_template"), path)
        db_url = f"sqlite:///{path}"
    else:
        db_url = request.getfixturevalue("postgres_migrated")
        _truncate_postgres(db_url)
        seed_test_users(db_url, test_password_hash)
    # The workers' warnings and tracebacks stay in the test's temporary folder, for a failure.
    process, url = _start(db_url, folder / "server.log")
    try:
        yield RaceServer(url, db_url)
    finally:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
        if request.param == "postgres":
            _truncate_postgres(db_url)


def at_once(calls: list[Callable[[], httpx.Response]]) -> list[httpx.Response]:
    """Run the calls in threads released together; their answers in the calls' order."""
    barrier = threading.Barrier(len(calls))
    answers: list[httpx.Response | BaseException | None] = [None] * len(calls)

    def run(k: int) -> None:
        barrier.wait()
        try:
            answers[k] = calls[k]()
        except BaseException as exc:  # reported below, in the test's thread
            answers[k] = exc

    threads = [threading.Thread(target=run, args=(k,)) for k in range(len(calls))]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    for answer in answers:
        if isinstance(answer, BaseException):
            raise answer
    return answers  # type: ignore[return-value]


def _codes(answers: list[httpx.Response]) -> list[int]:
    return sorted(a.status_code for a in answers)


def _database_bytes(db_url: str) -> int:
    """The database's size: SQLite's pages (the WAL included, as a reader sees them) or every
    PostgreSQL table with its indexes and TOAST."""
    if db_url.startswith("sqlite"):
        with closing(sqlite3.connect(db_url.removeprefix("sqlite:///"))) as conn:
            pages = conn.execute("PRAGMA page_count").fetchone()[0]
            return pages * conn.execute("PRAGMA page_size").fetchone()[0]
    engine = create_engine(db_url)
    try:
        with engine.connect() as conn:
            return conn.execute(text(
                "SELECT sum(pg_total_relation_size(c.oid)) FROM pg_class c JOIN pg_namespace n "
                "ON n.oid = c.relnamespace WHERE n.nspname = 'public' AND c.relkind = 'r'")).scalar()
    finally:
        engine.dispose()


# --- staged imports committed twice at once -----------------------------------------------------

OFFER_PAIRS = 60
FLEET_PAIRS = 10


def test_an_offer_import_committed_twice_at_once_is_applied_once(race_server):
    with race_server.client() as admin, race_server.client("buyer") as first, race_server.client("buyer") as second:
        basis_id = admin.post("/api/v1/cost-bases", json=f.direct_basis(name="Race basis")).json()["id"]
        tender = admin.post("/api/v1/tenders", json=f.tender(basis_id, reference="RACE-IMPORTS")).json()
        lot_id = tender["lots"][0]["id"]
        for pair in range(OFFER_PAIRS):
            rows = "".join(f"{tender['lots'][0]['name']},Pair {pair} {side},{10000 + pair},400,4000,4.0\n"
                           for side in "AB")
            staged = first.post(f"/api/v1/tenders/{tender['id']}/offer-imports",
                                files={"file": ("offers.csv", "lot,bidder,unit_price,no_load_loss_w,load_loss_w,"
                                                              "impedance_pct\n" + rows)})
            assert staged.status_code == 201, staged.text
            path = f"/api/v1/offer-imports/{staged.json()['id']}/commit"
            answers = at_once([lambda: first.post(path), lambda: second.post(path)])
            assert _codes(answers) == [200, 409], (pair, [a.text[:300] for a in answers])
            won, lost = sorted(answers, key=lambda a: a.status_code)
            assert "committed already" in lost.json()["detail"]
            # The loser is told what the winner did: the same import, committed, two offers made.
            current = lost.json()["current"]
            assert current["committed_at"] == won.json()["committed_at"] and current["creates"] == 2
        offers = admin.get(f"/api/v1/lots/{lot_id}/offers").json()
        bidders = [o["bidder"] for o in offers]
        assert len(bidders) == 2 * OFFER_PAIRS and len(set(bidders)) == len(bidders)
        events = admin.get("/api/v1/audit", params={"object_type": "tender", "object_id": tender["id"],
                                                    "limit": 1000}).json()
        assert sum(e["action"] == "import" for e in events) == OFFER_PAIRS


def _fleet_file(pair: int) -> bytes:
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(HEADER)
    for unit in range(3):
        writer.writerow([f"RACE-{pair}-{unit}", "Mill Lane", "North", 400, 3, "liquid", 1990, 900, 6000, "", 0.8,
                         0.3, ""])
    return out.getvalue().encode()


def test_a_fleet_import_committed_twice_at_once_is_applied_once(race_server):
    with race_server.client("planner") as first, race_server.client("planner") as second:
        for pair in range(FLEET_PAIRS):
            staged = first.post("/api/v1/fleet/import", data={"commit": "false"},
                                files={"file": ("fleet.csv", _fleet_file(pair), "text/csv")})
            assert staged.status_code == 201 and staged.json()["can_commit"], staged.text
            path = f"/api/v1/fleet/imports/{staged.json()['id']}/commit"
            answers = at_once([lambda: first.post(path), lambda: second.post(path)])
            assert _codes(answers) == [200, 409], (pair, [a.text[:300] for a in answers])
            won, lost = sorted(answers, key=lambda a: a.status_code)
            assert lost.json()["current"]["committed_at"] == won.json()["committed_at"]
        units = first.get("/api/v1/fleet/units", params={"limit": 1000}).json()
        race_units = [u for u in units["units"] if u["asset_id"].startswith("RACE-")]
        assert len(race_units) == 3 * FLEET_PAIRS and all(u["version"] == 1 for u in race_units)


# --- guesses sent at once ------------------------------------------------------------------------

GUESSES = 40


def _make_user(server: RaceServer, name: str) -> None:
    with server.client() as admin:
        made = admin.post("/api/v1/users", json={"username": name, "password": TEST_PASSWORD, "roles": ["viewer"]})
        assert made.status_code == 201, made.text


def _guess(clients: list[httpx.Client], name: str, passwords: list[str]) -> list[httpx.Response]:
    return at_once([lambda c=c, p=p: c.post("/api/v1/token", data={"username": name, "password": p})
                    for c, p in zip(clients, passwords, strict=True)])


def _failures_recorded(server: RaceServer, name: str) -> int:
    with server.client() as admin:  # "tester" holds the admin role: it sees who failed
        events = admin.get("/api/v1/audit", params={"actor": name, "limit": 1000}).json()
    return sum(e["action"] == "login_failed" for e in events)


def test_guesses_sent_at_once_cannot_pass_the_limit(race_server):
    clients = [race_server.client(None) for _ in range(GUESSES)]
    try:
        _make_user(race_server, "guessed")
        answers = _guess(clients, "guessed", [f"wrong guess {k}" for k in range(GUESSES)])
        assert _codes(answers) == [401] * GUESSES
        words = [a.json()["detail"] for a in answers]
        # Each place is taken before its password is checked: exactly the limit are checked.
        assert words.count(WRONG) == LOCKOUT_FAILURES, words
        assert sum(w.startswith(LOCKED) for w in words) == GUESSES - LOCKOUT_FAILURES
        assert _failures_recorded(race_server, "guessed") == LOCKOUT_FAILURES
        # Once locked, the right password gets no token either.
        right = clients[0].post("/api/v1/token", data={"username": "guessed", "password": TEST_PASSWORD})
        assert right.status_code == 401 and right.json()["detail"].startswith(LOCKED)

        # The right password sent among the guesses: it is checked only if it took one of the
        # places, and nothing beyond the limit is checked either way.
        _make_user(race_server, "guessed-too")
        passwords = [f"wrong guess {k}" for k in range(GUESSES - 1)] + [TEST_PASSWORD]
        answers = _guess(clients, "guessed-too", passwords)
        assert all(a.status_code in (200, 401) for a in answers), [a.text[:200] for a in answers]
        words = [a.json().get("detail", "token") for a in answers]
        checked = words.count(WRONG) + words.count("token")
        assert words.count(WRONG) <= LOCKOUT_FAILURES and checked <= LOCKOUT_FAILURES + 1, words
        assert words[-1] == "token" or words[-1].startswith(LOCKED), words[-1]
        assert _failures_recorded(race_server, "guessed-too") == words.count(WRONG)
    finally:
        for client in clients:
            client.close()


# --- two saves of one offer ----------------------------------------------------------------------

PATCH_PAIRS = 200


def test_two_saves_of_one_version_never_lose_an_update(race_server):
    with race_server.client() as first, race_server.client("buyer") as second:
        basis_id = first.post("/api/v1/cost-bases", json=f.direct_basis(name="Patch basis")).json()["id"]
        tender = first.post("/api/v1/tenders", json=f.tender(basis_id, reference="RACE-PATCH")).json()
        offer = first.post(f"/api/v1/lots/{tender['lots'][0]['id']}/offers", json=f.offer()).json()
        path = f"/api/v1/offers/{offer['id']}"
        version, price = offer["version"], None
        for pair in range(PATCH_PAIRS):
            prices = (10_000.0 + pair, 20_000.0 + pair)
            answers = at_once([lambda c=c, p=p, v=version: c.patch(path, json={"version": v, "unit_price": p})
                               for c, p in zip((first, second), prices, strict=True)])
            assert _codes(answers) == [200, 409], (pair, [a.text[:300] for a in answers])
            won = next(a for a in answers if a.status_code == 200)
            assert won.json()["version"] == version + 1
            version, price = version + 1, won.json()["unit_price"]
        stored = first.get(path).json()
        assert stored["version"] == offer["version"] + PATCH_PAIRS and stored["unit_price"] == price


# --- names of a million characters ---------------------------------------------------------------

HUGE_NAMES = 60


def test_failed_log_ins_with_huge_names_leave_the_database_small(race_server):
    # Two names alike in all but their last character: both are kept as the same 64 characters.
    names = ["x" * 999_999 + last for last in "ab"]
    before = _database_bytes(race_server.db_url)
    clients = [race_server.client(None) for _ in range(6)]
    try:
        answers = []
        for start in range(0, HUGE_NAMES, len(clients)):
            answers += at_once([lambda c=c, k=k: c.post("/api/v1/token", data={
                "username": names[k % len(names)], "password": "not the password"})
                for k, c in enumerate(clients, start=start)])
    finally:
        for client in clients:
            client.close()
    assert _codes(answers) == [401] * HUGE_NAMES, {a.text[:200] for a in answers}
    grown = _database_bytes(race_server.db_url) - before
    assert grown < 1_000_000, grown
    with race_server.client() as admin:
        events = admin.get("/api/v1/audit", params={"actor": "x" * 64, "limit": 1000}).json()
    # Each name is counted on its own (by its hash, not by the 64 characters kept of it), so
    # each had its ten failures before it was locked.
    assert sum(e["action"] == "login_failed" for e in events) == len(names) * LOCKOUT_FAILURES
