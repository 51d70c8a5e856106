"""`berth keys add/list/revoke`, run as an operator runs them: a real process against a database
file. The key is printed once, on the last line; the list shows only its public prefix; a revoked
key no longer resolves (checked without a server, through service.usecases.access.resolve)."""

import os
import re
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from service.storage.engine import build_engine
from service.storage.repository import Storage
from service.usecases.access import Principal, resolve

BERTH = [sys.executable, "-m", "service.cli"]
KEY = re.compile(r"berth_[A-Za-z0-9_-]{43}")
ISO_TIME = r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d"


def run(*args: str) -> subprocess.CompletedProcess[str]:
    # A wide console, so rich does not shorten the table's columns to fit 80 characters.
    env = {**os.environ, "COLUMNS": "200"}
    env.pop("BERTH_DATABASE_URL", None)
    return subprocess.run([*BERTH, *args], capture_output=True, text=True, timeout=120, check=False, env=env)


@pytest.fixture
def database(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'keys.db'}"


@pytest.fixture
def storage(database: str) -> Iterator[Storage]:
    opened = Storage(build_engine(database))
    yield opened
    opened.dispose()


def add(database: str, role: str, team: str) -> tuple[str, str]:
    """Issue a key; return (id, key)."""
    result = run("keys", "add", "--role", role, "--team", team, "--database", database)
    assert result.returncode == 0, result.stderr
    key = result.stdout.splitlines()[-1]
    assert KEY.fullmatch(key), result.stdout
    issued = re.search(r"issued (key_\w+)", result.stderr)
    assert issued, result.stderr
    return issued.group(1), key


def listed(database: str) -> str:
    result = run("keys", "list", "--database", database)
    assert result.returncode == 0, result.stderr
    return result.stdout + result.stderr


def row_of(table: str, key_id: str) -> str:
    lines = [line for line in table.splitlines() if key_id in line]
    assert len(lines) == 1, table
    return lines[0]


def test_add_prints_the_key_on_the_last_line_and_it_resolves(database: str, storage: Storage) -> None:
    result = run("keys", "add", "--role", "analyst", "--team", "perception", "--database", database)
    assert result.returncode == 0, result.stderr
    key = result.stdout.splitlines()[-1]
    assert KEY.fullmatch(key), result.stdout
    assert key not in result.stderr  # shown once, where a script can take it
    key_id = re.search(r"issued (key_\w+)", result.stderr)
    assert key_id, result.stderr
    assert resolve(storage, key) == Principal(key_id=key_id.group(1), role="analyst", team="perception")
    assert resolve(storage, key[:-1] + ("A" if key[-1] != "A" else "B")) is None


def test_each_add_issues_a_different_key(database: str) -> None:
    first, second = add(database, "requester", "language"), add(database, "requester", "language")
    assert first[0] != second[0] and first[1] != second[1]


def test_list_shows_each_keys_prefix_and_never_the_key(database: str) -> None:
    issued = [add(database, "requester", "language"), add(database, "admin", "platform")]
    table = listed(database)
    for (key_id, key), (role, team) in zip(issued, [("requester", "language"), ("admin", "platform")], strict=True):
        row = row_of(table, key_id)
        assert key[:12] + "…" in row
        assert role in row and team in row
        assert re.search(ISO_TIME, row)
        assert key not in table and key[:13] not in table


def test_revoke_marks_the_key_and_it_no_longer_resolves(database: str, storage: Storage) -> None:
    (revoked_id, revoked), (kept_id, kept) = add(database, "analyst", "finance"), add(database, "analyst", "finance")
    assert resolve(storage, revoked) is not None

    result = run("keys", "revoke", revoked_id, "--database", database)
    assert result.returncode == 0, result.stderr
    assert f"revoked {revoked_id}" in result.stdout

    table = listed(database)
    assert len(re.findall(ISO_TIME, row_of(table, revoked_id))) == 2  # created and revoked
    assert len(re.findall(ISO_TIME, row_of(table, kept_id))) == 1  # created only
    assert resolve(storage, revoked) is None
    kept_principal = resolve(storage, kept)
    assert kept_principal is not None and kept_principal.key_id == kept_id

    again = run("keys", "revoke", revoked_id, "--database", database)
    assert again.returncode == 2
    assert "no active key" in again.stderr and "Traceback" not in again.stderr


@pytest.mark.parametrize(("role", "team", "message"), [
    ("boss", "language", "--role"),
    ("admin", " ", "a team is 1 to 100 characters"),
])
def test_a_bad_role_or_team_issues_nothing(database: str, role: str, team: str, message: str) -> None:
    result = run("keys", "add", "--role", role, "--team", team, "--database", database)
    assert result.returncode == 2
    assert message in result.stderr and "Traceback" not in result.stderr
    assert not KEY.search(result.stdout)
    assert "key_" not in listed(database)
