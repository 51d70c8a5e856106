"""The quote's economics fields of api.md ("The quote response": cost, cash_flow, breakeven, the
request's options.owned_cost_view) and the catalog's facility.allocate are in the OpenAPI schema."""

from typing import Any

from fastapi import FastAPI


def properties(schemas: dict[str, Any], name: str) -> set[str]:
    return set(schemas[name]["properties"])


def test_the_api_md_economics_fields_are_in_the_openapi_schema(app: FastAPI) -> None:
    schemas = app.openapi()["components"]["schemas"]
    cost = properties(schemas, "Cost")
    assert {"total", "per_instance_total", "programme_total", "npv", "per_accelerator_hour", "view", "full_total",
            "incremental_total", "lines"} <= cost
    assert schemas["Cost"]["properties"]["view"]["enum"] == ["full", "incremental"]
    assert {"item", "amount", "incremental_amount", "basis"} <= properties(schemas, "CostLine")
    assert "cash_flow" in properties(schemas, "Option")
    assert {"year", "capital", "operating", "rent", "total"} <= properties(schemas, "CashFlowYear")
    assert {"site", "offer", "term", "rented_per_accelerator_hour", "rented_listed_per_accelerator_hour",
            "conversion", "conversion_basis", "owned_fixed_per_month", "owned_variable_per_accelerator_hour",
            "utilisation", "accelerator_hours_per_year", "campaigns_per_year", "payback_months", "payback_reason",
            "payback_basis"} <= properties(schemas, "BreakEvenRow")
    assert {"views_agree", "other_view"} <= properties(schemas, "Recommendation")
    request_options = next(schema for name, schema in schemas.items() if name.startswith("OptionsIn"))
    assert request_options["properties"]["owned_cost_view"]["enum"] == ["full", "incremental"]
    hall = next(schema for name, schema in schemas.items() if name.startswith("OwnedHallIn"))
    assert hall["properties"]["allocate"]["enum"] == ["installed", "capacity"]
