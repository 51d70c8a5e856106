"""A quote request is validated field by field (api.md); what only the catalog can answer
(unknown codes, groups, node types, venues) is checked against it."""

from typing import Any

import pytest

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.errors import InvalidInput
from service.usecases.loading import validate
from service.usecases.quoting import quote, request_problems


def problems_of(data: dict[str, Any]) -> dict[str, str]:
    with pytest.raises(InvalidInput) as caught:
        validate(QuoteRequestIn, data, source="request")
    return {p.field: p.reason for p in caught.value.problems}


def test_the_demo_request_is_valid_and_fills_defaults(owned_wins_request: dict[str, Any]) -> None:
    request = validate(QuoteRequestIn, owned_wins_request, source="request")
    assert request.options.utilisation_basis == "model"
    assert request.campaign.parallelism == "auto"
    assert "interruptible" in request.options.terms


@pytest.mark.parametrize(("data", "found"), [("not json", "a str"), ([1, 2], "a list"), (None, "nothing")])
def test_a_document_that_is_not_an_object_says_so(data: Any, found: str) -> None:
    with pytest.raises(InvalidInput) as caught:
        validate(QuoteRequestIn, data, source="request.json")
    assert [(p.field, p.reason) for p in caught.value.problems] == [
        ("(body)", f"expected a JSON or YAML object, found {found}")]


def test_a_field_that_should_be_an_object_says_so_without_naming_a_class(owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["campaign"] = "support-assistant"
    assert problems_of(owned_wins_request) == {"campaign": "Input should be an object"}


def test_an_unknown_work_field_is_named(owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["campaign"]["work"]["paramters"] = 7e9
    assert "campaign.work.paramters" in problems_of(owned_wins_request)


def test_an_unknown_work_kind_is_named(owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["campaign"]["work"]["kind"] = "diffusion"
    assert "campaign.work" in problems_of(owned_wins_request)


def test_a_partial_architecture_is_rejected(owned_wins_request: dict[str, Any]) -> None:
    del owned_wins_request["campaign"]["work"]["d_model"]
    assert "give all three" in problems_of(owned_wins_request)["campaign.work"]


def test_a_negative_deadline_is_rejected(owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["campaign"]["deadline_days"] = -1
    assert "campaign.deadline_days" in problems_of(owned_wins_request)


def test_an_unknown_term_is_rejected(owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["options"] = {"terms": ["spot"]}
    assert "options.terms.0" in problems_of(owned_wins_request)


def test_a_utilisation_override_outside_zero_to_one_is_rejected(owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["overrides"] = {"utilisation": 1.5}
    assert "overrides.utilisation" in problems_of(owned_wins_request)


def test_unknown_jurisdictions_and_groups_are_named_against_the_catalog(
    demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    # pycountry (ISO 3166-1 alpha-2) is the reference for valid codes: "DE" is one, "QQ" is not.
    owned_wins_request["campaign"]["data"]["allowed_jurisdictions"] = ["DE", "QQ", "EEA", "NORDICS"]
    catalog = validate(CatalogIn, demo_catalog, source="catalog")
    request = validate(QuoteRequestIn, owned_wins_request, source="request")
    problems = {p.field: p.reason for p in request_problems(catalog, request)}
    assert set(problems) == {"campaign.data.allowed_jurisdictions.1", "campaign.data.allowed_jurisdictions.3"}
    assert "'QQ'" in problems["campaign.data.allowed_jurisdictions.1"]
    with pytest.raises(InvalidInput):
        quote(catalog, request)


def test_an_unknown_reference_node_type_is_named(demo_catalog: dict[str, Any]) -> None:
    data = {"campaign": {"name": "m", "team": "t", "work": {
        "kind": "measured", "reference_node_type": "acc-x", "samples": 1e9,
        "samples_per_second_per_accelerator": 100}}}
    catalog = validate(CatalogIn, demo_catalog, source="catalog")
    request = validate(QuoteRequestIn, data, source="request")
    assert [p.field for p in request_problems(catalog, request)] == ["campaign.work.reference_node_type"]


def test_per_venue_overrides_name_an_unknown_venue_or_field(demo_catalog: dict[str, Any],
                                                            owned_wins_request: dict[str, Any]) -> None:
    owned_wins_request["overrides"] = {"sites": {"fjordvik-hall": {"sunshine": 1.0, "pue": 0.5}},
                                       "offers": {"nimbrel-ardvolly-a88": {"electricity_price_per_kwh": 0.1}}}
    found = problems_of(owned_wins_request)
    assert set(found) == {"overrides.sites.fjordvik-hall.sunshine", "overrides.sites.fjordvik-hall.pue",
                          "overrides.offers.nimbrel-ardvolly-a88.electricity_price_per_kwh"}
    owned_wins_request["overrides"] = {"sites": {"nowhere": {"pue": 1.2}, "fjordvik-hall": {"pue": 1.2}},
                                       "offers": {"fjordvik-hall": {"rented_price_factor": 0.9}}}
    catalog = validate(CatalogIn, demo_catalog, source="catalog")
    request = validate(QuoteRequestIn, owned_wins_request, source="request")
    problems = {p.field: p.reason for p in request_problems(catalog, request)}
    assert set(problems) == {"overrides.sites.nowhere", "overrides.offers.fjordvik-hall"}
    assert "no owned site 'nowhere'" in problems["overrides.sites.nowhere"]
    assert "no rental offer 'fjordvik-hall'" in problems["overrides.offers.fjordvik-hall"]
