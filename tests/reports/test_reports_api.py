"""The three report endpoints over HTTP: each renders the stored quote (the same bytes as rendering
the JSON that GET /v1/quotes/{id} returns), with the right media type; an unknown quote is a 404
problem."""

import csv
import io
import xml.etree.ElementTree as ET

import httpx
import pytest

from service.reports.breakeven_chart import breakeven_svg
from service.reports.html import render_report
from tests.conftest import load_example

PROBLEM = "application/problem+json"


async def stored_quote(client: httpx.AsyncClient) -> dict[str, object]:
    response = await client.post("/v1/quotes", json=load_example("campaign-owned-wins.json"))
    assert response.status_code == 201, response.text
    body: dict[str, object] = response.json()
    return body


@pytest.mark.anyio
async def test_the_report_is_the_stored_quote_rendered(report_client: httpx.AsyncClient) -> None:
    quote = await stored_quote(report_client)
    response = await report_client.get(f"/v1/quotes/{quote['id']}/report")
    assert response.status_code == 200
    assert response.headers["content-type"] == "text/html; charset=utf-8"
    stored = (await report_client.get(f"/v1/quotes/{quote['id']}")).json()
    assert response.text == render_report(stored)
    assert f'<dd id="quote-id">{quote["id"]}</dd>' in response.text
    assert f"fjordvik-hall/owned_chargeback costs {stored['options'][0]['cost']['total']:,.0f} EUR" in response.text


@pytest.mark.anyio
async def test_the_breakeven_svg_is_served_as_svg(report_client: httpx.AsyncClient) -> None:
    quote = await stored_quote(report_client)
    response = await report_client.get(f"/v1/quotes/{quote['id']}/breakeven.svg")
    assert response.status_code == 200
    assert response.headers["content-type"] == "image/svg+xml"
    stored = (await report_client.get(f"/v1/quotes/{quote['id']}")).json()
    assert response.content == breakeven_svg(stored).encode("utf-8")
    root = ET.fromstring(response.content)
    marks = {g.attrib["id"]: float(g.attrib["data-utilisation"]) for g in root.iter("{http://www.w3.org/2000/svg}g")
             if g.attrib.get("id", "").startswith("breakeven-")}
    rows = {f"breakeven-{r['site']}-{r['offer']}-{r['term']}": r["utilisation"] for r in stored["breakeven"]}
    assert marks and all(rows[gid] == value for gid, value in marks.items())


@pytest.mark.anyio
async def test_the_options_csv_is_served_as_an_attachment(report_client: httpx.AsyncClient) -> None:
    quote = await stored_quote(report_client)
    response = await report_client.get(f"/v1/quotes/{quote['id']}/options.csv")
    assert response.status_code == 200
    assert response.headers["content-type"] == "text/csv; charset=utf-8"
    assert response.headers["content-disposition"] == f'attachment; filename="{quote["id"]}-options.csv"'
    rows = list(csv.DictReader(io.StringIO(response.text, newline="")))
    options = quote["options"]
    assert isinstance(options, list)
    assert [float(r["total"]) for r in rows] == [o["cost"]["total"] for o in options]


@pytest.mark.anyio
@pytest.mark.parametrize("suffix", ["report", "breakeven.svg", "options.csv"])
async def test_an_unknown_quote_is_a_404_problem(report_client: httpx.AsyncClient, suffix: str) -> None:
    response = await report_client.get(f"/v1/quotes/q_nope/{suffix}")
    assert response.status_code == 404
    assert response.headers["content-type"] == PROBLEM
    problem = response.json()
    assert problem["status"] == 404 and "q_nope" in problem["detail"]


@pytest.mark.anyio
async def test_the_openapi_document_lists_the_report_media_types(report_client: httpx.AsyncClient) -> None:
    paths = (await report_client.get("/openapi.json")).json()["paths"]
    for path, media in (("/v1/quotes/{quote_id}/report", "text/html"),
                        ("/v1/quotes/{quote_id}/breakeven.svg", "image/svg+xml"),
                        ("/v1/quotes/{quote_id}/options.csv", "text/csv")):
        responses = paths[path]["get"]["responses"]
        assert media in responses["200"]["content"], path
        assert PROBLEM in responses["404"]["content"], path
