"""A server killed (SIGKILL) in the middle of a large import leaves all of it or none of it."""

from __future__ import annotations

import io
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from contextlib import closing

import httpx
import pytest
from openpyxl import Workbook
from sqlalchemy import create_engine, text

from tests import factories as f
from tests.conftest import auth

LOTS = 6
PER_LOT = 1500


def _free_port() -> int:
    with closing(socket.socket()) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _start(db_url: str, port: int) -> subprocess.Popen:
    env = {**os.environ, "LOSSLEDGER_DATABASE_URL": db_url, "LOSSLEDGER_ENV": "test"}
    process = subprocess.Popen(
        [sys.executable, "-m", "uvicorn", "--factory", "server.app:create_app", "--port", str(port),
         "--log-level", "warning"],
        env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/healthz", timeout=1).status_code == 200:
                return process
        except httpx.HTTPError:
            time.sleep(0.1)
    process.kill()
    raise RuntimeError("the server did not start")


def _workbook() -> bytes:
    book = Workbook()
    sheet = book.active
    sheet.append(["lot", "bidder", "unit_price", "no_load_loss_w", "load_loss_w", "impedance_pct"])
    for lot in range(LOTS):
        for k in range(PER_LOT):
            sheet.append([f"Lot {lot}", f"Bidder {k}", 10000 + k, 400 + k % 40, 4000 + k % 400, 4.0])
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def _count(db_url: str, sql: str) -> int:
    engine = create_engine(db_url)
    try:
        with engine.connect() as conn:
            return conn.execute(text(sql)).scalar()
    finally:
        engine.dispose()


def _commit_then_kill(client: httpx.Client, path: str, server: subprocess.Popen, delay: float | None) -> None:
    """POST ``path`` in a thread and SIGKILL the server ``delay`` seconds later (None: after it answers)."""

    def commit():
        try:
            client.post(path)
        except httpx.HTTPError:
            pass  # the server dies under the request

    worker = threading.Thread(target=commit)
    worker.start()
    if delay is None:
        worker.join(timeout=120)
    else:
        time.sleep(delay)
    server.send_signal(signal.SIGKILL)
    server.wait(timeout=10)
    worker.join(timeout=30)


def _integrity(db_url: str) -> None:
    engine = create_engine(db_url)
    try:
        with engine.connect() as conn:
            if db_url.startswith("sqlite"):
                assert conn.execute(text("PRAGMA integrity_check")).scalar() == "ok"
                assert conn.execute(text("PRAGMA foreign_key_check")).fetchall() == []
            else:
                orphans = conn.execute(text(
                    "SELECT count(*) FROM offers o LEFT JOIN lots l ON o.lot_id = l.id WHERE l.id IS NULL"
                )).scalar()
                assert orphans == 0
    finally:
        engine.dispose()


# Kill 0.3 s and 1 s into the commit (it takes a few seconds for 9,000 offers), and once after
# it has finished, so both outcomes of the all-or-nothing check are exercised.
@pytest.mark.parametrize("delay", [0.3, 1.0, None])
def test_kill_during_offer_import_commit_leaves_all_or_nothing(db_url, delay):
    port = _free_port()
    base = f"http://127.0.0.1:{port}/api/v1"
    server = _start(db_url, port)
    try:
        with httpx.Client(base_url=base, headers=auth("tester"), timeout=120) as client:
            basis_id = client.post("/cost-bases", json=f.direct_basis()).json()["id"]
            lots = [f.lot(name=f"Lot {k}") for k in range(LOTS)]
            tender = client.post("/tenders", json=f.tender(basis_id, lots=lots)).json()
            staged = client.post(f"/tenders/{tender['id']}/offer-imports", params={"rows_limit": 0},
                                 files={"file": ("offers.xlsx", _workbook(), "application/octet-stream")})
            assert staged.status_code == 201, staged.text
            _commit_then_kill(client, f"/offer-imports/{staged.json()['id']}/commit", server, delay)
    finally:
        if server.poll() is None:
            server.kill()
    offers = _count(db_url, "SELECT count(*) FROM offers")
    assert offers in (0, LOTS * PER_LOT), f"a partial import survived: {offers} offers"
    if delay is None:
        assert offers == LOTS * PER_LOT
    _integrity(db_url)
    server = _start(db_url, port)  # the application starts again on the same database
    server.kill()
    server.wait(timeout=10)


FLEET_ROWS = 60_000


def _fleet_csv() -> bytes:
    lines = ["asset_id,region,rating_kva,year_installed,no_load_loss_w,load_loss_w,peak_load_pu,loss_factor"]
    lines += [f"K{k:06d},R{k % 7},400,{1970 + k % 50},{600 + k % 90},{4800 + k % 400},0.6,0.3" for k in range(FLEET_ROWS)]
    return ("\n".join(lines) + "\n").encode()


@pytest.mark.parametrize("delay", [0.2, 0.8, None])
def test_kill_during_fleet_import_commit_leaves_all_or_nothing(db_url, delay):
    port = _free_port()
    server = _start(db_url, port)
    try:
        with httpx.Client(base_url=f"http://127.0.0.1:{port}/api/v1", headers=auth("tester"), timeout=120) as client:
            staged = client.post("/fleet/import", files={"file": ("fleet.csv", _fleet_csv(), "text/csv")})
            assert staged.status_code == 201 and staged.json()["can_commit"], staged.text[:300]
            _commit_then_kill(client, f"/fleet/imports/{staged.json()['id']}/commit", server, delay)
    finally:
        if server.poll() is None:
            server.kill()
    units = _count(db_url, "SELECT count(*) FROM fleet_units")
    assert units in (0, FLEET_ROWS), f"a partial fleet import survived: {units} units"
    if delay is None:
        assert units == FLEET_ROWS
    _integrity(db_url)
