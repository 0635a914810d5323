"""The data version the caches key on: ordered by commit, moved by every change of evaluated
data (through the ORM or around it) and by nothing a log-in writes. Each test runs on SQLite
and, with the test database URL set, on PostgreSQL, with real sessions on their own connections."""

from __future__ import annotations

import re
import threading
import time

from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text

from server import deps
from server.app import create_app
from server.services import fleet
from server.settings import Settings
from server.storage.audit import SECURITY_ACTIONS
from server.storage.database import Database
from server.storage.generation import NO_VERSION, data_version
from server.storage.models import Offer, utcnow
from tests import factories as f
from tests.conftest import TEST_PASSWORD, auth


def _version(url: str) -> tuple[int, int]:
    """The committed data version (epoch, value), read on a connection of its own."""
    db = Database(url)
    try:
        with db.session() as session:
            return data_version(session)
    finally:
        db.dispose()


def _wait_for_a_lock_wait(url: str) -> None:
    """Until a connection of this database waits for a lock (PostgreSQL: the second writer
    queued behind the first one's data version row)."""
    engine = create_engine(url)
    try:
        deadline = time.monotonic() + 30
        with engine.connect() as conn:
            while conn.execute(text(
                    "SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
                    "AND wait_event_type = 'Lock'")).scalar_one() == 0:
                assert time.monotonic() < deadline, "the second writer never waited for the first"
                time.sleep(0.02)
    finally:
        engine.dispose()


def _prices(ranking: dict) -> dict[int, float]:
    return {row["offer_id"]: row["unit_price"] for row in ranking["rows"]}


def test_a_change_committed_after_a_later_writer_is_never_hidden_by_the_cache(client, db_url):
    """The interleaving an id drawn at INSERT gets wrong: writer one flushes, writer two commits,
    a reader caches the ranking, writer one commits. Every ranking read after the commits shows
    both changes; the version moved once per transaction, in commit order."""
    _, _, lot_id = f.setup_lot(client)
    one = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="One (test)", unit_price=12000)).json()
    two = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Two (test)", unit_price=13000)).json()
    ranking_url = f"/api/v1/lots/{lot_id}/ranking"
    start = _version(db_url)

    db = Database(db_url)
    first = db.sessionmaker()
    try:
        first.get(Offer, one["id"]).unit_price = 20000.0
        first.flush()  # written and holding the data version's row lock, not committed

        reached_commit = threading.Event()
        errors: list[BaseException] = []

        def second_writer() -> None:
            try:
                with db.session() as second:
                    second.get(Offer, two["id"]).unit_price = 14000.0
                    reached_commit.set()
                    second.commit()
            except BaseException as exc:  # reported by the test thread
                errors.append(exc)

        thread = threading.Thread(target=second_writer)
        thread.start()
        assert reached_commit.wait(30)
        if db_url.startswith("postgresql"):
            _wait_for_a_lock_wait(db_url)

        # The reader computes and caches the ranking at the version committed so far.
        cached = client.get(ranking_url).json()
        assert _prices(cached) == {one["id"]: 12000.0, two["id"]: 13000.0}
        assert _version(db_url) == start
        assert thread.is_alive(), "the second writer committed while the first still held its change"

        first.commit()
        thread.join(60)
        assert not thread.is_alive() and not errors, errors
    finally:
        first.close()
        db.dispose()

    assert _prices(client.get(ranking_url).json()) == {one["id"]: 20000.0, two["id"]: 14000.0}
    assert _version(db_url) == (start[0], start[1] + 2)


def _browser_log_in(app, username: str, password: str) -> tuple[TestClient, int]:
    browser = TestClient(app)
    response = browser.post("/login", data={"username": username, "password": password, "next": "/tenders"},
                            follow_redirects=False)
    return browser, response.status_code


def _security_events(url: str) -> list[str]:
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            return list(conn.execute(text("SELECT action FROM audit_events ORDER BY id")).scalars())
    finally:
        engine.dispose()


def test_log_ins_and_log_outs_keep_the_cached_page_and_ranking(db_url, monkeypatch):
    """Every kind of security event (a failed log-in, a lock-out, a refusal while locked out, a
    log-in through the form and for a token, a log-out, a revoked token) is written to the
    audit trail, and the cached lot page and ranking JSON are still hits afterwards."""
    app = create_app(Settings(database_url=db_url, env="test", lockout_failures=2))
    with TestClient(app) as client:
        client.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(client)
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
        page = client.get(f"/lots/{lot_id}").text
        ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
        before = _version(db_url)
        events_before = len(_security_events(db_url))

        for _ in range(3):  # two failures lock "buyer" out; the third attempt is refused as locked
            assert _browser_log_in(app, "buyer", "wrong password")[1] == 401
        assert _browser_log_in(app, "no such user", "wrong password")[1] == 401
        browser, status = _browser_log_in(app, "approver", TEST_PASSWORD)
        assert status == 303
        form_token = re.search(r'name="csrf_token" value="([^"]+)"', browser.get("/tenders").text).group(1)
        assert browser.post("/logout", data={"csrf_token": form_token}, follow_redirects=False).status_code == 303
        assert client.post("/api/v1/token", data={"username": "viewer", "password": "wrong"}).status_code == 401
        issued = client.post("/api/v1/token", data={"username": "viewer", "password": TEST_PASSWORD})
        assert issued.status_code == 200
        token_headers = {"Authorization": f"Bearer {issued.json()['access_token']}"}
        assert client.post("/api/v1/token/revoke", headers=token_headers).status_code == 204

        written = set(_security_events(db_url)[events_before:])
        assert {"login_failed", "lockout", "login_locked", "login", "logout", "token_revoked"} <= written, written
        assert written <= SECURITY_ACTIONS, written
        assert _version(db_url) == before

        def no_threads(*_args, **_kwargs):
            raise AssertionError("a cache miss: the entry was computed again")

        # A hit is served on the event loop; a miss would need a worker thread.
        monkeypatch.setattr(deps, "run_in_threadpool", no_threads)
        assert client.get(f"/lots/{lot_id}").text == page
        assert client.get(f"/api/v1/lots/{lot_id}/ranking").json() == ranking


def _fleet_csv(*rows: str) -> bytes:
    header = "asset_id,site,region,rating_kva,phases,insulation,year_installed,no_load_loss_w,load_loss_w,peak_load_pu,loss_factor"
    return ("\n".join([header, *rows]) + "\n").encode()


def test_every_kind_of_write_moves_the_version_once(client, db_url):
    """An offer PATCH, a cost basis revision, a fleet import's commit and an award each move the
    version by one (one bump per transaction, however many rows it writes); the cached ranking
    follows the offer and the tender's move to the new revision."""
    basis_id, tender_id, lot_id = f.setup_lot(client)
    offer = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer()).json()
    ranking_url = f"/api/v1/lots/{lot_id}/ranking"
    first = client.get(ranking_url).json()

    start = _version(db_url)
    patched = client.patch(f"/api/v1/offers/{offer['id']}", json={"version": offer["version"], "unit_price": 15000})
    assert patched.status_code == 200
    assert _version(db_url) == (start[0], start[1] + 1)
    assert _prices(client.get(ranking_url).json()) == {offer["id"]: 15000.0}

    start = _version(db_url)
    revised = client.patch(f"/api/v1/cost-bases/{basis_id}", json=f.revision(1, load_rate_per_kw=2500.0))
    assert revised.status_code == 200, revised.text
    assert _version(db_url) == (start[0], start[1] + 1)
    moved = client.patch(f"/api/v1/tenders/{tender_id}", json={"version": 1, "cost_basis_revision": 2})
    assert moved.status_code == 200, moved.text
    assert client.get(ranking_url).json()["load_rate_per_kw"] == 2500.0 != first["load_rate_per_kw"]

    staged = client.post("/api/v1/fleet/import", data={"commit": "false"}, files={"file": (
        "fleet.csv", _fleet_csv("V-1,Mill Lane,North,400,3,liquid,1990,900,6000,0.8,0.3",
                                "V-2,Mill Lane,North,250,3,liquid,2010,450,3500,0.6,0.25"), "text/csv")}).json()
    start = _version(db_url)
    assert client.post(f"/api/v1/fleet/imports/{staged['id']}/commit").status_code == 200
    assert _version(db_url) == (start[0], start[1] + 1)

    start = _version(db_url)
    awarded = client.post(f"/api/v1/lots/{lot_id}/award", json={"note": "test award"})
    assert awarded.status_code == 201, awarded.text
    assert _version(db_url) == (start[0], start[1] + 1)


def test_a_write_around_the_orm_moves_the_version(db_url):
    """The fleet's bulk path writes through the driver, which no ORM hook sees; it moves the
    version itself, in the same transaction as its rows."""
    db = Database(db_url)
    try:
        start = _version(db_url)
        with db.session() as session:
            sqlite = session.connection().dialect.name == "sqlite"
            now = utcnow()
            stamp = now.replace(tzinfo=None).isoformat(" ") if sqlite else now
            row = ["RAW-1", "Site", "Region", 400.0, 3, "liquid", 1990, 900.0, 6000.0, False, False, 0.8, 0.3, None, 1,
                   stamp]
            fleet.bulk_write(session, fleet._UNIT_COLUMNS, [[value] for value in row], [])
            session.commit()
        assert _version(db_url)[1] == start[1] + 1
    finally:
        db.dispose()


def test_a_database_emptied_and_refilled_never_repeats_a_version(client, db_url):
    """The row made again after it was deleted (a database emptied by hand) starts a new epoch,
    so a version cached from before never matches one after, though the counts restart."""
    _, _, lot_id = f.setup_lot(client)
    before = _version(db_url)
    engine = create_engine(db_url)
    try:
        with engine.begin() as conn:
            conn.execute(text("DELETE FROM data_version"))
    finally:
        engine.dispose()
    assert _version(db_url) == NO_VERSION
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
    after = _version(db_url)
    assert after[1] == 1 and after[0] != before[0]
