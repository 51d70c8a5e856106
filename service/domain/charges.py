"""Cost builders: for one venue and term, a function from the layout grid to its cost lines and
the term's own figures. `evaluate` calls them once per (venue, term); `terms` holds the formulas."""

from collections.abc import Callable

import numpy as np

from service.domain.arrays import Floats
from service.domain.campaign import Campaign
from service.domain.gravity import Transfer
from service.domain.layout import LayoutGrid
from service.domain.owning import NodeMonth, SiteEconomics
from service.domain.terms import (
    Lines,
    chargeback_lines,
    committed_lines,
    committed_share,
    data_lines,
    hourly_lines,
    new_build_lines,
    new_build_share,
)

CostBuilder = Callable[[LayoutGrid], tuple[Lines, dict[str, Floats]]]
DataBuilder = Callable[[LayoutGrid], Lines]


def data_charges(campaign: Campaign, transfer: Transfer, *, storage_per_gb_month: float | None,
                 results_egress_per_gb: float) -> DataBuilder:
    data = campaign.data
    checkpoint_tb = 0.0 if data.checkpoint_tb is None else data.checkpoint_tb

    def build(grid: LayoutGrid) -> Lines:
        return data_lines(grid, data, checkpoint_tb=checkpoint_tb, storage_per_gb_month=storage_per_gb_month,
                          transfer=transfer, results_egress_per_gb=results_egress_per_gb)
    return build


def chargeback_charges(node: NodeMonth, variable: Floats, economics: SiteEconomics,
                       data: DataBuilder) -> CostBuilder:
    per_node = economics.site.node_type.accelerators_per_node

    def build(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        lines = chargeback_lines(grid, node, accelerators_per_node=per_node,
                                 utilisation=economics.utilisation_planned,
                                 variable_per_accelerator_hour=variable) | data(grid)
        return lines, {"utilisation": np.asarray(economics.utilisation_planned).reshape(-1, 1)}
    return build


def new_build_charges(node: NodeMonth, variable: Floats, economics: SiteEconomics, campaign: Campaign,
                      data: DataBuilder) -> CostBuilder:
    site = economics.site

    def build(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        share = new_build_share(grid, depreciation_months=site.depreciation_months,
                                accelerators_per_node=site.node_type.accelerators_per_node,
                                recurrence=campaign.recurrence)
        lines = new_build_lines(grid, node, share, variable_per_accelerator_hour=variable) | data(grid)
        return lines, {"utilisation": share.utilisation, "sharing_instances": share.sharing_instances,
                       "carried_months": share.carried_months}
    return build


def hourly_charges(price: Floats, data: DataBuilder) -> CostBuilder:
    def build(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        lines = hourly_lines(grid, price_per_accelerator_hour=price) | data(grid)
        return lines, {"price_per_accelerator_hour": np.asarray(price).reshape(-1, 1)}
    return build


def committed_charges(months: int, upfront: float, price: Floats, cost_of_capital: Floats,
                      accelerators_per_node: int, campaign: Campaign, data: DataBuilder) -> CostBuilder:
    def build(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        share = committed_share(grid, months=months, upfront_fraction=upfront,
                                cost_of_capital_annual=cost_of_capital, recurrence=campaign.recurrence)
        lines = committed_lines(grid, share, months=months, accelerators_per_node=accelerators_per_node,
                                price_per_accelerator_hour=price) | data(grid)
        return lines, {"price_per_accelerator_hour": np.asarray(price).reshape(-1, 1),
                       "terms_needed": share.terms_needed, "sharing_instances": share.sharing_instances,
                       "financing_factor": share.financing_factor}
    return build
