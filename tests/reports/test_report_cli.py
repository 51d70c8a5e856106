"""`berth quote --format html|csv`: the report and the options CSV offline, from the same JSON the
command prints with --format json."""

import csv
import io
import json
import subprocess
import sys

from tests.conftest import EXAMPLES
from tests.reports.page import parse, value_of

BERTH = [sys.executable, "-m", "service.cli"]
REQUEST = str(EXAMPLES / "campaign-split.json")


def run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*BERTH, *args], capture_output=True, text=True, timeout=180, check=False)


def quote_json() -> dict[str, object]:
    result = run("quote", REQUEST, "--format", "json")
    assert result.returncode == 0, result.stderr
    body: dict[str, object] = json.loads(result.stdout)
    return body


def test_format_html_prints_the_report_page() -> None:
    result = run("quote", REQUEST, "--format", "html")
    assert result.returncode == 0, result.stderr
    assert result.stdout.startswith("<!DOCTYPE html>")
    page = parse(result.stdout)
    document = quote_json()
    recommendation = document["recommendation"]
    assert isinstance(recommendation, dict)
    assert page.by_id("why").text == f"Why: {recommendation['why']}"
    assert page.by_id("quote-id").text == "offline (not stored)"
    totals = [float(value_of(tr.find("td", class_="total"))) for tr in page.by_id("options-table").find_all("tr")
              if "data-venue" in tr.attrs]
    options = document["options"]
    assert isinstance(options, list)
    assert totals == [o["cost"]["total"] for o in options]


def test_format_csv_prints_one_row_per_option() -> None:
    result = subprocess.run([*BERTH, "quote", REQUEST, "--format", "csv"], capture_output=True, timeout=180,
                            check=False)
    assert result.returncode == 0, result.stderr.decode()
    text = result.stdout.decode("utf-8")
    rows = list(csv.DictReader(io.StringIO(text, newline="")))
    options = quote_json()["options"]
    assert isinstance(options, list)
    assert [(r["venue_id"], r["term"], float(r["total"])) for r in rows] == \
        [(o["venue"]["id"], o["term"], o["cost"]["total"]) for o in options]
    assert text.endswith("\r\n") and text.count("\r\n") == len(options) + 1


def test_an_unknown_format_is_refused() -> None:
    result = run("quote", REQUEST, "--format", "pdf")
    assert result.returncode == 2
    assert "pdf" in result.stderr
