"""Each storage test on a database of its own: a temporary SQLite file, or a fresh PostgreSQL
database when BERTH_TEST_DATABASE_URL is set (see tests/databases.py)."""

from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.databases import database_for_test


@pytest.fixture
def database_url(tmp_path: Path) -> Iterator[str]:
    with database_for_test(tmp_path) as url:
        yield url
