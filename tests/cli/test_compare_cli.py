"""`berth compare A B`: two stored-quote files (as `berth quote --format json` or GET /v1/quotes/{id}
writes them) or two quote ids in a database, compared as the API compares them."""

import json
import subprocess
import sys
from datetime import UTC, datetime
from pathlib import Path

from service.contract.request import QuoteRequestIn
from service.storage.engine import build_engine
from service.storage.migrate import upgrade
from service.storage.repository import Storage
from service.usecases.access import LOCAL
from service.usecases.catalogs import ParsedCatalogs, load_demo_catalog
from service.usecases.comparing import compare_documents
from service.usecases.loading import load_file
from service.usecases.quotes import create_quote
from tests.conftest import EXAMPLES

BERTH = [sys.executable, "-m", "service.cli"]


def run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*BERTH, *args], capture_output=True, text=True, timeout=120, check=False)


def quote_file(tmp_path: Path, name: str, deadline_days: float) -> Path:
    request = json.loads((EXAMPLES / "campaign-owned-wins.json").read_text(encoding="utf-8"))
    request["campaign"]["deadline_days"] = deadline_days
    source = tmp_path / f"{name}-request.json"
    source.write_text(json.dumps(request), encoding="utf-8")
    result = run("quote", str(source), "--format", "json")
    assert result.returncode == 0, result.stderr
    target = tmp_path / f"{name}.json"
    target.write_text(result.stdout, encoding="utf-8")
    return target


def test_two_quote_files_are_compared_as_json_and_as_a_table(tmp_path: Path) -> None:
    a, b = quote_file(tmp_path, "a", 21), quote_file(tmp_path, "b", 12)
    result = run("compare", str(a), str(b), "--format", "json")
    assert result.returncode == 0, result.stderr
    comparison = json.loads(result.stdout)
    expected = compare_documents(json.loads(a.read_text()), json.loads(b.read_text()))
    assert comparison == json.loads(json.dumps(expected))
    assert {"path": "request.campaign.deadline_days", "a": 21, "b": 12} in comparison["inputs_changed"]
    table = run("compare", str(a), str(b))
    assert table.returncode == 0, table.stderr
    assert "Inputs that differ" in table.stdout and "request.campaign.deadline_days" in table.stdout
    assert "Recommendation" in table.stdout and "rhine-campus/owned_chargeback" in table.stdout


def test_stored_quote_ids_are_read_from_the_database(tmp_path: Path) -> None:
    database = f"sqlite:///{tmp_path / 'berth.db'}"
    storage = Storage(build_engine(database))
    try:
        upgrade(storage.engine)
        load_demo_catalog(storage, EXAMPLES / "catalog.json", now=datetime(2027, 1, 4, tzinfo=UTC))
        request = load_file(QuoteRequestIn, EXAMPLES / "campaign-owned-wins.json")
        ids = [create_quote(storage, ParsedCatalogs(), request, clock=lambda: datetime(2027, 1, 4, tzinfo=UTC),
                            caller=LOCAL).body["id"] for _ in range(2)]
    finally:
        storage.dispose()
    result = run("compare", ids[0], ids[1], "--database", database, "--format", "json")
    assert result.returncode == 0, result.stderr
    comparison = json.loads(result.stdout)
    assert (comparison["a"]["id"], comparison["b"]["id"], comparison["changed"]) == (ids[0], ids[1], False)
    missing = run("compare", ids[0], "q_nothing", "--database", database)
    assert missing.returncode == 2 and "no quote 'q_nothing'" in missing.stderr and "Traceback" not in missing.stderr


def test_a_file_that_is_not_a_full_stored_quote_exits_2(tmp_path: Path) -> None:
    a = quote_file(tmp_path, "a", 21)
    other = tmp_path / "request.json"
    other.write_text((EXAMPLES / "campaign-owned-wins.json").read_text(encoding="utf-8"), encoding="utf-8")
    result = run("compare", str(a), str(other))
    assert result.returncode == 2 and "not a full stored quote" in result.stderr
    gone = run("compare", str(a), str(tmp_path / "nope.json"))
    assert gone.returncode == 2 and "cannot read" in gone.stderr
