"""Load test: several uvicorn workers on PostgreSQL, driven by wrk from a second process on
loopback. Reports requests per second, p50, p95, p99 and errors for the lot ranking page and
the ranking API, next to a bare JSON endpoint of the same app measured in the same run.

Targets: the ranking page at 16 connections reaches at least 0.35 of the bare endpoint's
requests per second, p95 under 100 ms, no errors.

The three endpoints are measured in turn, ROUNDS times over, so that each sees the same
states of a shared machine; requests per second are the best round of each (as the other
benchmarks take the best of several repeats), latency and errors the worst round. Every
round is printed.

Run: python -m bench.loadtest   (LOSSLEDGER_LOADTEST_DATABASE_URL may name an empty
PostgreSQL database; otherwise a throw-away cluster is started with Debian's binaries.)
"""

from __future__ import annotations

import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from contextlib import closing, contextmanager
from pathlib import Path

import httpx

from server import schemas
from server.security import token_hash
from server.services import cost_bases, offers, tenders
from server.storage.audit import Actor, set_actor
from server.storage.database import Database
from server.storage.migrate import upgrade
from server.storage.models import AuthSession, User, utcnow

WORKERS = 4
CONNECTIONS = 16
DURATION_S = 5
ROUNDS = 3
TOKEN = "loadtest-token-not-secret"


def free_port() -> int:
    with closing(socket.socket()) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


@contextmanager
def postgres():
    url = os.environ.get("LOSSLEDGER_LOADTEST_DATABASE_URL")
    if url:
        yield url
        return
    bins = sorted(Path("/usr/lib/postgresql").glob("*/bin"))
    if not bins:
        raise SystemExit("PostgreSQL is not installed (apt-get install postgresql) and "
                         "LOSSLEDGER_LOADTEST_DATABASE_URL is not set.")
    pgbin = bins[-1]
    root = Path(tempfile.mkdtemp(prefix="lossledger-load-"))
    os.chmod(root, 0o777)
    port = free_port()
    as_postgres = ["su", "postgres", "-c"] if os.geteuid() == 0 else ["sh", "-c"]
    subprocess.run([*as_postgres, f"{pgbin}/initdb -D {root}/data -A trust -U postgres --no-sync"],
                   check=True, capture_output=True)
    subprocess.run([*as_postgres, f"{pgbin}/pg_ctl -D {root}/data -l {root}/log -w -o '-p {port} -k {root} "
                    "-c listen_addresses=127.0.0.1 -c fsync=off -c max_connections=200' start"],
                   check=True, capture_output=True)
    try:
        # Through the Unix socket, as an application on the database host connects.
        yield f"postgresql+psycopg://postgres@/postgres?host={root}&port={port}"
    finally:
        subprocess.run([*as_postgres, f"{pgbin}/pg_ctl -D {root}/data -m fast stop"], capture_output=True)
        shutil.rmtree(root, ignore_errors=True)


def seed(url: str) -> int:
    """A tender with three lots of 30 offers; a viewer with an API token. Returns a lot id."""
    upgrade(url)
    db = Database(url)
    with db.session() as session:
        set_actor(session, Actor("loadtest"))
        now = utcnow()
        user = User(username="loadtest-viewer", password_hash="x", roles=["viewer"])
        session.add(user)
        session.flush()
        session.add(AuthSession(token_hash=token_hash(TOKEN), user_id=user.id, kind="api", created_at=now,
                                last_seen_at=now, expires_at=now.replace(year=now.year + 1)))
        session.commit()
        basis = cost_bases.create_cost_basis(session, schemas.PresentWorthCostBasisCreate(
            name="Load basis", currency="EUR", energy_price_per_kwh=0.08, capacity_cost_per_kw_year=60,
            discount_rate_pct=6, years=30, peak_load_pu=0.8, loss_factor=0.3))
        lots = [schemas.LotCreate(name=f"{kva} kVA", rating_kva=kva, hv_kv=20, lv_kv=0.4, quantity=20,
                                  limit_tables=["eu-tier-1"], impedance_pct=4.0 if kva < 630 else 6.0)
                for kva in (100, 400, 1000)]
        tender = tenders.create_tender(session, schemas.TenderCreate(
            reference="LOAD-1", title="Load test tender (invented)", currency="EUR", cost_basis_id=basis.id, lots=lots))
        for lot in tender.lots:
            for k in range(30):
                offers.add_offer(session, lot.id, schemas.OfferCreate(
                    bidder=f"Bidder {k:02d} (invented)", unit_price=lot.rating_kva * 30 + 97 * k,
                    no_load_loss_w=lot.rating_kva * 1.0 + (k % 7) * lot.rating_kva * 0.02,
                    load_loss_w=lot.rating_kva * 10 + (k % 5) * lot.rating_kva * 0.3,
                    impedance_pct=4.0 if lot.rating_kva < 630 else 6.0))
        lot_id = tender.lots[1].id
    db.dispose()
    return lot_id


# wrk prints the 50/75/90/99th percentiles; this script adds the 95th (microseconds).
PERCENTILES_LUA = """
done = function(summary, latency, requests)
  for _, p in pairs({50, 95, 99}) do
    io.write(string.format("pct%d %d\\n", p, latency:percentile(p)))
  end
end
"""


def wrk(url: str, connections: int = CONNECTIONS, duration: int = DURATION_S) -> dict[str, float]:
    with tempfile.NamedTemporaryFile("w", suffix=".lua", delete=False) as script:
        script.write(PERCENTILES_LUA)
    try:
        out = subprocess.run(
            ["wrk", "-t", "2", "-c", str(connections), "-d", f"{duration}s", "-s", script.name, "-H",
             f"Authorization: Bearer {TOKEN}", url], capture_output=True, text=True, check=True).stdout
    finally:
        os.unlink(script.name)

    def ms(percentile: int) -> float:
        return int(re.search(rf"^pct{percentile} (\d+)$", out, re.M).group(1)) / 1000.0

    rps = float(re.search(r"Requests/sec:\s+([\d.]+)", out).group(1))
    errors = 0
    for pattern in (r"Non-2xx or 3xx responses:\s+(\d+)", r"Socket errors: connect (\d+), read (\d+), write (\d+), timeout (\d+)"):
        match = re.search(pattern, out)
        if match:
            errors += sum(int(g) for g in match.groups())
    return {"rps": rps, "p50": ms(50), "p95": ms(95), "p99": ms(99), "errors": errors}


def main() -> None:
    if shutil.which("wrk") is None:
        raise SystemExit("wrk is not installed (apt-get install wrk).")
    with postgres() as url:
        lot_id = seed(url)
        port = free_port()
        env = {**os.environ, "LOSSLEDGER_DATABASE_URL": url, "LOSSLEDGER_ENV": "test"}
        server = subprocess.Popen(
            [sys.executable, "-m", "uvicorn", "--factory", "server.app:create_app", "--port", str(port),
             "--workers", str(WORKERS), "--log-level", "warning", "--no-access-log"],
            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        base = f"http://127.0.0.1:{port}"
        try:
            for _ in range(200):
                try:
                    if httpx.get(f"{base}/healthz", timeout=1).status_code == 200:
                        break
                except httpx.HTTPError:
                    time.sleep(0.1)
            headers = {"Authorization": f"Bearer {TOKEN}"}
            assert httpx.get(f"{base}/lots/{lot_id}", headers=headers).status_code == 200
            for _ in range(10 * WORKERS):  # new connections, so that every worker renders its page once
                httpx.get(f"{base}/lots/{lot_id}", headers=headers)
            endpoints = {
                "bare JSON (/healthz)": f"{base}/healthz",
                f"ranking page (/lots/{lot_id})": f"{base}/lots/{lot_id}",
                f"ranking API (/api/v1/lots/{lot_id}/ranking)": f"{base}/api/v1/lots/{lot_id}/ranking",
            }
            rounds = [{name: wrk(url) for name, url in endpoints.items()} for _ in range(ROUNDS)]
        finally:
            server.send_signal(signal.SIGTERM)
            server.wait(timeout=20)
    print(f"load test: {WORKERS} workers on PostgreSQL, wrk with {CONNECTIONS} connections, {ROUNDS} rounds of "
          f"{DURATION_S} s per endpoint, 30 offers per lot")
    header = f"{'endpoint':48} {'req/s':>9} {'p50 ms':>8} {'p95 ms':>8} {'p99 ms':>8} {'errors':>7} {'vs bare':>8}"

    def line(name: str, r: dict, bare: float) -> str:
        return (f"{name:48} {r['rps']:9.0f} {r['p50']:8.1f} {r['p95']:8.1f} {r['p99']:8.1f} {r['errors']:7d} "
                f"{r['rps'] / bare:8.2f}")

    for number, results in enumerate(rounds, 1):
        print(f"round {number}")
        print(header)
        bare = results["bare JSON (/healthz)"]["rps"]
        for name, r in results.items():
            print(line(name, r, bare))
    summary = {
        name: {"rps": max(r[name]["rps"] for r in rounds),
               **{k: max(r[name][k] for r in rounds) for k in ("p50", "p95", "p99", "errors")}}
        for name in rounds[0]
    }
    print("summary: best requests per second of the rounds; worst latency and errors")
    print(header)
    bare = summary["bare JSON (/healthz)"]["rps"]
    for name, r in summary.items():
        print(line(name, r, bare))
    page = next(r for name, r in summary.items() if name.startswith("ranking page"))
    print(f"ranking page / bare = {page['rps'] / bare:.2f} (target >= 0.35); p95 {page['p95']:.1f} ms "
          f"(target < 100); errors {page['errors']} (target 0)")

if __name__ == "__main__":
    main()
