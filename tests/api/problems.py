"""The check every API test makes of an error: an RFC 9457 problem of the expected status."""

from typing import Any

import httpx

PROBLEM = "application/problem+json"


def problem_of(response: httpx.Response, status: int) -> dict[str, Any]:
    """The problem body, after checking the status, the media type and the required members."""
    assert response.status_code == status, response.text
    assert response.headers["content-type"] == PROBLEM
    body: dict[str, Any] = response.json()
    assert body["status"] == status
    assert body["type"] and body["title"] and body["detail"]
    return body
