"""`berth sweep`, run as a user runs it: a real process, real files; JSON with the summary, CSV
that the standard library's csv module reads, and refusals that name their fields."""

import csv
import io
import json
import os
import platform
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

from service.contract.catalog import CatalogIn
from service.contract.sweep import SweepIn
from service.domain.sweep import chunk_size
from service.usecases.chunk_pool import COMPILED_PAYS_FROM
from service.usecases.sweeps import SweepLimits, prepare_sweep
from tests.conftest import EXAMPLES

BERTH = [sys.executable, "-m", "service.cli"]
CATALOG = str(EXAMPLES / "catalog.json")


def berth(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*BERTH, *args], capture_output=True, text=True, timeout=300, check=False)


def write(tmp_path: Path, sweep: dict[str, Any], name: str = "sweep.json") -> str:
    path = tmp_path / name
    path.write_text(json.dumps(sweep), encoding="utf-8")
    return str(path)


def demo(samples: int) -> dict[str, Any]:
    sweep: dict[str, Any] = json.loads((EXAMPLES / "sweep-electricity-and-utilisation.json").read_text())
    sweep["samples"] = samples
    return sweep


def test_sweep_prints_json_with_a_summary_of_every_scenario() -> None:
    result = berth("sweep", str(EXAMPLES / "sweep-electricity-and-utilisation.json"), "--catalog", CATALOG)
    assert result.returncode == 0, result.stderr
    document = json.loads(result.stdout)
    summary = document["summary"]
    assert document["scenarios"] == summary["scenarios"] == 20_000
    assert document["currency"] == summary["currency"] == "EUR"
    shares = sum(option["cheapest_share"] for option in summary["options"]) + summary["nothing_feasible_share"]
    assert abs(shares - 1.0) < 1e-12  # every scenario has one cheapest option or none
    assert 0.0 <= summary["probability_owning_beats_renting"] <= 1.0
    assert document["rows_included"] is False and document["rows"] is None  # beyond 10,000 rows
    assert [bar["input"] for bar in document["tornado"]] and "Traceback" not in result.stderr


def test_sweep_csv_has_one_row_per_scenario(tmp_path: Path) -> None:
    sweep = demo(3_000)
    result = berth("sweep", write(tmp_path, sweep), "--catalog", CATALOG, "--format", "csv")
    assert result.returncode == 0, result.stderr
    reader = csv.DictReader(io.StringIO(result.stdout, newline=""))
    records = list(reader)
    header = reader.fieldnames or []
    assert len(records) == 3_000
    assert [r["scenario"] for r in records] == [str(k) for k in range(3_000)]
    assert header[:5] == ["scenario", "overrides.electricity_price_per_kwh [EUR/kWh]",
                          "overrides.utilisation_planned [fraction]", "overrides.rented_price_factor [factor]",
                          "campaign.work.tokens [tokens]"]
    assert header[5:7] == ["cheapest", "currency"]
    assert all(name.endswith(" total") for name in header[7:-1]) and len(header) > 8
    assert header[-1] == "cautions" and "not a vendor quote" in records[0]["cautions"]
    assert {r["cautions"] for r in records[1:]} == {""}
    assert {r["currency"] for r in records} == {"EUR"}
    # the drawn inputs respect the distributions' supports
    prices = [float(r["overrides.electricity_price_per_kwh [EUR/kWh]"]) for r in records]
    factors = [float(r["overrides.rented_price_factor [factor]"]) for r in records]
    assert min(prices) >= 0.05 and max(prices) <= 0.30
    assert min(factors) >= 0.7 and max(factors) <= 1.3
    # the cheapest named in each row is the smallest total of that row
    for record in records[:500]:
        totals = {name.removesuffix(" total"): float(v) for name, v in record.items() if name.endswith(" total") and v}
        assert record["cheapest"] == min(totals, key=lambda label: totals[label])


def test_the_json_summary_and_the_csv_rows_agree(tmp_path: Path) -> None:
    path = write(tmp_path, demo(500))
    document = json.loads(berth("sweep", path, "--catalog", CATALOG).stdout)
    records = list(csv.DictReader(io.StringIO(berth("sweep", path, "--catalog", CATALOG, "--format", "csv").stdout,
                                              newline="")))
    assert len(records) == len(document["rows"]) == 500
    for record, row in zip(records, document["rows"], strict=True):
        assert record["cheapest"] == (row["cheapest"] or "")
        for label, amount in row["totals"].items():
            assert (record[f"{label} total"] == "") if amount is None else float(record[f"{label} total"]) == amount
    for option in document["summary"]["options"]:
        shares = sum(1 for r in records if r["cheapest"] == option["option"]) / 500
        assert option["cheapest_share"] == shares


def test_worker_processes_give_the_same_bytes_as_one_process(tmp_path: Path) -> None:
    """A sweep of more than two chunks, too small for the compiled kernel (the next test's): the answer is
    one process's, byte for byte, as JSON and as CSV."""
    sweep = demo(90_000)
    prepared = prepare_sweep(CatalogIn.model_validate_json(Path(CATALOG).read_text(encoding="utf-8")),
                             SweepIn.model_validate(sweep), SweepLimits())
    assert sweep["samples"] > 2 * chunk_size(prepared.catalog, prepared.plan.paths)  # the work is really shared
    assert sweep["samples"] < COMPILED_PAYS_FROM
    path = write(tmp_path, sweep)
    for output in ("json", "csv"):
        one, two = (berth("sweep", path, "--catalog", CATALOG, "--format", output, "--processes", n)
                    for n in ("1", "2"))
        assert one.returncode == two.returncode == 0, one.stderr + two.stderr
        assert one.stdout == two.stdout and len(one.stdout) > 1000


def test_a_sweep_large_enough_for_the_compiled_kernel_gives_the_same_bytes_in_forked_workers(tmp_path: Path) -> None:
    """From COMPILED_PAYS_FROM scenarios the command loads the compiled kernel once, and each worker forked
    from it uses it; run as the console script, whose module every worker imports again, the
    answer is one process's, byte for byte."""
    path = write(tmp_path, demo(COMPILED_PAYS_FROM))
    script = Path(sys.executable).with_name("berth")
    command = [str(script)] if script.exists() else BERTH
    one, two = (subprocess.run([*command, "sweep", path, "--catalog", CATALOG, "--processes", n],
                               capture_output=True, text=True, timeout=300, check=False) for n in ("1", "2"))
    assert one.returncode == two.returncode == 0, one.stderr + two.stderr
    assert one.stdout == two.stdout
    assert json.loads(two.stdout)["summary"]["scenarios"] == COMPILED_PAYS_FROM


@pytest.mark.skipif(sys.platform == "win32", reason="a pseudo-terminal is POSIX's")
def test_csv_written_to_a_file_from_a_terminal_goes_to_the_file_with_the_bar_on_the_terminal(tmp_path: Path) -> None:
    """`berth sweep --format csv > rows.csv` typed at a terminal: the progress bar is drawn on the terminal
    (the error stream) and every row goes to the file. A bar that took over standard output while drawn sent
    the rows to the terminal and left the file empty."""
    import pty
    import threading

    controller, terminal = pty.openpty()
    shown = bytearray()

    def read_terminal() -> None:
        try:
            while chunk := os.read(controller, 65536):
                shown.extend(chunk)
        except OSError:  # the terminal closed
            pass

    reader = threading.Thread(target=read_terminal, daemon=True)
    reader.start()
    rows = tmp_path / "rows.csv"
    with rows.open("w", encoding="utf-8") as out:
        done = subprocess.run([*BERTH, "sweep", write(tmp_path, demo(300)), "--catalog", CATALOG, "--format", "csv"],
                              stdout=out, stderr=terminal, timeout=300, check=False)
    os.close(terminal)
    reader.join(10)
    os.close(controller)
    assert done.returncode == 0, bytes(shown).decode(errors="replace")
    assert len(list(csv.DictReader(io.StringIO(rows.read_text(encoding="utf-8"))))) == 300
    assert b"300/300" in shown and b"owned_new_build total" not in shown  # the bar, and no row, on the terminal


def test_bad_input_exits_2_with_field_messages_and_no_traceback(tmp_path: Path) -> None:
    sweep = demo(10)
    sweep["distributions"]["overrides.sunshine"] = {"kind": "uniform", "low": 0, "high": 1}
    sweep["distributions"]["campaign.work.tokens"] = {"kind": "normal", "mean": 2e11, "sd": 1e10}
    result = berth("sweep", write(tmp_path, sweep), "--catalog", CATALOG)
    assert result.returncode == 2
    assert "distributions.overrides.sunshine" in result.stderr
    assert "distributions.campaign.work.tokens" in result.stderr
    assert "Traceback" not in result.stderr and result.stdout == ""

    schema = demo(10)
    schema["samples"] = 0
    schema["grid"] = {"overrides.pue": [1.2]}
    result = berth("sweep", write(tmp_path, schema, "schema.json"), "--catalog", CATALOG, "--format", "csv")
    assert result.returncode == 2
    assert "samples" in result.stderr and "Traceback" not in result.stderr and result.stdout == ""


def test_a_sweep_over_the_limit_exits_2_naming_the_limit(tmp_path: Path) -> None:
    result = berth("sweep", write(tmp_path, demo(10_000_001)), "--catalog", CATALOG)
    assert result.returncode == 2
    assert "10,000,000" in result.stderr and "samples" in result.stderr
    assert "Traceback" not in result.stderr


@pytest.mark.skipif(platform.libc_ver()[0] != "glibc", reason="the allocator setting is glibc's")
def test_sweep_processes_keep_the_memory_of_freed_arrays_on_glibc() -> None:
    # In a process of its own, so the test process keeps its allocator as it was.
    done = subprocess.run([sys.executable, "-c", "from service.usecases.chunk_pool import keep_freed_arrays as k; "
                           "print(k())"], capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 0 and done.stdout.strip() == "True", done.stderr
