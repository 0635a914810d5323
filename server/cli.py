"""Command line: ``lossledger serve | db upgrade | db downgrade | demo``."""

from __future__ import annotations

import argparse
import getpass
import sys
from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy.orm import Session

from server.settings import get_settings
from server.storage.models import ROLES
from server.version import VERSION


def _upgrade(url: str) -> None:
    from server.storage.migrate import upgrade

    upgrade(url)


@contextmanager
def _session(url: str) -> Iterator[Session]:
    """A database session whose changes the audit trail credits to the command line."""
    from server.storage.audit import Actor, set_actor
    from server.storage.database import Database

    db = Database(url)
    try:
        with db.session() as session:
            set_actor(session, Actor(f"command line ({getpass.getuser()})"))
            yield session
    finally:
        db.dispose()


def _seed(url: str) -> None:
    from server.demo import UTILITY, seed_demo, seed_demo_fleet, seed_demo_users

    with _session(url) as session:
        if seed_demo(session):
            units = seed_demo_fleet(session)
            print(f"Seeded the demo scenario: {UTILITY}, with an invented fleet of {units} units.")
            print("Demo users (passwords are shown here once and stored only as hashes):")
            for name, roles, password in seed_demo_users(session):
                print(f"  {name:<10} {password}   roles: {', '.join(roles)}")
        else:
            print("The database is not empty; the demo scenario was not seeded.")


def cmd_serve(args: argparse.Namespace) -> int:
    import uvicorn

    from server.middleware import log_config

    settings = get_settings()
    url = settings.database_url
    if settings.env == "production" and url.startswith("sqlite") and args.workers > 1:
        raise SystemExit("Several workers need PostgreSQL: SQLite allows one writer at a time. "
                         "Set LOSSLEDGER_DATABASE_URL to a PostgreSQL database, or run one worker.")
    settings.check_production()
    if url.startswith("sqlite"):
        _upgrade(url)
    if args.demo:
        _seed(url)
    host = args.host or settings.host
    port = args.port or settings.port
    # On standard error: standard output carries the request logs, one JSON line each.
    print(f"LossLedger on http://{host}:{port} (database: {url.split('@')[-1]})", file=sys.stderr)
    # Every worker process applies log_config when it starts (a logging set-up made here would
    # stay in this process), and believes forwarded addresses from the trusted proxies only.
    uvicorn.run("server.app:create_app", factory=True, host=host, port=port, workers=args.workers,
                access_log=False, log_config=log_config(), proxy_headers=True,
                forwarded_allow_ips=settings.trusted_proxies)
    return 0


def cmd_db(args: argparse.Namespace) -> int:
    from server.storage import backup
    from server.storage.migrate import downgrade

    url = get_settings().database_url
    if args.action == "backup":
        backup.backup(url, args.file)
        print(f"Backed up the database to {args.file}.")
        return 0
    if args.action == "restore":
        revision = backup.restore(url, args.file)
        head, _ = backup.known_revisions()
        later = "" if revision == head else f" Its schema is at revision {revision}: run `lossledger db upgrade`."
        print(f"Restored the database from {args.file}.{later}")
        return 0
    if args.action == "upgrade":
        _upgrade(url)
        print("Database is at the latest schema.")
    else:
        downgrade(url, args.revision)
        print(f"Database downgraded to {args.revision}.")
    return 0


def cmd_demo(_args: argparse.Namespace) -> int:
    url = get_settings().database_url
    if url.startswith("sqlite"):
        _upgrade(url)
    _seed(url)
    return 0


def cmd_worker(args: argparse.Namespace) -> int:
    """Run queued jobs (Monte Carlo runs) until SIGINT or SIGTERM; running jobs then go back to
    the queue. On PostgreSQL this is what runs them: web processes do not, unless
    LOSSLEDGER_JOBS_IN_WEB is set. On SQLite the web process runs them already; a worker beside
    it on the same host shares the work."""
    import logging.config

    from server.jobs import make_runner
    from server.middleware import log_config
    from server.storage.database import Database

    if args.concurrency is not None and args.concurrency < 1:
        raise SystemExit("--concurrency must be 1 or more.")
    settings = get_settings()
    url = settings.database_url
    if url.startswith("sqlite"):
        _upgrade(url)
    logging.config.dictConfig(log_config())
    database = Database(url)
    try:
        runner = make_runner(database, settings, args.concurrency)
        print(f"LossLedger worker: up to {runner.concurrency} jobs at once (database: {url.split('@')[-1]})",
              file=sys.stderr)
        runner.run()
    finally:
        database.dispose()
    return 0


def _read_password(args: argparse.Namespace) -> str:
    if not args.password_stdin:
        return getpass.getpass("Password: ")
    password = sys.stdin.readline().rstrip("\r\n")
    if not password:
        raise SystemExit("No password on standard input.")
    return password


def cmd_users(args: argparse.Namespace) -> int:
    from server.errors import ServiceError
    from server.services import users

    url = get_settings().database_url
    if url.startswith("sqlite"):
        _upgrade(url)
    with _session(url) as session:
        try:
            if args.action == "create":
                user = users.create_user(session, args.name, _read_password(args), args.role)
                print(f"Created user {user.username} with roles {', '.join(user.roles)}.")
            elif args.action == "list":
                for user in users.list_users(session):
                    state = "disabled" if user.disabled else "active"
                    print(f"{user.username:<24} {state:<9} {', '.join(user.roles)}")
            elif args.action == "disable":
                users.disable_user(session, args.name)
                print(f"Disabled {args.name}; their sessions and tokens are revoked.")
            elif args.action == "reset-password":
                users.set_password(session, args.name, _read_password(args))
                print(f"New password set for {args.name}; their sessions and tokens are revoked.")
        except ServiceError as exc:
            print(f"error: {exc.message}", file=sys.stderr)
            return 1
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="lossledger", description="Transformer tender evaluation by total owning cost.")
    parser.add_argument("--version", action="version", version=f"lossledger {VERSION}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback when a command fails")
    sub = parser.add_subparsers(dest="command", required=True)

    serve = sub.add_parser("serve", help="run the web application")
    serve.add_argument("--host", help="address to listen on (default 127.0.0.1)")
    serve.add_argument("--port", type=int, help="port (default 8000)")
    serve.add_argument("--workers", type=int, default=1, help="uvicorn worker processes (PostgreSQL for more than one)")
    serve.add_argument("--demo", action="store_true", help="seed the demo scenario into an empty database")
    serve.set_defaults(func=cmd_serve)

    db = sub.add_parser("db", help="database schema")
    db_sub = db.add_subparsers(dest="action", required=True)
    db_sub.add_parser("upgrade", help="apply all migrations")
    down = db_sub.add_parser("downgrade", help="revert migrations")
    down.add_argument("revision", help="target revision, e.g. -1 or base")
    save = db_sub.add_parser("backup", help="write an online backup (SQLite backup API or pg_dump)")
    save.add_argument("file")
    load = db_sub.add_parser("restore", help="replace the database's contents with a backup")
    load.add_argument("file")
    db.set_defaults(func=cmd_db)

    people = sub.add_parser("users", help="user accounts")
    people_sub = people.add_subparsers(dest="action", required=True)
    create = people_sub.add_parser("create", help="create a user")
    create.add_argument("name")
    create.add_argument("--role", action="append", required=True, choices=ROLES, help="may be repeated")
    create.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    people_sub.add_parser("list", help="list users")
    disable = people_sub.add_parser("disable", help="disable a user and revoke their sessions")
    disable.add_argument("name")
    reset = people_sub.add_parser("reset-password", help="set a new password")
    reset.add_argument("name")
    reset.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    people.set_defaults(func=cmd_users)

    demo = sub.add_parser("demo", help="seed the demo scenario into an empty database")
    demo.set_defaults(func=cmd_demo)

    worker = sub.add_parser("worker", help="run queued jobs (Monte Carlo runs) until stopped")
    worker.add_argument("--concurrency", type=int, metavar="N",
                        help="jobs run at once (default LOSSLEDGER_JOB_CONCURRENCY, 2)")
    worker.set_defaults(func=cmd_worker)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run a command. A failure is one line on standard error and exit status 1 (the whole
    traceback with ``--debug``)."""
    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except Exception as exc:  # every failure a command meets, said plainly
        if args.debug:
            raise
        print(f"lossledger: error: {_said(exc)}", file=sys.stderr)
        return 1


def _said(exc: Exception) -> str:
    """An error in one line: a service's own words, else the first line of the exception's."""
    from server.errors import ServiceError

    text = exc.message if isinstance(exc, ServiceError) else str(exc)
    first = next((line.strip() for line in text.splitlines() if line.strip()), "")
    return first or type(exc).__name__


if __name__ == "__main__":
    sys.exit(main())
