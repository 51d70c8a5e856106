"""The stages that `bench_quote_stages.py` times compute what quote() and POST /v1/quotes compute: if
quote() changes its steps, the benchmark must follow, or it would time something else."""

from pathlib import Path
from typing import Any

import orjson
import pytest
from bench_quote_stages import (
    ANSWER_STAGES,
    CATALOG,
    EXAMPLES,
    QUOTE_STAGES,
    Laps,
    SearchTally,
    answer_in_stages,
    quote_in_stages,
)

from service.api.responses import OPTIONS
from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain import evaluate, lockstep
from service.domain.layout import layout_search
from service.domain.lockstep import evaluate_together
from service.errors import InvalidInput
from service.usecases.quoting import catalog_hash, quote

DEMO_CAMPAIGNS = sorted(EXAMPLES.glob("campaign-*.json"))


@pytest.fixture(scope="module")
def catalog() -> CatalogIn:
    return CatalogIn.model_validate_json(CATALOG.read_bytes())


@pytest.mark.parametrize("campaign", DEMO_CAMPAIGNS, ids=lambda path: path.stem)
def test_the_stages_make_the_quote_and_its_answer(catalog: CatalogIn, campaign: Path) -> None:
    request = QuoteRequestIn.model_validate_json(campaign.read_bytes())
    laps = Laps()
    body = quote_in_stages(catalog, request, laps)
    # Compared as encoded bytes: the same keys in the same order, NaN written alike.
    assert orjson.dumps(body, option=OPTIONS) == orjson.dumps(quote(catalog, request), option=OPTIONS)
    answer = orjson.loads(answer_in_stages(body, catalog_hash(catalog), laps))
    assert answer["id"].startswith("q_") and answer["catalog_hash"] == catalog_hash(catalog)
    assert {k: v for k, v in answer.items() if k in body} == orjson.loads(orjson.dumps(body, option=OPTIONS))
    assert tuple(laps.seconds) == (*QUOTE_STAGES, *ANSWER_STAGES)
    assert all(seconds >= 0.0 for seconds in laps.seconds.values())


def test_the_split_campaign_takes_the_split_stage(catalog: CatalogIn) -> None:
    """The split campaign has its own target (8 ms) because evaluate_with_splits adds options to it,
    which each have parts; the other demo campaigns have none."""
    for campaign in DEMO_CAMPAIGNS:
        body = quote_in_stages(catalog, QuoteRequestIn.model_validate_json(campaign.read_bytes()), Laps())
        split = [option for option in body["options"] if "parts" in option]
        assert bool(split) == (campaign.name == "campaign-split.json"), campaign.name


def test_a_request_the_catalog_cannot_answer_is_refused_as_quote_refuses_it(catalog: CatalogIn,
                                                                          owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["campaign"]["data"]["home"] = "no-such-venue"
    request = QuoteRequestIn.model_validate(owned_wins_request)
    with pytest.raises(InvalidInput) as staged:
        quote_in_stages(catalog, request, Laps())
    with pytest.raises(InvalidInput) as whole:
        quote(catalog, request)
    assert [p.field for p in staged.value.problems] == [p.field for p in whole.value.problems] == ["campaign.data.home"]


def test_the_search_tally_times_the_layout_search_and_puts_it_back(catalog: CatalogIn) -> None:
    request = QuoteRequestIn.model_validate_json((EXAMPLES / "campaign-owned-wins.json").read_bytes())
    with SearchTally() as tally:
        assert vars(evaluate)["layout_search"] is not layout_search
        assert vars(lockstep)["evaluate_together"] is not evaluate_together
        body = quote_in_stages(catalog, request, Laps())
    assert vars(evaluate)["layout_search"] is layout_search
    assert vars(lockstep)["evaluate_together"] is evaluate_together
    assert tally.seconds > 0.0
    assert orjson.dumps(body, option=OPTIONS) == orjson.dumps(quote(catalog, request), option=OPTIONS)
