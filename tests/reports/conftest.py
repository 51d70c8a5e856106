"""Quote documents for the report tests, computed offline from the demo catalog and the example
campaigns exactly as `berth quote --format json` builds them (with a fixed id and time), and the app
on a temporary SQLite file with an httpx client talking to it in-process."""

import copy
import functools
from collections.abc import AsyncIterator, Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi import FastAPI

from service.api.app import create_app, prepare
from service.config import Settings
from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.usecases.quoting import catalog_hash, envelope, quote
from tests.conftest import EXAMPLES, load_example

Json = dict[str, Any]
CREATED = datetime(2027, 1, 4, 9, 0, tzinfo=UTC)
EXAMPLE_CAMPAIGNS = ("owned-wins", "split", "residency-blocked", "recurring", "renting-wins")


@functools.cache
def _catalog() -> CatalogIn:
    return CatalogIn.model_validate(load_example("catalog.json"))


@functools.cache
def _document(name: str) -> Json:
    request = QuoteRequestIn.model_validate(load_example(f"campaign-{name}.json"))
    return envelope(quote(_catalog(), request), catalog_hash=catalog_hash(_catalog()),
                    quote_id=f"q_test_{name.replace('-', '_')}", catalog_id="c_demo", created_at=CREATED)


def offline_document(name: str) -> Json:
    """The quote document of pricing_examples/campaign-<name>.json (a fresh copy each call)."""
    return copy.deepcopy(_document(name))


def document_for(request: Json) -> Json:
    """The quote document of any request against the demo catalog."""
    validated = QuoteRequestIn.model_validate(request)
    return envelope(quote(_catalog(), validated), catalog_hash=catalog_hash(_catalog()), quote_id="q_test_custom",
                    catalog_id="c_demo", created_at=CREATED)


@pytest.fixture(params=EXAMPLE_CAMPAIGNS)
def any_document(request: pytest.FixtureRequest) -> Json:
    return offline_document(str(request.param))


@pytest.fixture
def catalog_path() -> Path:
    return EXAMPLES / "catalog.json"


@pytest.fixture
def report_app(tmp_path: Path) -> Iterator[FastAPI]:
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'berth.db'}", load_demo_catalog=True)
    application = create_app(settings)
    prepare(application)  # ASGITransport does not run the lifespan
    yield application
    application.state.storage.dispose()


@pytest.fixture
async def report_client(report_app: FastAPI) -> AsyncIterator[httpx.AsyncClient]:
    transport = httpx.ASGITransport(app=report_app)
    async with httpx.AsyncClient(transport=transport, base_url="http://berth.test") as http:
        yield http
