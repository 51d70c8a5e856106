"""The layout search prices every candidate layout with a term's `cost` and itemises only the
layout it keeps, so the two forms must agree: at every candidate node count, the itemised lines
minus `cost` must be the same amount (what does not depend on the layout, such as ingress and
egress). Then the layout that is cheapest by `cost` is the cheapest by the lines people read.

Demo data only (the test catalog of test_costs, invented figures); no published check value.
"""

from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain.charges import (
    Charges,
    chargeback_charges,
    committed_charges,
    data_charges,
    hourly_charges,
    new_build_charges,
)
from service.domain.gravity import transfer
from service.domain.layout import LayoutGrid
from service.domain.owning import busy_energy_per_accelerator_hour, node_month
from service.domain.venues import site_economics
from tests.domain.builders import hardware, load, whole
from tests.domain.test_costs import CATALOG, DATA

TOKENS = np.array([2e9, 3e10, 4e11])  # three scenarios, so every (S, K) path is exercised
RECURRENCES: list[dict[str, Any] | None] = [None, {"every_months": 1, "for_months": 24}]


def grid_of(per_node: int) -> LayoutGrid:
    parameters = np.full(3, 1.3e9)
    run = load(parameters=parameters, tokens=TOKENS, runs_multiplier=np.ones(3), global_batch_tokens=np.full(3, 4e6),
               deadline_seconds=np.full(3, np.inf))
    venue = hardware(accelerators_per_node=per_node, memory_bytes=80e9,
                     sustained_flops_per_accelerator=np.full(3, 5e13),
                     intra_node_gbps=1000.0, network_gbps=np.full(3, 200.0), path_efficiency=0.9,
                     node_mtbf_hours=np.full(3, 5e4), staging_seconds=np.full(3, 3600.0))
    # One node limit per count from 1 to 40: the most each allows is a candidate of its own.
    grid, _ = whole(run, venue, node_limits=[float(n) for n in range(1, 41)])
    return grid


def every_charge(recurrence: dict[str, Any] | None) -> dict[str, Charges]:
    campaign_in: dict[str, Any] = {"name": "test-campaign", "team": "test-team", "data": DATA,
                                   "work": {"kind": "flops", "total_flops": 1e21}}
    if recurrence is not None:
        campaign_in["recurrence"] = recurrence
    catalog = CatalogIn.model_validate(CATALOG).to_domain()
    campaign, _, overrides = QuoteRequestIn.model_validate({"campaign": campaign_in}).to_domain()
    site, offer = catalog.sites[0], catalog.offers[0]
    economics = site_economics(site, catalog, overrides)
    node, variable = node_month(economics), busy_energy_per_accelerator_hour(economics)
    at_site = data_charges(campaign, transfer(site, None), storage_per_gb_month=None,
                           results_egress_per_gb=site.egress_per_gb)
    at_offer = data_charges(campaign, transfer(offer, None), storage_per_gb_month=offer.storage_per_gb_month,
                            results_egress_per_gb=offer.egress_per_gb)
    price = np.array([3.0, 2.5, 4.0]).reshape(-1, 1)
    return {
        "owned_chargeback": chargeback_charges(node, variable, economics, at_site),
        "owned_new_build": new_build_charges(node, variable, economics, campaign, at_site),
        "on_demand": hourly_charges(price, at_offer),
        "committed_36m": committed_charges(36, 0.5, price, np.array([0.06, 0.08, 0.1]), 4, campaign, at_offer),
    }


@pytest.mark.parametrize("recurrence", RECURRENCES, ids=["one-off", "monthly"])
def test_the_itemised_lines_exceed_the_layout_cost_by_the_same_amount_at_every_node_count(
    recurrence: dict[str, Any] | None,
) -> None:
    grid = grid_of(per_node=4)
    for term, charges in every_charge(recurrence).items():
        cost = np.asarray(charges.cost(grid))
        lines, _ = charges.itemise(grid)
        total = sum(np.broadcast_to(line, cost.shape) for line in lines.values())
        assert isinstance(total, np.ndarray) and total.shape == (3, 41), term
        beside = total - cost
        assert_allclose(beside, np.broadcast_to(beside[:, :1], beside.shape), rtol=0,
                        atol=1e-12 * float(np.abs(total).max()), err_msg=term)
        # …and the two forms pick the same layout in every scenario.
        assert np.array_equal(np.argmin(cost, axis=1), np.argmin(total, axis=1)), term
