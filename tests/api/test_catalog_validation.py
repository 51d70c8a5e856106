"""A catalog is validated field by field, and every problem names its field (catalog.md)."""

import copy
from typing import Any

import pytest

from service.contract.catalog import CatalogIn
from service.errors import InvalidInput
from service.usecases.loading import validate


def problems_of(data: dict[str, Any]) -> dict[str, str]:
    with pytest.raises(InvalidInput) as caught:
        validate(CatalogIn, data, source="catalog")
    return {p.field: p.reason for p in caught.value.problems}


def test_the_demo_catalog_is_valid(demo_catalog: dict[str, Any]) -> None:
    catalog = validate(CatalogIn, demo_catalog, source="catalog").to_domain()
    assert {s.id for s in catalog.sites} == {"fjordvik-hall", "rhine-campus"}
    assert catalog.sites[0].node_type.accelerator.id == "acc-a88"


def test_a_catalog_is_made_into_its_domain_form_once(demo_catalog: dict[str, Any]) -> None:
    """A validated catalog is frozen, so its domain form is made once and shared by the quotes against it;
    it is the form a fresh validation makes, and the catalog still compares, dumps and copies by its fields."""
    catalog, again = CatalogIn.model_validate(demo_catalog), CatalogIn.model_validate(copy.deepcopy(demo_catalog))
    made = catalog.to_domain()
    assert catalog.to_domain() is made and again.to_domain() is not made
    assert made == again.to_domain()
    fresh = CatalogIn.model_validate(demo_catalog)  # its domain form not made yet
    assert catalog == fresh and catalog.model_dump() == fresh.model_dump()
    assert catalog.model_copy(update={"name": "another"}).to_domain().name == "another"


def test_an_unknown_field_is_rejected_by_name(demo_catalog: dict[str, Any]) -> None:
    demo_catalog["sites"][0]["electricity_price_per_kw"] = 0.1
    assert "sites.0.electricity_price_per_kw" in problems_of(demo_catalog)


def test_zero_or_negative_counts_are_named(demo_catalog: dict[str, Any]) -> None:
    demo_catalog["node_types"][0]["accelerators_per_node"] = 0
    demo_catalog["sites"][1]["nodes_owned"] = -3
    problems = problems_of(demo_catalog)
    assert "greater than 0" in problems["node_types.0.accelerators_per_node"]
    assert "greater than or equal to 0" in problems["sites.1.nodes_owned"]


@pytest.mark.parametrize("value", [0.0, -0.2, 1.01])
def test_utilisation_outside_zero_to_one_is_rejected(demo_catalog: dict[str, Any], value: float) -> None:
    demo_catalog["accelerators"][0]["utilisation"] = value
    assert "accelerators.0.utilisation" in problems_of(demo_catalog)


def test_an_unknown_node_type_reference_is_named(demo_catalog: dict[str, Any]) -> None:
    demo_catalog["offers"][2]["node_type"] = "acc999-x4"
    assert problems_of(demo_catalog) == {"offers.2.node_type": "unknown node type 'acc999-x4'"}


def test_duplicate_ids_are_named(demo_catalog: dict[str, Any]) -> None:
    demo_catalog["offers"].append(copy.deepcopy(demo_catalog["offers"][0]))
    assert "appears 2 times" in problems_of(demo_catalog)["offers"]


def test_several_reference_problems_are_all_reported(demo_catalog: dict[str, Any]) -> None:
    demo_catalog["node_types"][0]["accelerator"] = "acc-missing"
    demo_catalog["sites"][0]["node_type"] = "nowhere"
    assert set(problems_of(demo_catalog)) == {"node_types.0.accelerator", "sites.0.node_type"}


def test_an_unknown_country_code_is_rejected(demo_catalog: dict[str, Any]) -> None:
    # pycountry (ISO 3166-1) is the reference: "XK" is a user-assigned code, not in the standard.
    demo_catalog["sites"][0]["jurisdiction"] = "XK"
    assert "ISO 3166-1" in problems_of(demo_catalog)["sites.0.jurisdiction"]


def test_an_unknown_currency_is_rejected(demo_catalog: dict[str, Any]) -> None:
    # ISO 4217 (pycountry): "EUX" is not a currency.
    demo_catalog["currency"] = "EUX"
    assert "ISO 4217" in problems_of(demo_catalog)["currency"]


def test_idle_power_above_peak_is_rejected(demo_catalog: dict[str, Any]) -> None:
    demo_catalog["node_types"][1]["power_kw_idle"] = 20.0
    assert "power_kw_idle" in problems_of(demo_catalog)["node_types.1"]


def test_an_offer_with_no_term_is_rejected(demo_catalog: dict[str, Any]) -> None:
    offer = demo_catalog["offers"][0]
    del offer["on_demand_per_accelerator_hour"], offer["interruptible"]
    offer["committed"] = []
    assert "at least one" in problems_of(demo_catalog)["offers.0"]
