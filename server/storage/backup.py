"""Online backup and restore: SQLite's backup API, PostgreSQL's pg_dump and pg_restore.

A restore first checks that the file is a LossLedger database at a revision these migrations
know, and only then touches the live database. Backups are written readable by their owner
alone (mode 0600): they hold every password hash and session.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
import subprocess
import tempfile
from pathlib import Path
from urllib.parse import quote

from sqlalchemy.engine import make_url

# Tables every LossLedger database has had since its first migration.
CORE_TABLES = frozenset({"alembic_version", "users", "cost_bases", "cost_basis_revisions", "tenders", "lots",
                         "offers", "audit_events"})


class BackupError(Exception):
    """A backup or restore that could not be done; the message says why, in one line."""


def known_revisions() -> tuple[str, set[str]]:
    """The latest migration's revision and every revision the migrations know."""
    from alembic.script import ScriptDirectory

    from server.storage.migrate import alembic_config

    script = ScriptDirectory.from_config(alembic_config("sqlite://"))
    return script.get_current_head(), {rev.revision for rev in script.walk_revisions()}


def _sqlite_path(url: str) -> str:
    database = make_url(url).database
    if not database or database == ":memory:":
        raise BackupError("An in-memory SQLite database cannot be backed up or restored.")
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
    raise BackupError(f"{name} is not installed; install the PostgreSQL client tools.")


def _run(command: list[str], env: dict[str, str] | None = None) -> str:
    """Run a PostgreSQL tool; its own error output becomes the message when it fails."""
    try:
        done = subprocess.run(command, env={**os.environ, **(env or {})}, capture_output=True, text=True)
    except OSError as exc:
        raise BackupError(f"{Path(command[0]).name} could not be run: {exc}") from exc
    if done.returncode != 0:
        lines = [line.strip() for line in done.stderr.splitlines() if line.strip()][:10]
        said = "; ".join(lines) or f"exit status {done.returncode}"
        raise BackupError(f"{Path(command[0]).name} failed: {said}")
    return done.stdout


def _private_temporary(target: Path) -> Path:
    """An empty file of mode 0600 beside ``target``, renamed onto it once complete, so that a
    failed backup never leaves a half-written file under the name asked for."""
    handle, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent)
    os.close(handle)  # mkstemp makes it 0600
    return Path(name)


def backup(url: str, target: str) -> None:
    """Write a consistent copy of the live database to ``target`` while the application runs."""
    destination_path = Path(os.path.abspath(target))
    if not destination_path.parent.is_dir():
        raise BackupError(f"There is no folder {destination_path.parent} to write the backup in.")
    partial = _private_temporary(destination_path)
    try:
        if url.startswith("sqlite"):
            source_path = _sqlite_path(url)
            if not Path(source_path).is_file():
                raise BackupError(f"There is no database at {source_path}.")
            _copy_sqlite(os.path.abspath(source_path), partial)
        else:
            args, env = _pg_args(url)
            # "--file=" keeps a name that starts with "-" from being read as an option.
            _run([_tool("pg_dump"), "--format=custom", f"--file={partial}", *args], env)
        os.replace(partial, destination_path)
    finally:
        partial.unlink(missing_ok=True)


def check_sqlite_backup(path: str) -> str:
    """The schema revision of the SQLite file at ``path``, opened read-only, once it is known to
    be a LossLedger database; ``BackupError`` otherwise."""
    try:
        connection = sqlite3.connect(f"file:{quote(os.path.abspath(path))}?mode=ro", uri=True)
    except sqlite3.Error as exc:
        raise BackupError(f"{path} cannot be opened as a SQLite database: {exc}") from exc
    try:
        tables = {name for (name,) in connection.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if "alembic_version" not in tables:
            raise BackupError(f"{path} is not a LossLedger database: it has no alembic_version table.")
        versions = [version for (version,) in connection.execute("SELECT version_num FROM alembic_version")]
    except sqlite3.DatabaseError as exc:
        raise BackupError(f"{path} is not a SQLite database: {exc}.") from exc
    finally:
        connection.close()
    return _check_contents(path, tables, versions)


def check_postgres_backup(path: str) -> str:
    """The schema revision of the pg_dump archive at ``path`` (read with ``pg_restore``, nothing
    restored), once it is known to be a LossLedger database; ``BackupError`` otherwise."""
    listing = _run([_tool("pg_restore"), "--list", "--", path])
    tables = set()
    for line in listing.splitlines():
        words = line.split()
        # Entries read "<id>; <oid> <oid> TABLE <schema> <name> <owner>".
        if "TABLE" in words and not line.startswith(";"):
            at = words.index("TABLE")
            if len(words) > at + 2:
                tables.add(words[at + 2])
    if "alembic_version" not in tables:
        raise BackupError(f"{path} is not a LossLedger database: it has no alembic_version table.")
    script = _run([_tool("pg_restore"), "--data-only", "--table=alembic_version", "--file=-", "--", path])
    versions, in_copy = [], False
    for line in script.splitlines():
        if line.startswith("COPY ") and "alembic_version" in line:
            in_copy = True
        elif in_copy and line == "\\.":
            in_copy = False
        elif in_copy:
            versions.append(line.strip())
    return _check_contents(path, tables, versions)


def _check_contents(path: str, tables: set[str], versions: list[str]) -> str:
    missing = sorted(CORE_TABLES - tables)
    if missing:
        raise BackupError(f"{path} is not a LossLedger database: it has no {', '.join(missing)} table.")
    if len(versions) != 1:
        raise BackupError(f"{path} records {len(versions)} schema revisions, not one: it cannot be restored.")
    head, known = known_revisions()
    if versions[0] not in known:
        raise BackupError(f"{path} is at schema revision {versions[0]}, which this version of LossLedger does not "
                          f"know (its latest is {head}): restore it with the version that made it.")
    return versions[0]


def restore(url: str, source_path: str) -> str:
    """Replace the database's contents with a backup made by ``backup``, after checking that the
    backup is a LossLedger database at a known revision. Returns that revision (which may be
    older than the latest: ``lossledger db upgrade`` then brings the schema up to date)."""
    source_file = Path(source_path)
    if not source_file.is_file():
        raise BackupError(f"There is no backup file at {source_path}.")
    absolute = os.path.abspath(source_path)  # never starts with "-"
    if url.startswith("sqlite"):
        revision = check_sqlite_backup(absolute)
        target = _sqlite_path(url)
        if Path(target).exists() and os.path.samefile(target, absolute):
            raise BackupError(f"{source_path} is the live database itself.")
        if not Path(target).exists():
            os.close(os.open(target, os.O_CREAT | os.O_WRONLY, 0o600))
        _copy_sqlite(absolute, target)
        return revision
    revision = check_postgres_backup(absolute)
    args, env = _pg_args(url)
    _run([_tool("pg_restore"), "--clean", "--if-exists", "--no-owner", "--single-transaction", *args, "--", absolute],
         env)
    return revision


def _copy_sqlite(source_path: str, destination_path: str) -> None:
    """Copy one SQLite database into another with SQLite's online backup (the source opened read-only)."""
    source = sqlite3.connect(f"file:{quote(source_path)}?mode=ro", uri=True)
    destination = sqlite3.connect(destination_path)
    try:
        with destination:
            source.backup(destination)
    finally:
        destination.close()
        source.close()
