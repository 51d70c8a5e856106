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
    GROWTH_COPIES,
    QUOTE_STAGES,
    Laps,
    SearchTally,
    answer_in_stages,
    per_offer,
    quote_in_stages,
    with_offer_copies,
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


def test_the_growth_catalog_is_the_demo_catalog_with_copies_of_its_first_offer(catalog: CatalogIn) -> None:
    raw = orjson.loads(CATALOG.read_bytes())
    grown = with_offer_copies(raw, 3).model_dump(mode="json")
    first = raw["offers"][0]
    assert [offer["id"] for offer in grown["offers"]] == [f"{first['id']}-{copy}" for copy in (1, 2, 3)]
    reference = CatalogIn.model_validate({**raw, "offers": [first]}).model_dump(mode="json")["offers"][0]
    assert all({**offer, "id": first["id"]} == reference for offer in grown["offers"])
    assert {k: v for k, v in grown.items() if k != "offers"} == {
        k: v for k, v in catalog.model_dump(mode="json").items() if k != "offers"}
    # Each copy is quoted as the first offer is: the same terms, the same totals.
    request = QuoteRequestIn.model_validate_json((EXAMPLES / "campaign-owned-wins.json").read_bytes())
    alone = quote(with_offer_copies(raw, 1), request)["options"]
    copied = quote(with_offer_copies(raw, 3), request)["options"]

    def rented(options: list[dict[str, Any]], venue: str) -> list[tuple[str, Any]]:
        return sorted((o["term"], o["cost"]["total"]) for o in options if o["venue"]["id"] == venue)
    assert rented(alone, f"{first['id']}-1") != []
    for copy in (1, 2, 3):
        assert rented(copied, f"{first['id']}-{copy}") == rented(alone, f"{first['id']}-1")


def test_per_offer_is_the_least_squares_line() -> None:
    assert per_offer(GROWTH_COPIES, [2.0 + 0.5 * copies for copies in GROWTH_COPIES]) == pytest.approx((0.5, 2.0))
    # Through points off a line, the ordinary least-squares line (the textbook normal equations, common
    # practice) worked by hand: slope Sxy / Sxx and
    # intercept mean y − slope × mean n for (1, 3.0), (2, 3.4), (4, 4.6), (8, 6.6): mean n 3.75, mean y
    # 4.4, Sxy = 15.0, Sxx = 28.75.
    assert per_offer((1, 2, 4, 8), (3.0, 3.4, 4.6, 6.6)) == pytest.approx((15.0 / 28.75, 4.4 - 3.75 * 15.0 / 28.75))
