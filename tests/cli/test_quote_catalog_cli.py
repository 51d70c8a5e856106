"""`berth quote --catalog FILE_OR_ID`, run as a user runs it: a real process. A value that names an
existing file is that file (JSON or YAML) and no database is opened; otherwise a stored catalog's id,
read from the database given by --database; anything else exits 2 naming the value. A stored catalog
quotes exactly as the HTTP API quotes it."""

import json
import os
import shutil
import subprocess
import sys
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import httpx
import pytest
import yaml
from fastapi import FastAPI

from service.api.app import create_app, prepare
from service.config import Settings
from service.storage.engine import build_engine
from service.storage.migrate import upgrade
from service.storage.repository import Storage
from service.usecases.catalogs import load_demo_catalog
from tests.conftest import EXAMPLES

BERTH = [sys.executable, "-m", "service.cli"]
CATALOG = EXAMPLES / "catalog.json"
REQUEST = EXAMPLES / "campaign-owned-wins.json"
NEITHER = "is neither a readable file nor a stored catalog id"
# Fields only a stored quote fills; the offline quote of a file leaves them null.
IDENTITY = ("id", "created_at", "catalog_id")


def berth(*args: str | Path, cwd: Path | None = None,
          env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    environment = {key: value for key, value in os.environ.items() if key != "BERTH_DATABASE_URL"}
    return subprocess.run([*BERTH, *map(str, args)], capture_output=True, text=True, timeout=120, check=False,
                          cwd=cwd, env={**environment, **(env or {})})


def printed_quote(*args: str | Path, cwd: Path | None = None, env: dict[str, str] | None = None) -> dict[str, Any]:
    result = berth("quote", *args, "--format", "json", cwd=cwd, env=env)
    assert result.returncode == 0, result.stderr
    document: dict[str, Any] = json.loads(result.stdout)
    return document


def words(text: str) -> str:
    """The console wraps long messages to the terminal's width; compare them as words."""
    return " ".join(text.split())


def without_identity(document: dict[str, Any]) -> dict[str, Any]:
    return {key: value for key, value in document.items() if key not in IDENTITY}


def totals(document: dict[str, Any]) -> list[tuple[str, str, float]]:
    return [(option["venue"]["id"], option["term"], option["cost"]["total"]) for option in document["options"]]


@pytest.fixture
def database(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'berth.db'}"


@pytest.fixture
def catalog_id(database: str) -> str:
    """The demo catalog, stored by the use case the service runs on an empty database."""
    storage = Storage(build_engine(database))
    try:
        upgrade(storage.engine)
        stored = load_demo_catalog(storage, CATALOG, now=datetime(2027, 1, 4, 9, 0, tzinfo=UTC))
    finally:
        storage.dispose()
    assert stored is not None
    return str(stored["id"])


@pytest.fixture
def app(database: str, catalog_id: str) -> Iterator[FastAPI]:
    application = create_app(Settings(database_url=database, load_demo_catalog=False))
    prepare(application)  # ASGITransport does not run the lifespan
    yield application
    application.state.storage.dispose()


def test_a_stored_catalog_named_by_id_gives_the_same_json_quote_as_its_file(database: str, catalog_id: str) -> None:
    by_id = printed_quote(REQUEST, "--catalog", catalog_id, "--database", database)
    by_file = printed_quote(REQUEST, "--catalog", CATALOG)
    assert by_id["catalog_id"] == catalog_id
    assert by_file["catalog_id"] is None
    assert by_id["id"] is None and by_file["id"] is None  # offline: nothing is stored
    assert by_id["catalog_hash"] == by_file["catalog_hash"]
    assert len(totals(by_id)) > 1 and totals(by_id) == totals(by_file)
    assert without_identity(by_id) == without_identity(by_file)


@pytest.mark.anyio
async def test_a_stored_catalog_quotes_as_the_http_api_quotes_it(app: FastAPI, tmp_path: Path, database: str,
                                                                 catalog_id: str) -> None:
    request = {**json.loads(REQUEST.read_text(encoding="utf-8")), "catalog_id": catalog_id}
    transport = httpx.ASGITransport(app=app)
    async with httpx.AsyncClient(transport=transport, base_url="http://berth.test") as http:
        response = await http.post("/v1/quotes", json=request)
    assert response.status_code == 201, response.text
    served = response.json()
    path = tmp_path / "request.json"
    path.write_text(json.dumps(request), encoding="utf-8")
    printed = printed_quote(path, "--catalog", catalog_id, "--database", database)
    assert served["catalog_id"] == printed["catalog_id"] == catalog_id
    assert len(totals(printed)) > 1 and totals(printed) == totals(served)
    served_body = {key: value for key, value in served.items() if key not in ("id", "created_at")}
    assert {key: value for key, value in printed.items() if key not in ("id", "created_at")} == served_body


def test_an_unknown_catalog_id_exits_2_naming_it(database: str, catalog_id: str) -> None:
    unknown = "cat_" + "0" * 32
    result = berth("quote", REQUEST, "--catalog", unknown, "--database", database)
    assert result.returncode == 2
    assert result.stdout == ""
    message = words(result.stderr)
    assert f"--catalog {unknown!r} {NEITHER}" in message
    assert "no catalog with that id in sqlite:///" in message
    assert "Traceback" not in result.stderr


def test_a_value_neither_a_file_nor_an_id_exits_2_without_opening_a_database(tmp_path: Path) -> None:
    never = tmp_path / "never.db"
    missing = str(tmp_path / "catalogue.json")
    result = berth("quote", REQUEST, "--catalog", missing, "--database", f"sqlite:///{never}")
    assert result.returncode == 2
    assert f"--catalog {missing!r} {NEITHER}" in words(result.stderr)
    assert "Traceback" not in result.stderr
    assert not never.exists()


def test_a_yaml_catalog_file_quotes_offline_and_creates_no_database(tmp_path: Path) -> None:
    catalog_yaml = tmp_path / "catalog.yaml"
    catalog_yaml.write_text(yaml.safe_dump(json.loads(CATALOG.read_text(encoding="utf-8"))), encoding="utf-8")
    default = tmp_path / "default.db"
    printed = printed_quote(REQUEST, "--catalog", catalog_yaml, env={"BERTH_DATABASE_URL": f"sqlite:///{default}"})
    assert printed["catalog_id"] is None
    assert printed["catalog_hash"] == printed_quote(REQUEST, "--catalog", CATALOG)["catalog_hash"]
    assert totals(printed) and all(total > 0 for _, _, total in totals(printed))
    assert not default.exists()


def test_without_catalog_the_demo_file_is_used_and_no_database_is_opened(tmp_path: Path) -> None:
    default = tmp_path / "default.db"
    printed = printed_quote(REQUEST, env={"BERTH_DATABASE_URL": f"sqlite:///{default}"})
    assert printed["catalog_id"] is None
    assert totals(printed) == totals(printed_quote(REQUEST, "--catalog", CATALOG))
    assert not default.exists()


def test_an_existing_file_named_like_an_id_is_read_as_the_file(tmp_path: Path) -> None:
    shutil.copy(CATALOG, tmp_path / "cat_local")
    never = tmp_path / "never.db"
    printed = printed_quote(REQUEST, "--catalog", "cat_local", "--database", f"sqlite:///{never}", cwd=tmp_path)
    assert printed["catalog_id"] is None
    assert totals(printed) == totals(printed_quote(REQUEST, "--catalog", CATALOG))
    assert not never.exists()


def test_a_request_naming_another_catalog_than_the_option_is_refused(tmp_path: Path, database: str,
                                                                      catalog_id: str) -> None:
    request = json.loads(REQUEST.read_text(encoding="utf-8"))
    path = tmp_path / "request.json"
    path.write_text(json.dumps({**request, "catalog_id": "cat_other"}), encoding="utf-8")
    result = berth("quote", path, "--catalog", catalog_id, "--database", database)
    assert result.returncode == 2
    message = words(result.stderr)
    assert "the request and --catalog name different catalogs" in message
    assert "catalog_id: the request names 'cat_other'" in message
    assert "Traceback" not in result.stderr
