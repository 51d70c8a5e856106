"""Sweeps over HTTP (api.md, Sweeps): small ones answered at once (201), large ones accepted (202)
and finished in the background with the same summary as a synchronous run; every row as CSV that
the standard library's csv module reads; refusals are problems that name their fields."""

import asyncio
import copy
import csv
import io
import json
import threading
import time
from collections.abc import Iterator
from typing import Any

import httpx
import pytest
from fastapi import FastAPI

from service.config import Settings
from service.contract.catalog import CatalogIn
from service.contract.sweep import SweepIn
from service.usecases.sweeps import SweepLimits, prepare_sweep, run
from tests.api.problems import problem_of
from tests.conftest import load_example

ANSWER_AT_ONCE = 100
MAX_SCENARIOS = 50_000


@pytest.fixture
def settings(database_url: str) -> Settings:
    """The shared app fixture, with small sweeps answered at once only up to ANSWER_AT_ONCE."""
    return Settings(database_url=database_url, load_demo_catalog=True,
                    sweep_answer_at_once=ANSWER_AT_ONCE, sweep_max_scenarios=MAX_SCENARIOS)


@pytest.fixture(autouse=True)
def _stop_the_runner(app: FastAPI) -> Iterator[None]:
    yield
    app.state.sweeps.shutdown()


def test_shutdown_waits_for_the_runners_look_for_work_to_finish(app: FastAPI) -> None:
    """The runner looks for work on a thread of its own, from the app's start on. `shutdown` must wait
    for a look in flight: its connection, checked in after the storage closed, would stay open (and
    PostgreSQL would see it dropped when the database goes)."""
    runner = app.state.sweeps
    looking, looked = threading.Event(), threading.Event()

    def slow_look() -> list[tuple[str, str | None]]:
        looking.set()
        time.sleep(0.3)
        looked.set()
        return []
    runner._claimable = slow_look
    runner.wake()
    assert looking.wait(10.0)
    runner.shutdown()
    assert looked.is_set() and not runner._thread.is_alive()


def small_grid() -> dict[str, Any]:
    return {"base": load_example("campaign-owned-wins.json"),
            "grid": {"overrides.electricity_price_per_kwh": [0.08, 0.12, 0.20],
                     "campaign.work.tokens": [1e11, 2e11, 4e11, 1e12]},
            "tornado": {"swing": 0.2}}


def monte_carlo(samples: int) -> dict[str, Any]:
    sweep: dict[str, Any] = load_example("sweep-electricity-and-utilisation.json")
    sweep["samples"] = samples
    return sweep


def synchronous_summary(sweep: dict[str, Any]) -> dict[str, Any]:
    catalog = CatalogIn.model_validate(load_example("catalog.json"))
    summary, _ = run(prepare_sweep(catalog, SweepIn.model_validate(sweep), SweepLimits()))
    as_json: dict[str, Any] = json.loads(json.dumps(summary))
    return as_json




def read_csv(text: str) -> tuple[list[str], list[dict[str, str]]]:
    reader = csv.DictReader(io.StringIO(text, newline=""))
    rows = list(reader)
    return list(reader.fieldnames or []), rows


async def wait_until_finished(client: httpx.AsyncClient, location: str, timeout: float = 120.0) -> dict[str, Any]:
    deadline = time.monotonic() + timeout
    seen: list[str] = []
    while time.monotonic() < deadline:
        response = await client.get(location)
        assert response.status_code == 200, response.text
        body: dict[str, Any] = response.json()
        seen.append(body["status"])
        if body["status"] in ("done", "failed"):
            return body
        assert body["status"] in ("queued", "running")
        await asyncio.sleep(0.05)
    raise AssertionError(f"the sweep did not finish in {timeout} s; statuses seen: {sorted(set(seen))}")


@pytest.mark.anyio
async def test_a_small_sweep_is_answered_at_once_with_summary_rows_and_tornado(client: httpx.AsyncClient) -> None:
    response = await client.post("/v1/sweeps", json=small_grid())
    assert response.status_code == 201, response.text
    body = response.json()
    assert response.headers["location"] == f"/v1/sweeps/{body['id']}" == body["links"]["self"]
    assert body["status"] == "done"
    assert body["progress"] == {"scenarios_done": 12, "scenarios_total": 12}
    result = body["result"]
    assert result["scenarios"] == 12 and result["rows_included"] is True
    assert result["summary"] == synchronous_summary(small_grid())
    # Break-even utilisation comes to 4 decimals, as in a quote.
    figures = [row[f"utilisation_p{q}"] for row in result["summary"]["breakeven_utilisation"] for q in (5, 50, 95)]
    assert figures and all(u is None or u == round(u, 4) for u in figures) and any(u is not None for u in figures)
    assert len(result["rows"]) == 12 and {row["currency"] for row in result["rows"]} == {"EUR"}
    assert {row["cheapest"] for row in result["rows"]} <= set(result["rows"][0]["totals"])
    assert [v["path"] for v in result["varied"]] == ["overrides.electricity_price_per_kwh", "campaign.work.tokens"]
    effects = [bar["effect"] for bar in result["tornado"]]
    assert len(effects) == 2 and effects == sorted(effects, reverse=True)
    # read back unchanged
    again = await client.get(body["links"]["self"])
    assert again.status_code == 200 and again.json() == body


@pytest.mark.anyio
async def test_a_sweep_no_venue_can_run_still_answers_its_tornado_without_numpy_warnings(
        client: httpx.AsyncClient) -> None:
    """A trillion parameters is a valid model that no venue of the demo catalog can train in time (each
    would take over a year; some also lack the nodes or the residency): every option is infeasible, so
    every best total is infinite, every gap inf - inf, and the tornado's gaps are empty. The tornado's
    evaluation carries the infinities as quotes and chunks do, without numpy's warnings (which the
    test configuration turns into errors, and a served sweep into a 500)."""
    sweep = small_grid()
    sweep["base"]["campaign"]["work"]["parameters"] = 1e12
    response = await client.post("/v1/sweeps", json=sweep)
    assert response.status_code == 201, response.text
    result = response.json()["result"]
    assert all(row["cheapest"] is None for row in result["rows"])
    bars = result["tornado"]
    assert [bar["input"] for bar in bars] == ["overrides.electricity_price_per_kwh", "campaign.work.tokens"]
    assert all(bar[gap] is None for bar in bars for gap in ("gap_at_low", "gap_at_high", "gap_at_centre", "effect"))


@pytest.mark.anyio
async def test_a_large_sweep_is_accepted_and_finishes_with_the_synchronous_summary(
    client: httpx.AsyncClient,
) -> None:
    sweep = monte_carlo(2_000)
    response = await client.post("/v1/sweeps", json=sweep)
    assert response.status_code == 202, response.text
    accepted = response.json()
    location = response.headers["location"]
    assert location == f"/v1/sweeps/{accepted['id']}"
    assert accepted["status"] in ("queued", "running", "done")  # the runner may already have started
    assert accepted["progress"]["scenarios_total"] == 2_000
    done = await wait_until_finished(client, location)
    assert done["status"] == "done", done["error"]
    assert done["progress"] == {"scenarios_done": 2_000, "scenarios_total": 2_000}
    assert done["result"]["summary"] == synchronous_summary(sweep)
    assert done["result"]["scenarios"] == 2_000

    rows = await client.get(done["links"]["rows_csv"])
    assert rows.status_code == 200
    assert rows.headers["content-type"].startswith("text/csv")
    header, records = read_csv(rows.text)
    assert len(records) == 2_000
    assert [r["scenario"] for r in records] == [str(k) for k in range(2_000)]
    assert "overrides.electricity_price_per_kwh [EUR/kWh]" in header
    assert "campaign.work.tokens [tokens]" in header
    assert {r["currency"] for r in records} == {"EUR"}


@pytest.mark.anyio
async def test_a_background_grid_keeps_the_listed_order_of_its_paths(client: httpx.AsyncClient) -> None:
    """The grid enumerates with the last listed path fastest, in the background as at once."""
    sweep = {"base": load_example("campaign-owned-wins.json"),
             "grid": {"overrides.utilisation_planned": [0.5, 0.7, 0.9],
                      "campaign.deadline_days": [float(d) for d in range(10, 50)]}}
    response = await client.post("/v1/sweeps", json=sweep)
    assert response.status_code == 202, response.text
    done = await wait_until_finished(client, response.headers["location"])
    assert done["status"] == "done", done["error"]
    catalog = CatalogIn.model_validate(load_example("catalog.json"))
    _, rows = run(prepare_sweep(catalog, SweepIn.model_validate(sweep), SweepLimits()))
    assert [v["path"] for v in done["result"]["varied"]] == list(sweep["grid"])
    assert done["result"]["rows"] == json.loads(json.dumps(rows))
    assert done["result"]["rows"][1]["inputs"] == {"overrides.utilisation_planned": 0.5,
                                                   "campaign.deadline_days": 11.0}
    header, records = read_csv((await client.get(done["links"]["rows_csv"])).text)
    assert header[1:3] == ["overrides.utilisation_planned [fraction]", "campaign.deadline_days [days]"]
    assert [(float(r[header[1]]), float(r[header[2]])) for r in records] == [
        (row["inputs"]["overrides.utilisation_planned"], row["inputs"]["campaign.deadline_days"]) for row in rows]


@pytest.mark.anyio
async def test_rows_csv_has_units_a_currency_and_the_json_rows_values(client: httpx.AsyncClient) -> None:
    created = (await client.post("/v1/sweeps", json=small_grid())).json()
    response = await client.get(f"/v1/sweeps/{created['id']}/rows.csv")
    assert response.status_code == 200, response.text
    header, records = read_csv(response.text)
    labels = list(created["result"]["rows"][0]["totals"])
    assert header == (["scenario", "overrides.electricity_price_per_kwh [EUR/kWh]", "campaign.work.tokens [tokens]",
                       "cheapest", "currency"] + [f"{label} total" for label in labels] + ["cautions"])
    assert len(records) == 12
    # The cautions sit in the first row's last cell, every other row leaves it empty.
    assert "licensed engineers" in records[0]["cautions"] and "not legal advice" in records[0]["cautions"]
    assert all(record["cautions"] == "" for record in records[1:])
    for record, row in zip(records, created["result"]["rows"], strict=True):
        assert record["currency"] == "EUR"
        assert record["cheapest"] == (row["cheapest"] or "")
        assert float(record["overrides.electricity_price_per_kwh [EUR/kWh]"]) == row["inputs"][
            "overrides.electricity_price_per_kwh"]
        assert float(record["campaign.work.tokens [tokens]"]) == row["inputs"]["campaign.work.tokens"]
        for label in labels:
            cell, amount = record[f"{label} total"], row["totals"][label]
            assert (cell == "") if amount is None else (float(cell) == amount), label


@pytest.mark.anyio
async def test_an_unknown_sweep_is_a_404_problem(client: httpx.AsyncClient) -> None:
    problem = problem_of(await client.get("/v1/sweeps/sw_nope"), 404)
    assert "sw_nope" in problem["detail"]
    problem_of(await client.get("/v1/sweeps/sw_nope/rows.csv"), 404)


@pytest.mark.anyio
async def test_an_invalid_sweep_is_a_422_naming_each_field(client: httpx.AsyncClient) -> None:
    sweep = small_grid()
    sweep["grid"] = {"overrides.sunshine": [1.0], "overrides.utilisation": [0.5, 1.5],
                     "campaign.recurrence.every_months": [1.0]}
    problem = problem_of(await client.post("/v1/sweeps", json=sweep), 422)
    fields = {error["field"] for error in problem["errors"]}
    assert fields == {"grid.overrides.sunshine", "grid.overrides.utilisation", "grid.campaign.recurrence.every_months"}

    venues = small_grid()
    venues["grid"] = {"overrides.sites.nowhere.pue": [1.2], "overrides.offers.nimbrel-ardvolly-a88.sunshine": [1.0]}
    venues["base"]["overrides"] = {"sites": {"nowhere": {"pue": 1.2}}}
    problem = problem_of(await client.post("/v1/sweeps", json=venues), 422)
    assert {error["field"] for error in problem["errors"]} == {
        "grid.overrides.sites.nowhere.pue", "grid.overrides.offers.nimbrel-ardvolly-a88.sunshine",
        "base.overrides.sites.nowhere"}

    schema = copy.deepcopy(small_grid())
    schema["samples"] = -3  # a grid and samples together, and a negative count
    problem = problem_of(await client.post("/v1/sweeps", json=schema), 422)
    assert "samples" in {error["field"] for error in problem["errors"]}

    bad_distribution = monte_carlo(10)
    bad_distribution["distributions"]["campaign.work.tokens"] = {"kind": "normal", "mean": 2e11, "sd": 1e10}
    problem = problem_of(await client.post("/v1/sweeps", json=bad_distribution), 422)
    assert [e["field"] for e in problem["errors"]] == ["distributions.campaign.work.tokens"]


@pytest.mark.anyio
async def test_a_sweep_over_the_limit_is_a_422_naming_the_limit(client: httpx.AsyncClient) -> None:
    problem = problem_of(await client.post("/v1/sweeps", json=monte_carlo(MAX_SCENARIOS + 1)), 422)
    assert problem["errors"] == [{"field": "samples",
                                  "reason": f"{MAX_SCENARIOS + 1:,} scenarios exceed the limit of {MAX_SCENARIOS:,} "
                                            "per sweep"}]
