"""Schemathesis against the app in-process (conventions.md, Fuzzing): every operation of the OpenAPI
document, with generated valid and invalid requests, must answer without a 5xx and as documented
(status code, content type, headers, response schema), and must refuse what the schema forbids.

It runs in local mode (no keys), so every handler is reached as the local admin. Examples per
operation are bounded for CI and derandomized (a failure reproduces); set BERTH_FUZZ_EXAMPLES to
explore more, e.g. `BERTH_FUZZ_EXAMPLES=300 pytest tests/api/test_fuzz.py`.

The tests after the fuzz test pin what the fuzzer found, so the fixes stay fixed without it."""

import atexit
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
import schemathesis
import yaml
from hypothesis import HealthCheck, settings
from sqlalchemy import text

from service.api.app import create_app
from service.config import Settings
from service.contract.request import QuoteRequestIn, TransformerWorkIn
from service.storage.repository import Storage
from service.usecases.loading import load_file
from tests.api.problems import PROBLEM, problem_of
from tests.conftest import load_example

EXAMPLES = int(os.environ.get("BERTH_FUZZ_EXAMPLES", "25"))

# Sweeps are all answered at once (no background runner to outlive the module), and kept small.
FUZZ_SETTINGS = {"sweep_max_scenarios": 500, "sweep_answer_at_once": 500, "fleet_max_cells": 200_000}
DIRECTORY = Path(tempfile.mkdtemp(prefix="berth-fuzz-"))
atexit.register(shutil.rmtree, DIRECTORY, True)  # also when the module is collected but not run
fuzz_app = create_app(Settings(database_url=f"sqlite:///{DIRECTORY / 'berth.db'}", **FUZZ_SETTINGS))
schema = schemathesis.openapi.from_asgi("/openapi.json", fuzz_app)  # starts the lifespan: migrated, demo catalog

# "A schema-valid request is accepted" cannot hold where validity depends on more than the JSON Schema
# says; each such operation is named with its reason, and every other check still runs on it.
RULES_BEYOND_THE_SCHEMA = {
    "POST /v1/catalogs": "references between the catalog's own ids (node types, accelerators)",
    "POST /v1/quotes": "the catalog's venues and groups; an Idempotency-Key reused with another body is a 422 "
                       "(api.md, Conventions)",
    "POST /v1/sweeps": "a grid or samples with distributions, not both; paths that the catalog supports",
    "POST /v1/fleet-plans": "exactly one demand source; a site and an offer of the catalog",
    "PUT /v1/catalogs/default": "the catalog must exist, be active and be effective today",
    "POST /v1/quotes/{quote_id}/requote": "the catalog must exist, be active, be effective today and know the "
                                          "request's venues and groups",
    "GET /v1/sweeps": "the cursor is opaque: only one this service issued is accepted",
    "GET /v1/fleet-plans": "the cursor is opaque: only one this service issued is accepted",
}


@pytest.fixture(scope="module", autouse=True)
def _cleanup() -> Iterator[None]:
    yield
    fuzz_app.state.sweeps.shutdown()
    fuzz_app.state.storage.dispose()
    shutil.rmtree(DIRECTORY, ignore_errors=True)


@schema.parametrize()
@settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None,
          suppress_health_check=list(HealthCheck))
def test_every_operation_answers_as_documented(case: schemathesis.Case) -> None:
    excluded = []
    if f"{case.method.upper()} {case.path}" in RULES_BEYOND_THE_SCHEMA:
        excluded.append(schemathesis.checks.positive_data_acceptance)
    case.call_and_validate(excluded_checks=excluded)


# What the fuzzer found, pinned.



def test_metrics_are_documented_as_prometheus_text() -> None:
    responses = fuzz_app.openapi()["paths"]["/metrics"]["get"]["responses"]
    assert list(responses["200"]["content"]) == ["text/plain"]


def test_every_422_and_404_is_documented_as_a_problem() -> None:
    for path, operations in fuzz_app.openapi()["paths"].items():
        for method, operation in operations.items():
            for status in ("404", "422"):
                if status in operation["responses"]:
                    assert list(operation["responses"][status]["content"]) == [PROBLEM], (method, path, status)


@pytest.mark.anyio
@pytest.mark.parametrize("path", ["/v1/quotes", "/v1/sweeps", "/v1/fleet-plans"])
async def test_a_body_that_is_not_utf8_is_a_documented_400(client: httpx.AsyncClient, path: str) -> None:
    problem_of(await client.post(path, content=b"\xff\xfe{", headers={"content-type": "application/json"}), 400)
    assert "400" in fuzz_app.openapi()["paths"][path]["post"]["responses"]


@pytest.mark.anyio
@pytest.mark.parametrize(("field", "value"), [
    (("overrides", "grid_kgco2e_per_kwh"), False),
    (("overrides", "utilisation"), True),
    (("campaign", "work", "tokens"), "1e12"),
    (("campaign", "runs", "count"), "3"),
])
async def test_a_json_body_with_a_boolean_or_string_for_a_number_is_a_422(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any], field: tuple[str, ...], value: Any
) -> None:
    target = owned_wins_request
    for key in field[:-1]:
        target = target.setdefault(key, {})
    target[field[-1]] = value
    problem = problem_of(await client.post("/v1/quotes", json=owned_wins_request), 422)
    assert [error["field"] for error in problem["errors"]] == [".".join(field)]


def test_files_stay_lax_because_yaml_reads_exponents_as_strings(tmp_path: Path) -> None:
    """PyYAML (YAML 1.1) reads `1.4e11` as a string; a YAML request file must still load."""
    request = load_example("campaign-owned-wins.json")
    request["campaign"]["work"]["tokens"] = "TOKENS"
    path = tmp_path / "campaign.yaml"
    path.write_text(yaml.safe_dump(request).replace("TOKENS", "1.4e11"), encoding="utf-8")
    assert yaml.safe_load(path.read_text(encoding="utf-8"))["campaign"]["work"]["tokens"] == "1.4e11"
    work = load_file(QuoteRequestIn, path).campaign.work
    assert isinstance(work, TransformerWorkIn) and work.tokens == 1.4e11


@pytest.mark.anyio
@pytest.mark.parametrize("value", ["0.5", "1700000000", "tomorrow"])
async def test_a_creation_time_filter_must_be_iso_8601(client: httpx.AsyncClient, value: str) -> None:
    problem = problem_of(await client.get("/v1/quotes", params={"created_to": value}), 422)
    assert [error["field"] for error in problem["errors"]] == ["query.created_to"]
    accepted = await client.get("/v1/quotes", params={"created_to": "2027-01-01T00:00:00Z"})
    assert accepted.status_code == 200, accepted.text


@pytest.mark.anyio
async def test_vanishing_figures_make_infeasible_options_not_a_500(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    """A utilisation or MTBF of 5e-324 passes the schema (> 0) and overflows float64 on the way:
    every option is infeasible and there is no recommendation."""
    for overrides in ({"utilisation": 5e-324}, {"mtbf_hours": 5e-324}, {"network_gbps": 5e-324}):
        response = await client.post("/v1/quotes", json={**owned_wins_request, "overrides": overrides})
        assert response.status_code == 201, response.text
        body = response.json()
        assert body["recommendation"] is None, overrides
        assert not any(option["feasible"] for option in body["options"])
    sweep = {"base": owned_wins_request, "grid": {"overrides.utilisation": [5e-324, 0.4]}}
    answered = await client.post("/v1/sweeps", json=sweep)
    assert answered.status_code == 201, answered.text
    assert answered.json()["result"]["scenarios"] == 2


@pytest.mark.anyio
@pytest.mark.parametrize("demand", [
    {"accelerator_hours_first_month": 60_000, "doubling_months": 0.01},  # 2^4800 by month 48
    {"monthly": [1.7e308] * 12},
])
async def test_a_fleet_plan_whose_demand_overflows_is_a_422_that_stores_nothing(
    client: httpx.AsyncClient, storage: Storage, demand: dict[str, Any]
) -> None:
    """It was a 500 after the plan, holding inf, had been stored (JSON cannot carry inf)."""
    plan = load_example("fleet-plan.json")
    plan.update({"samples": 20, "demand": demand})
    problem = problem_of(await client.post("/v1/fleet-plans", json=plan), 422)
    fields = [error["field"] for error in problem["errors"]]  # the plan, or each month over the ceiling
    assert fields and all(field == "demand" or field.startswith("demand.monthly.") for field in fields), fields
    with storage.engine.connect() as connection:
        assert connection.execute(text("SELECT COUNT(*) FROM fleet_plan")).scalar_one() == 0
    plan["demand"] = {"accelerator_hours_first_month": 60_000, "doubling_months": 12}
    assert (await client.post("/v1/fleet-plans", json=plan)).status_code == 201
