"""The floor app that `bench_quotes.py` times: each floor route answers a quote request with a real
quote document, doing only its part of what POST /v1/quotes does."""

from pathlib import Path
from typing import Any

import httpx
import pytest
from floor_app import create_floor_app, create_floor_app_from_environment

from service.api.app import prepare
from service.config import Settings


@pytest.mark.anyio
async def test_each_floor_route_does_its_part_of_a_quote(tmp_path: Path, owned_wins_request: dict[str, Any]) -> None:
    app = create_floor_app(Settings(database_url=f"sqlite:///{tmp_path / 'floor.db'}"))
    prepare(app)
    try:
        async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://berth.test") as http:
            quoted = await http.post("/v1/quotes", json=owned_wins_request)
            validated = [await http.post("/floor/validated", json=owned_wins_request) for _ in range(2)]
            stored = await http.post("/floor/stored", json=owned_wins_request)
            computed = await http.post("/floor/computed", json=owned_wins_request)
            documented = [await http.post("/floor/documented", json=owned_wins_request) for _ in range(2)]
            bad = await http.post("/floor/validated", json={"campaign": {}})
            assert [r.status_code for r in (quoted, *validated, stored, computed, *documented)] == [201] * 7
            assert bad.status_code == 422  # the body is validated as a quote request
            expected = quoted.json()["recommendation"]
            for answer in (*validated, stored, computed, *documented):
                assert answer.json()["recommendation"] == expected
            # The canned document is answered as it is; the stored one is a new quote, readable back.
            assert validated[0].json() == validated[1].json()
            assert stored.json()["id"] != validated[0].json()["id"]
            assert (await http.get(f"/v1/quotes/{stored.json()['id']}")).json() == stored.json()
            assert (await http.get(f"/v1/quotes/{computed.json()['id']}")).status_code == 404
            # Documented: each request's own document, from the one evaluation kept, stored like a quote.
            assert documented[0].json()["id"] != documented[1].json()["id"]
            for answer in documented:
                assert (await http.get(f"/v1/quotes/{answer.json()['id']}")).json() == answer.json()
                assert {k: v for k, v in answer.json().items() if k not in ("id", "created_at")} == {
                    k: v for k, v in quoted.json().items() if k not in ("id", "created_at")}
    finally:
        app.state.storage.dispose()


def test_each_worker_builds_the_floor_app_from_the_environment(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """With --workers N, each worker process calls this factory by name: it must read the settings the
    parent exported and add the floor routes."""
    database = f"sqlite:///{tmp_path / 'floor.db'}"
    monkeypatch.setenv("BERTH_DATABASE_URL", database)
    app = create_floor_app_from_environment()
    try:
        assert app.state.settings.database_url == database
        paths = {getattr(route, "path", None) for route in app.routes}
        assert {"/floor/validated", "/floor/stored", "/floor/computed", "/floor/documented"} <= paths
    finally:
        app.state.storage.dispose()
