"""Building the engine: SQLite tuned for durability, PostgreSQL with a pool that checks itself."""

from pathlib import Path
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.pool import StaticPool

READ_ONLY = "berth_read_only"


def build_engine(database_url: str) -> Engine:
    """An engine for the URL. SQLite gets WAL, synchronous=FULL (NORMAL can lose the last commits on
    power loss), a busy timeout, foreign keys, and write transactions that start with BEGIN IMMEDIATE
    so two writers queue instead of failing halfway."""
    url = make_url(database_url)
    if url.get_backend_name() != "sqlite":
        return create_engine(url, pool_pre_ping=True)
    memory = url.database in (None, "", ":memory:")
    if not memory and url.database:
        Path(url.database).parent.mkdir(parents=True, exist_ok=True)
    engine = create_engine(
        url,
        connect_args={"check_same_thread": False, "timeout": 5.0},
        poolclass=StaticPool if memory else None,
    )

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        dbapi_connection.isolation_level = None  # we issue BEGIN ourselves, below
        cursor = dbapi_connection.cursor()
        if not memory:
            cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=FULL")
        cursor.execute("PRAGMA busy_timeout=5000")
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection: Any) -> None:
        # Readers may share the database with a writer under WAL; writers take the lock up front.
        read_only = connection.get_execution_options().get(READ_ONLY, False)
        connection.exec_driver_sql("BEGIN" if read_only else "BEGIN IMMEDIATE")

    return engine


def is_sqlite(engine: Engine) -> bool:
    return engine.dialect.name == "sqlite"
