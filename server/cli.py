"""Command line: ``lossledger serve | db upgrade | db downgrade | demo``."""

from __future__ import annotations

import argparse
import sys

from server.settings import get_settings


def _upgrade(url: str) -> None:
    from server.storage.migrate import upgrade

    upgrade(url)


def _seed(url: str) -> None:
    from server.demo import UTILITY, seed_demo
    from server.storage.database import Database

    db = Database(url)
    try:
        with db.session() as session:
            if seed_demo(session):
                print(f"Seeded the demo scenario: {UTILITY}.")
            else:
                print("The database is not empty; the demo scenario was not seeded.")
    finally:
        db.dispose()


def cmd_serve(args: argparse.Namespace) -> int:
    import uvicorn

    settings = get_settings()
    url = settings.database_url
    if url.startswith("sqlite"):
        _upgrade(url)
    if args.demo:
        _seed(url)
    host = args.host or settings.host
    port = args.port or settings.port
    print(f"LossLedger on http://{host}:{port} (database: {url.split('@')[-1]})")
    uvicorn.run("server.app:create_app", factory=True, host=host, port=port, workers=args.workers)
    return 0


def cmd_db(args: argparse.Namespace) -> int:
    from server.storage.migrate import downgrade

    url = get_settings().database_url
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


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="lossledger", description="Transformer tender evaluation by total owning cost.")
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
    db.set_defaults(func=cmd_db)

    demo = sub.add_parser("demo", help="seed the demo scenario into an empty database")
    demo.set_defaults(func=cmd_demo)
    return parser


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    return args.func(args)


if __name__ == "__main__":
    sys.exit(main())
