"""Two users saving the same offer at the same moment: one wins, the other gets a clear 409
with the current values; never a silent overwrite. Run with threads on each engine."""

from __future__ import annotations

import threading

from tests import factories as f
from tests.conftest import auth, make_client

ROUNDS = 15


def test_simultaneous_edits_never_overwrite_silently(db_url):
    with make_client(db_url) as setup:
        setup.headers.update(auth("tester"))
        _, _, lot_id = f.setup_lot(setup)
        offer = setup.post(f"/api/v1/lots/{lot_id}/offers", json=f.offer()).json()
    clients = [make_client(db_url) for _ in range(2)]
    for client, user in zip(clients, ("buyer", "tester"), strict=True):
        client.__enter__()
        client.headers.update(auth(user))
    try:
        for round_number in range(ROUNDS):
            version = clients[0].get(f"/api/v1/offers/{offer['id']}").json()["version"]
            barrier = threading.Barrier(2)
            results: dict[int, object] = {}

            def save(k: int, price: float, version: int = version, barrier=barrier, results=results) -> None:
                barrier.wait()
                results[k] = clients[k].patch(f"/api/v1/offers/{offer['id']}",
                                              json={"version": version, "unit_price": price})

            prices = (10_000.0 + round_number, 20_000.0 + round_number)
            threads = [threading.Thread(target=save, args=(k, prices[k])) for k in range(2)]
            for t in threads:
                t.start()
            for t in threads:
                t.join()
            codes = sorted(r.status_code for r in results.values())
            assert codes == [200, 409], codes
            winner = next(k for k, r in results.items() if r.status_code == 200)
            loser = results[1 - winner]
            assert "changed by someone else" in loser.json()["detail"]
            stored = clients[0].get(f"/api/v1/offers/{offer['id']}").json()
            assert stored["unit_price"] == prices[winner] and stored["version"] == version + 1
            assert loser.json()["current"]["unit_price"] == prices[winner]
    finally:
        for client in clients:
            client.__exit__(None, None, None)
