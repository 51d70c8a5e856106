"""Revoking every key locks the service; it does not fall back to local mode."""

import httpx
import pytest
from fastapi import FastAPI

from service.usecases.access import issue_key, revoke_key
from tests.api.conftest import START

pytestmark = pytest.mark.anyio


async def test_with_every_key_revoked_loopback_callers_still_need_a_key(app: FastAPI,
                                                                       client: httpx.AsyncClient) -> None:
    stored, _ = issue_key(app.state.storage, role="admin", team="platform", now=START)
    revoke_key(app.state.storage, stored.id, now=START)
    app.state.local_mode._checked = float("-inf")  # look at the key table now, not in 5 s
    response = await client.get("/v1/catalogs")
    assert response.status_code == 401
    assert response.headers["www-authenticate"].startswith("Bearer")
