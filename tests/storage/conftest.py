"""Each storage test on a database of its own: a temporary SQLite file, or a fresh PostgreSQL
database when BERTH_TEST_DATABASE_URL is set (see tests/databases.py)."""

from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import Engine

from service.storage.engine import build_engine
from tests.databases import database_for_test


@pytest.fixture
def database_url(tmp_path: Path) -> Iterator[str]:
    with database_for_test(tmp_path) as url:
        yield url


@pytest.fixture
def engine(database_url: str) -> Iterator[Engine]:
    """An engine on this test's database (a module may give `database_url` of its own)."""
    built = build_engine(database_url)
    yield built
    built.dispose()
