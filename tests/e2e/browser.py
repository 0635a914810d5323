"""A live server and Debian's Chromium for the browser journeys (pytest-playwright)."""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path

import httpx
import pytest

from tests.conftest import require_or_skip

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts" / "journeys"
CHROMIUM_FLAGS = [
    "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


def chromium_path() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return None


@dataclass
class LiveServer:
    url: str
    db_url: str


def _free_port() -> int:
    with closing(socket.socket()) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


@pytest.fixture
def live_server(sqlite_url) -> Iterator[LiveServer]:
    """The application in its own process on a free loopback port, with the test users."""
    port = _free_port()
    env = {**os.environ, "LOSSLEDGER_DATABASE_URL": sqlite_url, "LOSSLEDGER_ENV": "test"}
    process = subprocess.Popen(
        [sys.executable, "-m", "uvicorn", "--factory", "server.app:create_app", "--port", str(port),
         "--log-level", "warning"],
        env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                if httpx.get(f"{url}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError("the live server did not start")
            time.sleep(0.1)
        yield LiveServer(url, sqlite_url)
    finally:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            process.kill()


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    """pytest-playwright's launch arguments, pointed at Debian's Chromium (no browser download)."""
    path = chromium_path()
    if path is None:
        require_or_skip("Chromium is not installed (apt-get install chromium)")
    return {**browser_type_launch_args, "executable_path": path, "args": CHROMIUM_FLAGS}


class Shots:
    """Saves numbered screenshots of one journey under test-artifacts/journeys/."""

    def __init__(self, page, journey: str) -> None:
        self.page = page
        self.journey = journey
        self.count = 0
        ARTIFACTS.mkdir(parents=True, exist_ok=True)

    def __call__(self, step: str) -> Path:
        self.count += 1
        path = ARTIFACTS / f"{self.journey}-{self.count:02d}-{step}.png"
        self.page.screenshot(path=str(path), full_page=True)
        return path
