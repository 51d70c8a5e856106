"""Building the engine: SQLite tuned for durability, PostgreSQL with a pool that checks itself."""

import os
import sqlite3
import time
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.pool import StaticPool

READ_ONLY = "berth_read_only"
WAL_SWITCH_TIMEOUT_S = 5.0


def build_engine(database_url: str, *, file_mode: int = 0o600) -> Engine:
    """An engine for the URL. SQLite gets WAL, synchronous=FULL (NORMAL can lose the last commits on
    power loss), a busy timeout, foreign keys, and write transactions that start with BEGIN IMMEDIATE
    so two writers queue instead of failing halfway. A new SQLite file is created with `file_mode`
    (owner only by default; SQLite gives its -wal and -shm files the same)."""
    url = make_url(database_url)
    if url.get_backend_name() != "sqlite":
        return create_engine(url, pool_pre_ping=True)
    memory = url.database in (None, "", ":memory:")
    if not memory and url.database:
        _create_file(Path(url.database), file_mode)
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
            _switch_to_wal(cursor)
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


def _create_file(path: Path, mode: int) -> None:
    """An empty file is an empty SQLite database; creating it ourselves sets who may read it (the
    process umask may only take permissions away)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.close(os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, mode))
    except FileExistsError:
        return


def _switch_to_wal(cursor: Any) -> None:
    """PRAGMA journal_mode=WAL, retried for a while: when several connections open a brand-new file
    at the same moment (workers, replicas starting together), they race to convert it, and SQLite
    answers the losers "database is locked" at once, without waiting out the busy timeout."""
    deadline = time.monotonic() + WAL_SWITCH_TIMEOUT_S
    while True:
        try:
            cursor.execute("PRAGMA journal_mode=WAL")
            return
        except sqlite3.OperationalError as error:
            if "locked" not in str(error) or time.monotonic() >= deadline:
                raise
            time.sleep(0.01)

