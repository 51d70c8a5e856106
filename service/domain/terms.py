"""What each term charges a campaign, line by line, for every candidate layout (model.md §6-7).

Each `*_lines` function returns {item: amount} with arrays that broadcast to (S, K); the line
items are named here once and explained to people in `service.domain.explain`. Beside the lines,
each `*_cost` function gives their sum in as few whole-grid passes as the algebra allows: the
layout search prices every candidate with it, and only the chosen layout is itemised.

Every term's cost is non-decreasing in the layout's nodes, accelerators and wall clock at
non-negative prices, and a sweep relies on it to drop candidates that are never chosen
(`dominance.py`): keep it so, or change `dominance.dominance` first. A sweep prices candidates with
`compiled.py`'s kernel, which repeats the `*_cost` formulas for one cell: change both.
"""

from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import Any

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats, take_rows
from service.domain.campaign import DataPlan, Recurrence
from service.domain.finance import capital_recovery_payment, monthly_rate
from service.domain.gravity import Transfer
from service.domain.layout import LayoutGrid
from service.domain.owning import NodeMonth
from service.domain.recurrence import instances_sharing
from service.domain.units import HOURS_PER_MONTH, TB

Lines = dict[str, Floats]
GB_PER_TB = TB / 1e9  # decimal units


def _scenario(value: ArrayLike) -> Floats:
    return as_floats(value).reshape(-1, 1)


def wall_hours(grid: LayoutGrid) -> Floats:
    return grid.wall_hours


def chargeback_lines(
    grid: LayoutGrid, node: NodeMonth, *, accelerators_per_node: int,
    utilisation: ArrayLike, variable_per_accelerator_hour: ArrayLike,
) -> Lines:
    """An existing fleet charges each used accelerator-hour its share of the fixed cost at the
    planned utilisation, F / (A · 730 · u), plus the busy energy v (model.md §6)."""
    used_hours_per_node_month = accelerators_per_node * HOURS_PER_MONTH * _scenario(utilisation)
    return _owned_lines(grid.accelerator_hours / used_hours_per_node_month, node, grid,
                        variable_per_accelerator_hour)


def chargeback_cost(
    grid: LayoutGrid, node: NodeMonth, *, accelerators_per_node: int,
    utilisation: ArrayLike, variable_per_accelerator_hour: ArrayLike,
) -> Floats:
    """The sum of `chargeback_lines`: accelerator-hours × (F / (A · 730 · u) + v)."""
    return np.asarray(grid.accelerator_hours * chargeback_rate(
        node, accelerators_per_node=accelerators_per_node, utilisation=utilisation,
        variable_per_accelerator_hour=variable_per_accelerator_hour))


def chargeback_rate(node: NodeMonth, *, accelerators_per_node: int, utilisation: ArrayLike,
                    variable_per_accelerator_hour: ArrayLike) -> Floats:
    """What a chargeback costs per accelerator-hour, by scenario: F / (A · 730 · u) + v, (S, 1)."""
    used_hours_per_node_month = accelerators_per_node * HOURS_PER_MONTH * _scenario(utilisation)
    return np.asarray(_scenario(node.total) / used_hours_per_node_month + _scenario(variable_per_accelerator_hour))


def _owned_lines(node_months: Floats, node: NodeMonth, grid: LayoutGrid,
                 variable_per_accelerator_hour: ArrayLike) -> Lines:
    """Node-months of each fixed item charged to the campaign, and its busy energy."""
    return {
        "capital": node_months * _scenario(node.capital),
        "facility": node_months * _scenario(node.facility),
        "maintenance": node_months * _scenario(node.maintenance),
        "staff": node_months * _scenario(node.staff),
        "idle_energy": node_months * _scenario(node.idle_energy),
        "busy_energy": grid.accelerator_hours * _scenario(variable_per_accelerator_hour),
    }


@dataclass(frozen=True)
class NewBuildShare:
    carried_months: Floats
    sharing_instances: Floats


def new_build_share(grid: LayoutGrid, *, depreciation_months: int, recurrence: Recurrence | None) -> NewBuildShare:
    """New nodes are carried for their depreciation life (or the campaign, if longer) and their
    cost is shared by the recurring instances that fit in that life."""
    months = np.maximum(float(depreciation_months), wall_hours(grid) / HOURS_PER_MONTH)
    sharing = instances_sharing(window_months=months, wall_hours=wall_hours(grid), recurrence=recurrence)
    return NewBuildShare(months, sharing)


def new_build_utilisation(grid: LayoutGrid, share: NewBuildShare, *, accelerators_per_node: int) -> Floats:
    """The new nodes' utilisation over their life, with recurrence: the sharing instances'
    accelerator-hours over the nodes' capacity. Only the chosen layout's is reported, so the
    layout search, which prices every candidate, does not compute it."""
    capacity_hours = grid.nodes * accelerators_per_node * share.carried_months * HOURS_PER_MONTH
    return np.asarray(share.sharing_instances * grid.accelerator_hours / capacity_hours)


def new_build_lines(
    grid: LayoutGrid, node: NodeMonth, share: NewBuildShare, *, variable_per_accelerator_hour: ArrayLike,
) -> Lines:
    """Buy the layout's nodes, carry them for their life, and charge this instance its share."""
    return _owned_lines(grid.nodes * share.carried_months / share.sharing_instances, node, grid,
                        variable_per_accelerator_hour)


def new_build_cost(
    grid: LayoutGrid, node: NodeMonth, share: NewBuildShare, *, variable_per_accelerator_hour: ArrayLike,
) -> Floats:
    """The sum of `new_build_lines`: node-months × F + accelerator-hours × v."""
    node_months = grid.nodes * share.carried_months / share.sharing_instances
    return np.asarray(node_months * _scenario(node.total)
                      + grid.accelerator_hours * _scenario(variable_per_accelerator_hour))


def hourly_lines(grid: LayoutGrid, *, price_per_accelerator_hour: ArrayLike) -> Lines:
    """On demand and interruptible: the accelerator-hours used, at the hourly price. The hours
    already include the interruption overhead of the reliability model."""
    return {"compute": grid.accelerator_hours * _scenario(price_per_accelerator_hour)}


def upfront_financing_factor(*, upfront_fraction: ArrayLike, months: ArrayLike,
                             cost_of_capital_annual: ArrayLike) -> Floats:
    """Level-monthly equivalent of a fee of 1 of which a share is paid up front.

    The up-front share f ties up capital for the term, so it is spread as an annuity at the
    cost of capital: (1 − f) + f · n · (A/P, i, n) ≥ 1.
    """
    f = as_floats(upfront_fraction)
    n = as_floats(months)
    spread = capital_recovery_payment(principal=1.0, rate=monthly_rate(cost_of_capital_annual), periods=n)
    return (1.0 - f) + f * n * spread


@dataclass(frozen=True)
class CommittedShare:
    terms_needed: Floats
    sharing_instances: Floats
    financing_factor: Floats


def committed_share(
    grid: LayoutGrid, *, months: int, financing_factor: Floats, recurrence: Recurrence | None,
) -> CommittedShare:
    """A committed term is paid for whole; a campaign longer than one term takes several, and
    recurring instances that fit in the commitment share it. `financing_factor` is the term's
    `upfront_financing_factor`, per scenario ((S, 1) or (1, 1))."""
    hours = wall_hours(grid)
    # max(1, ⌈hours / term hours⌉), in place: this runs over every candidate layout.
    terms = hours / (months * HOURS_PER_MONTH)
    terms -= 1e-9
    np.maximum(np.ceil(terms, out=terms), 1.0, out=terms)
    sharing = instances_sharing(window_months=terms * months, wall_hours=hours, recurrence=recurrence)
    return CommittedShare(terms, sharing, financing_factor)


def committed_lines(
    grid: LayoutGrid, share: CommittedShare, *, months: int, accelerators_per_node: int,
    price_per_accelerator_hour: ArrayLike,
) -> Lines:
    """nodes × accelerators per node × term hours × price, paid whether used or not (model.md §7):
    whole nodes are committed even when fewer accelerators are pinned."""
    fee_per_term = grid.nodes * (accelerators_per_node * months * HOURS_PER_MONTH)
    per_fee = _scenario(price_per_accelerator_hour) * share.financing_factor / share.sharing_instances
    return {"commitment": fee_per_term * share.terms_needed * per_fee}


def data_lines(
    grid: LayoutGrid, data: DataPlan, *, checkpoint_tb: ArrayLike, storage_per_gb_month: float | None,
    transfer: Transfer, results_egress_per_gb: float,
) -> Lines:
    """The dataset's and results' costs at one venue, per decimal GB: storage of the dataset and
    kept checkpoints for the months the campaign runs (rented venues; an owned site's storage is
    in its capex), ingress of the dataset, egress at its home when it moves, egress of results."""
    dataset_gb = _scenario(data.dataset_tb) * GB_PER_TB
    lines: Lines = {}  # transfer lines do not depend on the layout: (S, 1), broadcast later
    if storage_per_gb_month is not None:
        lines["storage"] = storage_cost(grid, data, checkpoint_tb=checkpoint_tb,
                                        storage_per_gb_month=storage_per_gb_month)
    lines["ingress"] = dataset_gb * transfer.ingress_per_gb
    if transfer.moves:
        lines["egress_at_home"] = dataset_gb * transfer.egress_at_home_per_gb
    lines["egress"] = _scenario(data.results_egress_tb) * GB_PER_TB * results_egress_per_gb
    return lines


def storage_cost(grid: LayoutGrid, data: DataPlan, *, checkpoint_tb: ArrayLike,
                 storage_per_gb_month: float) -> Floats:
    """The dataset and kept checkpoints stored for the months the campaign runs: the only data
    line that depends on the layout."""
    return np.asarray(storage_per_hour(data, checkpoint_tb=checkpoint_tb, storage_per_gb_month=storage_per_gb_month)
                      * wall_hours(grid))


def storage_per_hour(data: DataPlan, *, checkpoint_tb: ArrayLike, storage_per_gb_month: float) -> Floats:
    """What storing the dataset and kept checkpoints costs per hour of wall clock, by scenario, (S, 1)."""
    stored_gb = (_scenario(data.dataset_tb) + _scenario(checkpoint_tb) * _scenario(data.checkpoints_kept)) * GB_PER_TB
    return np.asarray(stored_gb * (storage_per_gb_month / HOURS_PER_MONTH))


@dataclass(frozen=True)
class Energy:
    it_kwh: Floats
    facility_kwh: Floats
    peak_it_kw: Floats
    cooling_kw_thermal: Floats
    kgco2e: Floats


class _EnergyWhenRead(Energy):
    """An Energy whose figures are made together when one is first read: a sweep reads none unless it
    ranks by carbon, and they were an option's largest arrays (0.9 of a chunk's 6.8 KB a scenario)."""

    def __getattr__(self, name: str) -> Any:
        make = self.__dict__.get("_make")
        if make is None or name not in _ENERGY_FIGURES:
            raise AttributeError(name)
        for figure, value in make().items():
            object.__setattr__(self, figure, value)
        return self.__dict__[name]

    def at_rows(self, index: Any, scenarios: int) -> Energy:
        """These figures at some of the scenarios (`arrays.take_rows`), made together when one is read."""
        return _when_read(lambda: {name: take_rows(getattr(self, name), index, scenarios) for name in _ENERGY_FIGURES})


def _when_read(make: Callable[[], dict[str, Floats]]) -> Energy:
    """An Energy whose figures are `make()`'s, made when one is first read."""
    energy = _EnergyWhenRead.__new__(_EnergyWhenRead)
    object.__setattr__(energy, "_make", make)
    return energy


_ENERGY_FIGURES = frozenset(f.name for f in fields(Energy))


def campaign_energy(
    grid: LayoutGrid, *, idle_kw: float, peak_kw: float, load: float, pue: ArrayLike,
    grid_kgco2e_per_kwh: ArrayLike,
) -> Energy:
    """Energy of the nodes a chosen layout ((S,) arrays) holds for the wall clock, busy at `load`,
    made when first read.

    IT kWh = nodes × (idle + (peak − idle) × load) × hours; facility kWh = IT × PUE; all IT
    power becomes heat, so the cooling load is the peak IT power; carbon = facility kWh × grid
    factor. PUE or grid factor may be NaN (unknown), and so are the figures that need them.
    """
    def make() -> dict[str, Floats]:
        busy_kw = idle_kw + (peak_kw - idle_kw) * load
        it_kwh = grid.nodes * busy_kw * wall_hours(grid)
        facility = it_kwh * as_floats(pue)
        peak_it = grid.nodes * peak_kw
        return {"it_kwh": it_kwh, "facility_kwh": facility, "peak_it_kw": peak_it, "cooling_kw_thermal": peak_it,
                "kgco2e": facility * as_floats(grid_kgco2e_per_kwh)}
    return _when_read(make)
