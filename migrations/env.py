"""Alembic environment: runs migrations online against the configured database."""

from __future__ import annotations

from logging.config import fileConfig

from alembic import context

from server.settings import get_settings
from server.storage.database import make_engine
from server.storage.models import Base

config = context.config
if config.config_file_name is not None and config.attributes.get("configure_logging", True):
    fileConfig(config.config_file_name, disable_existing_loggers=False)

target_metadata = Base.metadata


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    url = config.get_main_option("sqlalchemy.url") or get_settings().database_url
    engine = make_engine(url)
    with engine.connect() as conn:
        _run(conn)
    engine.dispose()


def _run(connection) -> None:
    if connection.dialect.name == "sqlite":
        # Batch mode rebuilds a table by copy-and-drop; with foreign keys on, dropping the old
        # table would cascade-delete the rows that refer to it. SQLite ignores this pragma
        # inside a transaction, so it is set before Alembic begins one.
        connection.exec_driver_sql("PRAGMA foreign_keys=OFF")
        connection.commit()
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=True,  # SQLite needs batch mode to alter tables
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


if context.is_offline_mode():
    raise SystemExit("Offline migrations are not supported; run against a database.")
run_migrations_online()
