"""Probes answer without touching anything external."""

import httpx
import pytest

from service.api.app import create_app
from service.config import Settings


@pytest.mark.anyio
async def test_healthz_answers_ok() -> None:
    app = create_app(Settings(database_url="sqlite://"))
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://test") as client:
        response = await client.get("/healthz")
    assert response.status_code == 200
    assert response.json() == {"status": "ok"}
