"""The fleet plan as a chart and a page: the marked best size is the plan's, the tables show the
plan's numbers, and the endpoints and `berth plan --format html` serve them."""

import subprocess
import sys
import xml.etree.ElementTree as ET
from typing import Any

import httpx
import pytest

from service.contract.catalog import CatalogIn
from service.contract.fleet import FleetPlanIn
from service.reports.fleet_chart import fleet_figure_svg
from service.reports.html import render_plan
from service.usecases.fleet_plans import FleetLimits, fleet_plan
from tests.conftest import EXAMPLES, load_example
from tests.reports.page import parse

SVG = "{http://www.w3.org/2000/svg}"


def demo_plan(**changes: Any) -> dict[str, Any]:
    request = {**load_example("fleet-plan.json"), "samples": 300, **changes}
    body = fleet_plan(CatalogIn.model_validate(load_example("catalog.json")), FleetPlanIn.model_validate(request),
                      limits=FleetLimits())
    return {"id": "fp_test", "created_at": "2027-01-04T09:00:00Z", **body}


def test_the_chart_marks_the_plans_best_size_and_is_byte_identical_across_renders() -> None:
    plan = demo_plan()
    svg = fleet_figure_svg(plan)
    root = ET.fromstring(svg)
    best = next(g for g in root.iter(f"{SVG}g") if g.get("id") == "fleet-best")
    assert int(best.get("data-nodes", "-1")) == plan["best_nodes"]
    mean = next(c["present_cost_mean"] for c in plan["candidates"] if c["nodes"] == plan["best_nodes"])
    assert float(best.get("data-present-cost-mean", "nan")) == pytest.approx(mean, abs=0.005)
    assert root.get("role") == "img" and root.find(f"{SVG}title") is not None
    # The staged plan is drawn below: its stages' months and fleet sizes, as the plan gives them.
    stages = next(g for g in root.iter(f"{SVG}g") if g.get("id") == "fleet-stages")
    assert stages.get("data-months") == " ".join(str(st["month"]) for st in plan["stages"])
    assert stages.get("data-nodes") == " ".join(str(st["nodes"]) for st in plan["stages"])
    assert fleet_figure_svg(plan) == svg


def test_the_page_shows_the_stages_the_comparison_the_cash_flow_every_candidate_and_the_months() -> None:
    plan = demo_plan()
    page = parse(render_plan(plan))
    assert page.by_id("best-nodes").text.startswith(f"{plan['best_nodes']} nodes")
    assert page.by_id("staged-nodes").text.startswith(f"{plan['stages'][0]['nodes']} nodes from month 1")
    stages, comparison, cash, candidates, months = page.find_all("table")
    assert len(stages.find_all("tr")[1:]) == len(plan["stages"]) > 1
    assert [r.find_all("th")[0].text for r in comparison.find_all("tr")[1:]] == ["Staged", "One purchase now"]
    assert len(cash.find_all("tr")[1:]) == plan["horizon_months"] // 12
    assert len(candidates.find_all("tr")[1:]) == len(plan["candidates"])
    assert len(months.find_all("tr")[1:]) == plan["horizon_months"]
    values = [float(d.attrs["value"]) for d in page.find_all("data")]
    assert plan["staged"]["present_cost_mean"] in values
    text = page.text
    assert "2027-01-04 09:00 UTC" in text and "2027-01-04T09:00:00Z" not in text  # a date people read
    assert "85.0%" in text  # the usable share of owned hours, rounded
    assert "resale_fraction = 0.25" in text  # the default used, listed
    for phrase in ("not a vendor quote", "licensed engineers", "not legal advice"):
        assert phrase in text


@pytest.mark.anyio
async def test_the_stored_plan_serves_its_chart_and_page(report_client: httpx.AsyncClient) -> None:
    response = await report_client.post("/v1/fleet-plans", json={**load_example("fleet-plan.json"), "samples": 200})
    assert response.status_code == 201
    plan = response.json()
    chart = await report_client.get(plan["links"]["chart_svg"])
    assert chart.status_code == 200 and chart.headers["content-type"] == "image/svg+xml"
    assert ET.fromstring(chart.text.split("?>", 1)[1]).get("role") == "img"
    page = await report_client.get(plan["links"]["report"])
    assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
    assert "Staged owned fleet" in page.text and f"the {plan['nodes_owned']} nodes owned at fjordvik-hall" in page.text
    missing = await report_client.get("/v1/fleet-plans/fp_missing/report")
    assert missing.status_code == 404


def test_berth_plan_prints_the_page_offline() -> None:
    result = subprocess.run([sys.executable, "-m", "service.cli", "plan", str(EXAMPLES / "fleet-plan.json"),
                             "--format", "html"], capture_output=True, text=True, timeout=120, check=False)
    assert result.returncode == 0, result.stderr
    assert result.stdout.startswith("<!DOCTYPE html>")
    assert "Staged owned fleet" in result.stdout
