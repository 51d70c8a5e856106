"""Leaner answers and listings: `?view=summary` cuts the recommendation and one row per option out of
the stored document (every layout field passes through), `?view=full` is the document as stored,
answers over 1 KB are gzipped for clients that accept it; the quote list names the recommended option,
its programme total and currency; sweeps and fleet plans are listed, paginated, newest first."""

import copy
import gzip
import json
from typing import Any

import httpx
import pytest

from service.contract.answers import QuoteSummaryView
from service.contract.views import summary_view
from tests.api.conftest import FakeClock
from tests.conftest import load_example

pytestmark = pytest.mark.anyio


async def create(client: httpx.AsyncClient, request: dict[str, Any], **params: str) -> httpx.Response:
    response = await client.post("/v1/quotes", json=request, params=params)
    assert response.status_code == 201, response.text
    return response


async def test_the_summary_view_is_a_fifth_of_the_full_document_and_keeps_what_a_portal_shows(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    full = (await create(client, owned_wins_request)).json()
    summary = (await client.get(f"/v1/quotes/{full['id']}", params={"view": "summary"})).json()
    QuoteSummaryView.model_validate(summary)
    assert len(json.dumps(summary)) < len(json.dumps(full)) / 4
    assert summary["recommendation"] == full["recommendation"]
    assert summary["cautions"] == full["cautions"] and summary["cautions"]
    assert [(o["venue"], o["term"], o["rank"], o["feasible"], o["reasons"], o["layout"]) for o in summary["options"]] \
        == [(o["venue"], o["term"], o["rank"], o["feasible"], o["reasons"], o["layout"]) for o in full["options"]]
    for row, option in zip(summary["options"], full["options"], strict=True):
        assert row["cost"]["total"] == option["cost"]["total"]
        assert row["wall_clock_days"] == option["timing"]["wall_clock_days"]
        assert "lines" not in row["cost"]
    assert [(r["site"], r["offer"], r["term"], r["utilisation"], r["payback_months"]) for r in summary["breakeven"]] \
        == [(r["site"], r["offer"], r["term"], r["utilisation"], r["payback_months"]) for r in full["breakeven"]]
    assert (await client.get(f"/v1/quotes/{full['id']}", params={"view": "full"})).json() == full
    assert (await client.get(f"/v1/quotes/{full['id']}")).json() == full  # full stays the default


async def test_a_quote_can_be_created_with_the_summary_view_and_is_stored_whole(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    created = (await create(client, owned_wins_request, view="summary")).json()
    assert created["view"] == "summary" and "assumptions" not in created
    stored = (await client.get(f"/v1/quotes/{created['id']}")).json()
    assert stored["assumptions"] and summary_view(stored) == created
    bad = await client.get(f"/v1/quotes/{created['id']}", params={"view": "brief"})
    assert bad.status_code == 422 and bad.json()["errors"][0]["field"] == "query.view"


def test_layout_fields_the_document_gains_pass_through_the_summary(owned_wins_request: dict[str, Any]) -> None:
    """Issue 15 adds tensor, pipeline, data, ZeRO stage, micro-batch, bubble fraction and decided_by to
    each layout, and economics fields may add cost totals: the summary carries them without a change."""
    document = {"id": "q_x", "currency": "EUR", "request": {"campaign": {"name": "n", "team": "t"}},
                "options": [{"rank": 1, "venue": {"kind": "owned", "id": "s", "jurisdiction": "NO"}, "term": "t",
                             "feasible": True, "reasons": [],
                             "layout": {"nodes": 2, "tensor": 8, "pipeline": 2, "data": 1, "zero_stage": 1,
                                        "micro_batch": 1, "pipeline_bubble_fraction": 0.1, "decided_by": "memory"},
                             "timing": {"wall_clock_days": 3.0, "accelerator_hours": 10.0},
                             "cost": {"currency": "EUR", "total": 5.0, "programme_total": 50.0, "npv": 45.0,
                                      "lines": [{"item": "x", "amount": 5.0, "basis": ""}]}}],
                "recommendation": {"option_index": 0}, "breakeven": [], "cautions": ["c"]}
    [row] = summary_view(document)["options"]
    assert row["layout"] == document["options"][0]["layout"]
    assert row["cost"] == {"currency": "EUR", "total": 5.0, "programme_total": 50.0, "npv": 45.0}


async def test_large_answers_are_gzipped_when_the_client_accepts_it(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    quote_id = (await create(client, owned_wins_request)).json()["id"]
    async with client.stream("GET", f"/v1/quotes/{quote_id}", headers={"accept-encoding": "gzip"}) as response:
        raw = b"".join([part async for part in response.aiter_raw()])
    assert response.headers["content-encoding"] == "gzip"
    document = json.loads(gzip.decompress(raw))
    assert document["id"] == quote_id
    assert len(raw) < len(json.dumps(document)) / 4
    async with client.stream("GET", f"/v1/quotes/{quote_id}", headers={"accept-encoding": "identity"}) as plain:
        assert "content-encoding" not in plain.headers
    async with client.stream("GET", "/healthz", headers={"accept-encoding": "gzip"}) as small:
        assert "content-encoding" not in small.headers  # under 1 KB: sent as it is
    csv = await client.get(f"/v1/quotes/{quote_id}/options.csv", headers={"accept-encoding": "gzip"})
    assert csv.headers["content-encoding"] == "gzip" and csv.text.startswith("rank,")  # streamed, too
    head = await client.head(f"/v1/quotes/{quote_id}", headers={"accept-encoding": "gzip"})
    assert (head.headers["content-encoding"], head.headers["content-length"]) == ("gzip", str(len(raw)))


async def test_the_quote_list_names_the_recommended_option_its_programme_total_and_currency(
    client: httpx.AsyncClient, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    created = (await create(client, owned_wins_request)).json()
    clock.advance(seconds=1)
    blocked = copy.deepcopy(owned_wins_request)
    blocked["campaign"]["data"]["allowed_jurisdictions"] = ["CH"]
    await create(client, blocked)
    items = (await client.get("/v1/quotes")).json()["items"]
    best = created["options"][created["recommendation"]["option_index"]]
    assert [(i["recommended_option"], i["programme_total"], i["currency"]) for i in items] == [
        (None, None, "EUR"),  # nowhere allowed: nothing recommended
        (f"{best['venue']['id']}/{best['term']}", best["cost"]["total"], "EUR")]


async def test_sweeps_are_listed_newest_first_in_pages(client: httpx.AsyncClient, clock: FakeClock,
                                                       owned_wins_request: dict[str, Any]) -> None:
    ids = []
    for price in (0.1, 0.2, 0.3):
        clock.advance(seconds=1)
        sweep = {"base": owned_wins_request, "grid": {"overrides.electricity_price_per_kwh": [price]}}
        response = await client.post("/v1/sweeps", json=sweep)
        assert response.status_code == 201, response.text
        ids.append(response.json()["id"])
    first = (await client.get("/v1/sweeps", params={"limit": 2})).json()
    assert [i["id"] for i in first["items"]] == ids[::-1][:2]
    assert all(i["status"] == "done" and "result" not in i for i in first["items"])
    assert first["items"][0]["links"]["self"] == f"/v1/sweeps/{ids[2]}"
    rest = (await client.get("/v1/sweeps", params={"limit": 2, "cursor": first["next_cursor"]})).json()
    assert ([i["id"] for i in rest["items"]], rest["next_cursor"]) == ([ids[0]], None)


async def test_fleet_plans_are_listed_newest_first_in_pages(client: httpx.AsyncClient, clock: FakeClock) -> None:
    plan = load_example("fleet-plan.json")
    plan.update({"samples": 40, "horizon_months": 12, "candidate_nodes": {"min": 0, "max": 16, "step": 4}})
    ids = []
    for _ in range(3):
        clock.advance(seconds=1)
        response = await client.post("/v1/fleet-plans", json=plan)
        assert response.status_code == 201, response.text
        ids.append(response.json()["id"])
    first = (await client.get("/v1/fleet-plans", params={"limit": 2})).json()
    assert [i["id"] for i in first["items"]] == ids[::-1][:2]
    item = first["items"][0]
    stored = (await client.get(f"/v1/fleet-plans/{ids[2]}")).json()
    assert (item["site"], item["offer"], item["term"], item["best_nodes"], item["currency"]) == \
        (stored["site"], stored["offer"], stored["term"], stored["best_nodes"], stored["currency"])
    rest = (await client.get("/v1/fleet-plans", params={"limit": 2, "cursor": first["next_cursor"]})).json()
    assert ([i["id"] for i in rest["items"]], rest["next_cursor"]) == ([ids[0]], None)
