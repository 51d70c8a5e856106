"""Fixtures shared by every suite: the demo catalog and campaigns, as plain JSON data."""

import json
from pathlib import Path
from typing import Any

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "pricing_examples"


def load_example(name: str) -> Any:
    return json.loads((EXAMPLES / name).read_text(encoding="utf-8"))


@pytest.fixture
def demo_catalog() -> dict[str, Any]:
    return load_example("catalog.json")


@pytest.fixture
def owned_wins_request() -> dict[str, Any]:
    return load_example("campaign-owned-wins.json")


@pytest.fixture
def anyio_backend() -> str:
    return "asyncio"
