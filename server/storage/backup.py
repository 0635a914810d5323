"""Online backup and restore: SQLite's backup API, PostgreSQL's pg_dump and pg_restore."""

from __future__ import annotations

import shutil
import sqlite3
import subprocess
from pathlib import Path

from sqlalchemy.engine import make_url


def _sqlite_path(url: str) -> str:
    database = make_url(url).database
    if not database or database == ":memory:":
        raise ValueError("An in-memory SQLite database cannot be backed up.")
    return database


def _pg_args(url: str) -> tuple[list[str], dict[str, str]]:
    parsed = make_url(url)
    args = ["--host", parsed.host or "localhost", "--port", str(parsed.port or 5432),
            "--username", parsed.username or "postgres", "--dbname", parsed.database or ""]
    env = {"PGPASSWORD": parsed.password} if parsed.password else {}
    return args, env


def _tool(name: str) -> str:
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(Path("/usr/lib/postgresql").glob(f"*/bin/{name}"))
    if candidates:
        return str(candidates[-1])
    raise FileNotFoundError(f"{name} is not installed; install the PostgreSQL client tools.")


def backup(url: str, target: str) -> None:
    """Write a consistent copy of the live database to ``target`` while the application runs."""
    if url.startswith("sqlite"):
        source = sqlite3.connect(_sqlite_path(url))
        destination = sqlite3.connect(target)
        try:
            with destination:
                source.backup(destination)
        finally:
            destination.close()
            source.close()
        return
    import os

    args, env = _pg_args(url)
    subprocess.run([_tool("pg_dump"), "--format=custom", "--file", target, *args], check=True,
                   env={**os.environ, **env}, capture_output=True)


def restore(url: str, source_path: str) -> None:
    """Replace the database's contents with a backup made by ``backup``."""
    if not Path(source_path).exists():
        raise FileNotFoundError(source_path)
    if url.startswith("sqlite"):
        source = sqlite3.connect(source_path)
        destination = sqlite3.connect(_sqlite_path(url))
        try:
            with destination:
                source.backup(destination)
        finally:
            destination.close()
            source.close()
        return
    import os

    args, env = _pg_args(url)
    subprocess.run([_tool("pg_restore"), "--clean", "--if-exists", "--no-owner", "--single-transaction", *args,
                    source_path], check=True, env={**os.environ, **env}, capture_output=True)
