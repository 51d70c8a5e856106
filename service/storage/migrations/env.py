"""Alembic environment: the tables' metadata, batch mode for SQLite, the URL from the caller."""

import sqlmodel  # noqa: F401  (types used by the generated migrations)
from alembic import context
from sqlalchemy import Connection
from sqlmodel import SQLModel

from service.storage import tables  # noqa: F401  (registers the tables on the metadata)

target_metadata = SQLModel.metadata


def _run(connection: Connection) -> None:
    context.configure(connection=connection, target_metadata=target_metadata, render_as_batch=True,
                      compare_type=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = context.config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    from service.storage.engine import build_engine

    engine = build_engine(context.config.get_main_option("sqlalchemy.url") or "")
    with engine.connect() as connection:
        _run(connection)
    engine.dispose()


if context.is_offline_mode():
    context.configure(url=context.config.get_main_option("sqlalchemy.url"), target_metadata=target_metadata,
                      render_as_batch=True, literal_binds=True)
    with context.begin_transaction():
        context.run_migrations()
else:
    run_migrations_online()
