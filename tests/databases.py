"""Which database a test runs on.

By default every test gets a SQLite file of its own under its tmp_path. When the environment names a
PostgreSQL server in BERTH_TEST_DATABASE_URL, every test instead gets a database of its own, created
for it (from template0) through that URL and dropped after it, so tests never see each other's rows,
sequences, advisory locks or migrations:

    BERTH_TEST_DATABASE_URL='postgresql+psycopg://root@/berth_ci?host=/var/run/postgresql' \\
        .venv/bin/pytest tests/storage tests/api

The database named in the URL is only used to connect for CREATE and DROP DATABASE; the role needs
CREATEDB."""

import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from sqlalchemy import create_engine
from sqlalchemy.engine import URL, make_url
from sqlalchemy.pool import NullPool

ENVIRONMENT = "BERTH_TEST_DATABASE_URL"
NAME_PREFIX = "berth_pytest_"


def postgresql_server() -> URL | None:
    """The PostgreSQL URL the tests were asked to use, or None for SQLite."""
    value = os.environ.get(ENVIRONMENT, "").strip()
    if not value:
        return None
    url = make_url(value)
    if url.get_backend_name() != "postgresql":
        raise pytest.UsageError(f"{ENVIRONMENT} must name a PostgreSQL database (postgresql+psycopg://...), "
                                f"not {url.get_backend_name()!r}; leave it unset for SQLite")
    return url


def on_postgresql() -> bool:
    return postgresql_server() is not None


sqlite_only = pytest.mark.skipif(
    os.environ.get(ENVIRONMENT, "").strip() != "",
    reason=f"checks the SQLite engine itself; {ENVIRONMENT} selects PostgreSQL")

needs_postgresql = pytest.mark.skipif(
    os.environ.get(ENVIRONMENT, "").strip() == "",
    reason=f"needs PostgreSQL: set {ENVIRONMENT}=postgresql+psycopg://... (as .ci/run does)")


def _quoted(name: str) -> str:
    assert name.replace("_", "").isalnum(), name  # our own generated names only
    return f'"{name}"'


@contextmanager
def fresh_postgresql_database(server: URL) -> Iterator[str]:
    """A new, empty database on the server for the block; its URL (password included) is yielded.
    It is dropped afterwards, disconnecting anything still attached (a server process, a pool)."""
    name = f"{NAME_PREFIX}{os.getpid()}_{uuid.uuid4().hex[:12]}"
    admin = create_engine(server, isolation_level="AUTOCOMMIT", poolclass=NullPool)
    try:
        with admin.connect() as connection:
            connection.exec_driver_sql(f"CREATE DATABASE {_quoted(name)} TEMPLATE template0 ENCODING 'UTF8'")
        try:
            yield server.set(database=name).render_as_string(hide_password=False)
        finally:
            with admin.connect() as connection:
                connection.exec_driver_sql(f"DROP DATABASE IF EXISTS {_quoted(name)} WITH (FORCE)")
    finally:
        admin.dispose()


@contextmanager
def database_for_test(tmp_path: Path) -> Iterator[str]:
    """The database URL one test should use: a fresh PostgreSQL database when one is configured,
    else a SQLite file in the test's own directory."""
    server = postgresql_server()
    if server is None:
        yield f"sqlite:///{tmp_path / 'berth.db'}"
        return
    with fresh_postgresql_database(server) as url:
        yield url
