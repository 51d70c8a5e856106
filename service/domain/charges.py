"""Charges: what one term at one venue costs, in the two forms the layout search needs.

`cost` prices every candidate layout of the grid, so the search can keep the cheapest; it may
leave out what only varies by scenario (such a part cannot change which layout is cheapest), and
it sums the lines in few whole-grid passes. `form` is the same cost as `compiled.py`'s kernel
computes it, for a sweep. `itemise` gives the cost lines and the term's own figures for the chosen
layout. `evaluate` builds one per (venue, term); `terms` holds the formulas.
"""

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from service.domain.arrays import Floats, as_floats
from service.domain.campaign import Campaign
from service.domain.compiled import CHARGEBACK, COMMITTED, HOURLY, NEW_BUILD, CostForm
from service.domain.gravity import Transfer
from service.domain.layout import LayoutGrid
from service.domain.owning import NodeMonth, SiteEconomics
from service.domain.recurrence import sharing_calendar
from service.domain.terms import (
    CommittedShare,
    Lines,
    NewBuildShare,
    chargeback_cost,
    chargeback_lines,
    chargeback_rate,
    committed_lines,
    committed_share,
    data_lines,
    hourly_lines,
    new_build_cost,
    new_build_lines,
    new_build_share,
    new_build_utilisation,
    storage_cost,
    storage_per_hour,
    upfront_financing_factor,
)
from service.domain.units import HOURS_PER_MONTH


@dataclass(frozen=True)
class Charges:
    cost: Callable[[LayoutGrid], Floats]
    itemise: Callable[[LayoutGrid], tuple[Lines, dict[str, Floats]]]
    form: CostForm


@dataclass(frozen=True)
class DataCharges:
    """A venue's data lines, and the part of them that depends on the layout (storage, also per
    hour of wall clock: None where the venue does not charge for it)."""

    lines: Callable[[LayoutGrid], Lines]
    layout_cost: Callable[[LayoutGrid], Floats | float]
    storage_per_hour: Floats | None


def data_charges(campaign: Campaign, transfer: Transfer, *, storage_per_gb_month: float | None,
                 results_egress_per_gb: float) -> DataCharges:
    data = campaign.data
    checkpoint_tb = 0.0 if data.checkpoint_tb is None else data.checkpoint_tb

    def lines(grid: LayoutGrid) -> Lines:
        return data_lines(grid, data, checkpoint_tb=checkpoint_tb, storage_per_gb_month=storage_per_gb_month,
                          transfer=transfer, results_egress_per_gb=results_egress_per_gb)

    # The terms of an offer price the same grid: its storage is computed once per grid.
    stored: dict[int, tuple[LayoutGrid, Floats]] = {}

    def layout_cost(grid: LayoutGrid) -> Floats | float:
        if storage_per_gb_month is None:
            return 0.0
        if id(grid) not in stored:  # the grid is kept with its cost, so its id is not reused
            stored[id(grid)] = grid, storage_cost(grid, data, checkpoint_tb=checkpoint_tb,
                                                  storage_per_gb_month=storage_per_gb_month)
        return stored[id(grid)][1]
    per_hour = None if storage_per_gb_month is None else storage_per_hour(
        data, checkpoint_tb=checkpoint_tb, storage_per_gb_month=storage_per_gb_month)
    return DataCharges(lines, layout_cost, per_hour)


def _recurring(campaign: Campaign) -> tuple[Floats | None, Floats | None]:
    """A recurring campaign's `recurrence.sharing_calendar` (None, None for one that does not recur)."""
    return (None, None) if campaign.recurrence is None else sharing_calendar(campaign.recurrence)


def chargeback_charges(node: NodeMonth, variable: Floats, economics: SiteEconomics,
                       data: DataCharges) -> Charges:
    per_node = economics.site.node_type.accelerators_per_node
    utilisation = economics.utilisation_planned

    def cost(grid: LayoutGrid) -> Floats:
        return chargeback_cost(grid, node, accelerators_per_node=per_node, utilisation=utilisation,
                               variable_per_accelerator_hour=variable)

    def itemise(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        lines = chargeback_lines(grid, node, accelerators_per_node=per_node, utilisation=utilisation,
                                 variable_per_accelerator_hour=variable) | data.lines(grid)
        return lines, {"utilisation": np.asarray(utilisation).reshape(-1, 1)}
    return Charges(cost, itemise, CostForm(CHARGEBACK, chargeback_rate(
        node, accelerators_per_node=per_node, utilisation=utilisation, variable_per_accelerator_hour=variable)))


def new_build_charges(node: NodeMonth, variable: Floats, economics: SiteEconomics, campaign: Campaign,
                      data: DataCharges) -> Charges:
    site = economics.site

    def share_of(grid: LayoutGrid) -> NewBuildShare:
        return new_build_share(grid, depreciation_months=site.depreciation_months, recurrence=campaign.recurrence)

    def cost(grid: LayoutGrid) -> Floats:
        return new_build_cost(grid, node, share_of(grid), variable_per_accelerator_hour=variable)

    def itemise(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        share = share_of(grid)
        lines = new_build_lines(grid, node, share, variable_per_accelerator_hour=variable) | data.lines(grid)
        utilisation = new_build_utilisation(grid, share, accelerators_per_node=site.node_type.accelerators_per_node)
        return lines, {"utilisation": utilisation, "sharing_instances": share.sharing_instances,
                       "carried_months": share.carried_months}
    return Charges(cost, itemise, CostForm(NEW_BUILD, as_floats(variable).reshape(-1, 1),
                                           fixed=as_floats(node.total).reshape(-1, 1),
                                           months=float(site.depreciation_months), recurring=_recurring(campaign)))


def hourly_charges(price: Floats, data: DataCharges) -> Charges:
    def cost(grid: LayoutGrid) -> Floats:
        return np.asarray(hourly_lines(grid, price_per_accelerator_hour=price)["compute"] + data.layout_cost(grid))

    def itemise(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        lines = hourly_lines(grid, price_per_accelerator_hour=price) | data.lines(grid)
        return lines, {"price_per_accelerator_hour": np.asarray(price).reshape(-1, 1)}
    return Charges(cost, itemise, CostForm(HOURLY, as_floats(price).reshape(-1, 1), storage=data.storage_per_hour))


def committed_charges(months: int, upfront: float, price: Floats, cost_of_capital: Floats,
                      accelerators_per_node: int, campaign: Campaign, data: DataCharges) -> Charges:
    factor = upfront_financing_factor(upfront_fraction=upfront, months=months,
                                      cost_of_capital_annual=as_floats(cost_of_capital).reshape(-1, 1))

    def commitment(grid: LayoutGrid) -> tuple[Lines, CommittedShare]:
        share = committed_share(grid, months=months, financing_factor=factor, recurrence=campaign.recurrence)
        return committed_lines(grid, share, months=months, accelerators_per_node=accelerators_per_node,
                               price_per_accelerator_hour=price), share

    def cost(grid: LayoutGrid) -> Floats:
        return np.asarray(commitment(grid)[0]["commitment"] + data.layout_cost(grid))

    def itemise(grid: LayoutGrid) -> tuple[Lines, dict[str, Floats]]:
        lines, share = commitment(grid)
        return lines | data.lines(grid), {
            "price_per_accelerator_hour": np.asarray(price).reshape(-1, 1), "terms_needed": share.terms_needed,
            "sharing_instances": share.sharing_instances, "financing_factor": share.financing_factor,
            "upfront_fraction": np.full((1, 1), upfront)}
    return Charges(cost, itemise, CostForm(
        COMMITTED, np.asarray(as_floats(price).reshape(-1, 1) * factor), months=float(months),
        fee_per_node=accelerators_per_node * months * HOURS_PER_MONTH, storage=data.storage_per_hour,
        recurring=_recurring(campaign)))
