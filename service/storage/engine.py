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
BUSY_TIMEOUT_S = 5.0  # how long a statement waits for a lock another connection holds
BUSY_TIMEOUT_MS = int(BUSY_TIMEOUT_S * 1000)
# A writer waiting for the write lock looks again after these pauses, doubling from the first to the
# last. SQLite's own wait (sqliteDefaultBusyCallback in its main.c, from memory) sleeps 1, 2, 5, 10, 15,
# 20, 25, 25, 25, 50, 50 and then 100 ms, and a writer of one worker then kept missing the other's short
# gaps between writes (on 2 workers at 20 clients: 1 wait in 1,000 took 79 ms or more, the longest
# 130 ms, against 5 and 8 ms with these pauses).
FIRST_PAUSE_S, LONGEST_PAUSE_S = 0.0001, 0.001


def build_engine(database_url: str, *, file_mode: int = 0o600) -> Engine:
    """An engine for the URL. SQLite gets WAL, synchronous=FULL (NORMAL can lose the last commits on
    power loss), a busy timeout, foreign keys, and write transactions that start with BEGIN IMMEDIATE
    so two writers queue instead of failing halfway, each waiting for the write lock in short steps
    (`_begin_writing`). A new SQLite file is created with `file_mode` (owner only by default; SQLite
    gives its -wal and -shm files the same)."""
    url = make_url(database_url)
    if url.get_backend_name() != "sqlite":
        return create_engine(url, pool_pre_ping=True)
    memory = url.database in (None, "", ":memory:")
    if not memory and url.database:
        _create_file(Path(url.database), file_mode)
    engine = create_engine(
        url,
        connect_args={"check_same_thread": False, "timeout": BUSY_TIMEOUT_S},
        poolclass=StaticPool if memory else None,
    )

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        dbapi_connection.isolation_level = None  # we issue BEGIN ourselves, below
        cursor = dbapi_connection.cursor()
        if not memory:
            _switch_to_wal(cursor)
        cursor.execute("PRAGMA synchronous=FULL")
        cursor.execute(f"PRAGMA busy_timeout={BUSY_TIMEOUT_MS}")
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection: Any) -> None:
        # Readers may share the database with a writer under WAL; writers take the lock up front.
        if connection.get_execution_options().get(READ_ONLY, False):
            connection.exec_driver_sql("BEGIN")
        else:
            _begin_writing(connection)

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


def _begin_writing(connection: Any) -> None:
    """BEGIN IMMEDIATE, waiting for the write lock up to BUSY_TIMEOUT_S as SQLite's busy timeout would,
    but looking again after pauses of FIRST_PAUSE_S doubling to LONGEST_PAUSE_S, so that a writer gets
    the lock soon after another lets it go. Any answer but "busy", and the last try once the time is
    up, come from SQLAlchemy's own BEGIN IMMEDIATE, which fails as it always has. "Busy" includes its
    extended codes: a connection opening a new file may find another recovering its WAL
    (SQLITE_BUSY_RECOVERY), which SQLite's own wait waited out too."""
    driver = connection.connection.driver_connection
    deadline = time.monotonic() + BUSY_TIMEOUT_S
    pause = FIRST_PAUSE_S
    driver.execute("PRAGMA busy_timeout=0")  # "busy" at once, not after SQLite's own sleeps
    try:
        while time.monotonic() < deadline:
            try:
                driver.execute("BEGIN IMMEDIATE")
                return
            except sqlite3.Error as error:
                code = getattr(error, "sqlite_errorcode", None)
                if code is None or code & 0xFF != sqlite3.SQLITE_BUSY:  # busy, or busy in an extended code
                    break
            time.sleep(pause)
            pause = min(2.0 * pause, LONGEST_PAUSE_S)
        connection.exec_driver_sql("BEGIN IMMEDIATE")
    finally:
        driver.execute(f"PRAGMA busy_timeout={BUSY_TIMEOUT_MS}")
