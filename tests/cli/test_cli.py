"""The `berth` command line, run as a user runs it: a real process, real files."""

import json
import subprocess
import sys
from pathlib import Path

from tests.conftest import EXAMPLES

BERTH = [sys.executable, "-m", "service.cli"]


def run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*BERTH, *args], capture_output=True, text=True, timeout=120, check=False)


def test_quote_prints_a_ranked_table_with_breakeven_and_cautions() -> None:
    result = run("quote", str(EXAMPLES / "campaign-owned-wins.json"), "--catalog", str(EXAMPLES / "catalog.json"))
    assert result.returncode == 0, result.stderr
    assert "Placement options, ranked (EUR; full view ranks)" in result.stdout
    assert "Recommendation:" in result.stdout
    assert "Break-even" in result.stdout
    assert "licensed engineers" in result.stdout


def test_a_recurring_quote_leads_with_the_programme() -> None:
    result = run("quote", str(EXAMPLES / "campaign-recurring.json"), "--catalog", str(EXAMPLES / "catalog.json"))
    assert result.returncode == 0, result.stderr
    assert "Placement options, ranked over the programme of 36 instances (EUR; full view ranks)" in result.stdout
    assert "over the programme of 36 instances" in result.stdout.split("Recommendation:")[1]
    assert "no break-even against tidewell-halvert-a88/on_demand: residency" in result.stdout


def test_quote_json_is_the_response_body() -> None:
    result = run("quote", str(EXAMPLES / "campaign-recurring.json"), "--format", "json")
    assert result.returncode == 0, result.stderr
    body = json.loads(result.stdout)
    for key in ("id", "created_at", "catalog_id", "catalog_hash", "model_version", "request", "work", "options",
                "recommendation", "breakeven", "curves", "assumptions", "cautions"):
        assert key in body
    assert len(body["catalog_hash"]) == 64
    assert body["options"][0]["rank"] == 1


def test_bad_input_exits_2_with_field_messages_and_no_traceback(tmp_path: Path) -> None:
    request = json.loads((EXAMPLES / "campaign-owned-wins.json").read_text())
    request["campaign"]["work"]["tokens"] = -5
    request["campaign"]["runs"]["count"] = 0
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(request))
    result = run("quote", str(path))
    assert result.returncode == 2
    assert "campaign.work.tokens" in result.stderr
    assert "campaign.runs.count" in result.stderr
    assert "Traceback" not in result.stderr


def test_a_missing_file_exits_2_without_traceback(tmp_path: Path) -> None:
    result = run("quote", str(tmp_path / "nope.json"))
    assert result.returncode == 2
    assert "cannot read" in result.stderr
    assert "Traceback" not in result.stderr


def test_catalog_check_accepts_the_demo_catalog() -> None:
    result = run("catalog", "check", str(EXAMPLES / "catalog.json"))
    assert result.returncode == 0, result.stderr
    assert "is valid" in result.stdout


def test_catalog_check_names_each_bad_field(tmp_path: Path) -> None:
    catalog = json.loads((EXAMPLES / "catalog.json").read_text())
    catalog["sites"][0]["pue"] = 0.5
    catalog["offers"][1]["nodes_max"] = 0
    path = tmp_path / "catalog.yaml"
    path.write_text(json.dumps(catalog))
    result = run("catalog", "check", str(path))
    assert result.returncode == 2
    assert "sites.0.pue" in result.stderr
    assert "offers.1.nodes_max" in result.stderr


def test_importing_the_command_lines_package_imports_none_of_its_libraries() -> None:
    """A sweep's worker processes import the parent's main module again, the `berth` console script
    (`from service.cli import main`): that must not import typer and rich into every worker."""
    code = ("import sys, service.cli; "
            "print(sorted(m for m in ('typer', 'rich', 'service.cli.commands', 'numpy') if m in sys.modules))")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True)
    assert result.stdout.strip() == "[]"
