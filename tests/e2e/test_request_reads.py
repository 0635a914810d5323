"""The one read every request makes (who is asking, and the data generation) and the caches
keyed on it: never stale after a change, never trusting a revoked token, and surviving a
database server that dropped its connections."""

from __future__ import annotations

import time

from sqlalchemy import create_engine, text

from server.storage.database import Database
from server.storage.generation import data_version, remember, remembered
from tests import factories as f
from tests.conftest import add_user_with_token, auth, make_client


def _drop_server_connections(url: str) -> int:
    """What a restart of the database server does to the app's pooled connections."""
    engine = create_engine(url)
    with engine.connect() as conn:
        dropped = conn.execute(text(
            "SELECT count(pg_terminate_backend(pid)) FROM pg_stat_activity "
            "WHERE pid <> pg_backend_pid() AND datname = current_database()")).scalar_one()
    engine.dispose()
    return dropped


def test_a_dropped_connection_costs_no_request(db_url):
    with make_client(db_url) as client:
        client.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(client)
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
        assert client.get(f"/lots/{lot_id}").status_code == 200
        assert client.get(f"/api/v1/lots/{lot_id}/ranking").status_code == 200
        if db_url.startswith("postgresql"):
            assert _drop_server_connections(db_url) >= 1
        # Both the request's first read and its session (for a page not cached yet) reconnect.
        assert client.get(f"/api/v1/lots/{lot_id}/ranking").status_code == 200
        assert client.get(f"/lots/{lot_id}?include_non_compliant=true").status_code == 200
        assert client.get(f"/api/v1/lots/{lot_id}/offers").status_code == 200


def test_cached_ranking_and_page_follow_every_change(client):
    _, _, lot_id = f.setup_lot(client)
    offer = client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="First (test)")).json()
    before = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
    assert client.get(f"/api/v1/lots/{lot_id}/ranking").json() == before  # served from the cache
    patched = client.patch(f"/api/v1/offers/{offer['id']}",
                           json={"version": offer["version"], "unit_price": offer["unit_price"] + 1000})
    assert patched.status_code == 200
    after = client.get(f"/api/v1/lots/{lot_id}/ranking").json()
    assert after["rows"][0]["unit_price"] == before["rows"][0]["unit_price"] + 1000
    client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer(bidder="Second (test)"))
    assert "Second (test)" in client.get(f"/lots/{lot_id}").text


def test_a_revoked_token_is_refused_at_once_though_the_page_is_cached(db_url):
    headers = add_user_with_token(db_url, "leaving", ["viewer"])
    with make_client(db_url) as client:
        client.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(client)
        client.headers.update(headers)
        assert client.get(f"/lots/{lot_id}").status_code == 200
        assert client.get(f"/api/v1/lots/{lot_id}/ranking").status_code == 200
        assert client.post("/api/v1/token/revoke").status_code == 204
        assert client.get(f"/api/v1/lots/{lot_id}/ranking").status_code == 401
        assert client.get(f"/lots/{lot_id}", follow_redirects=False).status_code == 303


def test_a_remembered_generation_is_forgotten_by_any_write(sqlite_url):
    """Common practice, no source: a read cache must not hide the reader's own change."""
    db = Database(sqlite_url)
    with db.session() as session:
        remember(session, (1, "then"))
        assert data_version(session) == (1, "then")
        session.execute(text("SELECT 1"))
        session.commit()
        assert remembered(session) is None
        newest = data_version(session)
        assert newest != (1, "then")
        remember(session, (1, "then"))
        session.rollback()
        assert remembered(session) is None
    db.dispose()


def test_requests_missing_the_same_entry_compute_it_once(sqlite_url):
    """Common practice, no source ("single flight"): a burst of misses on one key after a change
    costs one computation; if that one fails, the next waiting request computes instead."""
    from concurrent.futures import ThreadPoolExecutor
    from threading import Barrier

    from server.storage.generation import GenerationCache

    cache = GenerationCache()
    db = Database(sqlite_url)
    calls = []
    start = Barrier(4)

    def slow(first_fails):
        calls.append(1)
        time.sleep(0.2)
        if first_fails and len(calls) == 1:
            raise RuntimeError("first computation fails")
        return "value"

    def ask(first_fails):
        with db.session() as session:
            remember(session, (7, "same"))
            start.wait()
            try:
                return cache.get_or_compute(session, "key", lambda: slow(first_fails))
            except RuntimeError:
                return "error"

    with ThreadPoolExecutor(4) as pool:
        results = list(pool.map(ask, [False] * 4))
    assert results == ["value"] * 4 and len(calls) == 1

    calls.clear()
    cache.clear()
    with ThreadPoolExecutor(4) as pool:
        results = list(pool.map(ask, [True] * 4))
    assert sorted(results) == ["error", "value", "value", "value"] and len(calls) == 2
    db.dispose()


def test_a_cached_page_and_ranking_are_served_without_a_worker_thread(db_url, monkeypatch):
    """The hit path runs on the event loop: with the thread pool taken away, a second request
    for the same page and ranking is still answered (from the cache)."""
    from server import deps

    with make_client(db_url) as client:
        client.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(client)
        client.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer())
        first_page = client.get(f"/lots/{lot_id}").text
        first_ranking = client.get(f"/api/v1/lots/{lot_id}/ranking").json()

        def no_threads(*_args, **_kwargs):
            raise AssertionError("a cache hit went to a worker thread")

        monkeypatch.setattr(deps, "run_in_threadpool", no_threads)
        assert client.get(f"/lots/{lot_id}").text == first_page
        assert client.get(f"/api/v1/lots/{lot_id}/ranking").json() == first_ranking
