"""Owning: the monthly cost of a node on an owned site, energy and cooling (model.md §6)."""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.catalog import Colocation, OwnedHall, Site
from service.domain.finance import capital_recovery_payment, monthly_rate
from service.domain.units import HOURS_PER_MONTH, KW_PER_TON_OF_REFRIGERATION, MONTHS_PER_YEAR


@dataclass(frozen=True)
class SiteEconomics:
    """A site's figures after request overrides; arrays broadcast over scenarios."""

    site: Site
    capex_per_node: Floats
    cost_of_capital_annual: Floats
    electricity_price_per_kwh: Floats
    pue: Floats
    grid_kgco2e_per_kwh: Floats
    utilisation_planned: Floats
    busy_load_fraction: float


@dataclass(frozen=True)
class NodeMonth:
    """Fixed cost of one owned node for one month, by item."""

    capital: Floats
    facility: Floats
    maintenance: Floats
    staff: Floats
    idle_energy: Floats

    @property
    def total(self) -> Floats:
        return self.capital + self.facility + self.maintenance + self.staff + self.idle_energy

    @property
    def running(self) -> Floats:
        """Everything but the capital charge: what a site pays each month once it owns a node."""
        return self.facility + self.maintenance + self.staff + self.idle_energy


def it_power_kw(*, nodes: ArrayLike, idle_kw: ArrayLike, peak_kw: ArrayLike, load: ArrayLike) -> Floats:
    """IT power drawn by nodes: nodes × (idle + (peak − idle) × load)."""
    idle = as_floats(idle_kw)
    return as_floats(nodes) * (idle + (as_floats(peak_kw) - idle) * as_floats(load))


def facility_energy_kwh(*, it_kwh: ArrayLike, pue: ArrayLike) -> Floats:
    """Facility energy from IT energy: PUE = total facility energy / IT equipment energy
    (ISO/IEC 30134-2:2016; EN 50600-4-2:2016)."""
    return as_floats(it_kwh) * as_floats(pue)


def cooling_tons(kw_thermal: ArrayLike) -> Floats:
    """Tons of refrigeration for a heat load: kW / 3.516853 (NIST SP 811, App. B.8)."""
    return as_floats(kw_thermal) / KW_PER_TON_OF_REFRIGERATION


def node_month(economics: SiteEconomics) -> NodeMonth:
    """Fixed monthly cost of one owned node on a site.

    Capital: the annuity repaying capex less the residual over the depreciation months at the
    monthly cost of capital. Facility: colocation per provisioned kW-month (node peak IT kW), or
    an owned hall's capex per kW amortised over its life plus its fixed yearly cost shared by IT
    kW. Maintenance: a yearly fraction of capex. Staff: per node-year. Idle energy: idle power
    all month, times PUE, at the site's price.
    """
    site = economics.site
    node = site.node_type
    rate = monthly_rate(economics.cost_of_capital_annual)
    capex = economics.capex_per_node
    capital = capital_recovery_payment(
        principal=capex,
        rate=rate,
        periods=site.depreciation_months,
        residual=capex * site.residual_fraction,
    )
    facility = facility_per_node_month(economics, rate=rate)
    maintenance = capex * site.maintenance_fraction_per_year / MONTHS_PER_YEAR
    staff = np.full_like(capex, site.staff_cost_per_node_year / MONTHS_PER_YEAR)
    idle_energy = (
        node.power_kw_idle * HOURS_PER_MONTH * economics.pue * economics.electricity_price_per_kwh
    )
    return NodeMonth(capital, facility, maintenance, staff, np.asarray(idle_energy))


def facility_per_node_month(economics: SiteEconomics, *, rate: ArrayLike) -> Floats:
    """The facility's monthly charge for one node's provisioned IT power (its peak kW)."""
    site = economics.site
    node_kw = site.node_type.power_kw_peak
    facility = site.facility
    if isinstance(facility, Colocation):
        return np.full_like(economics.pue, facility.price_per_kw_month * node_kw)
    hall_capital = capital_recovery_payment(
        principal=facility.capex_per_kw * node_kw,
        rate=rate,
        periods=facility.life_years * MONTHS_PER_YEAR,
    )
    fixed_share = facility.fixed_cost_per_year / MONTHS_PER_YEAR * node_kw / fixed_cost_sharing_kw(economics)
    return np.asarray(hall_capital + fixed_share)


def installed_it_kw(site: Site) -> float:
    """The IT load installed on a site: its owned nodes at peak power."""
    return site.nodes_owned * site.node_type.power_kw_peak


def fixed_cost_sharing_kw(economics: SiteEconomics) -> Floats:
    """The IT kW an owned hall's fixed yearly cost is shared by (`facility.allocate`): the installed
    load, or the IT power the hall can feed (capacity / PUE). A site with no nodes installed
    shares it by capacity."""
    site = economics.site
    facility = site.facility
    if isinstance(facility, OwnedHall) and facility.allocate == "installed" and site.nodes_owned > 0:
        return np.full_like(economics.pue, installed_it_kw(site))
    return hall_it_capacity_kw(economics)


def hall_it_capacity_kw(economics: SiteEconomics) -> Floats:
    """IT power a site can feed: facility power capacity / PUE (all owned nodes at peak if none)."""
    site = economics.site
    if site.power_capacity_kw is None:
        return np.full_like(economics.pue, max(site.nodes_owned, 1) * site.node_type.power_kw_peak)
    return site.power_capacity_kw / economics.pue


def busy_energy_per_accelerator_hour(economics: SiteEconomics) -> Floats:
    """Marginal energy cost v of one busy accelerator-hour: the power above idle, times PUE, at
    the site's price, per accelerator."""
    node = economics.site.node_type
    above_idle_kw = (node.power_kw_peak - node.power_kw_idle) * economics.busy_load_fraction
    return np.asarray(
        above_idle_kw / node.accelerators_per_node * economics.pue * economics.electricity_price_per_kwh
    )


def chargeback_per_accelerator_hour(
    *, fixed_per_node_month: ArrayLike, accelerators_per_node: ArrayLike,
    variable_per_accelerator_hour: ArrayLike, utilisation: ArrayLike,
) -> Floats:
    """Cost per used accelerator-hour of an owned fleet at utilisation u:
    c(u) = F / (A · 730 · u) + v (model.md §6)."""
    return as_floats(fixed_per_node_month) / (
        as_floats(accelerators_per_node) * HOURS_PER_MONTH * as_floats(utilisation)
    ) + as_floats(variable_per_accelerator_hour)


def power_headroom_nodes(economics: SiteEconomics) -> tuple[Floats, Floats]:
    """How many more nodes at peak power the site can feed and cool beyond those it owns:
    (by facility power: capacity / (peak kW × PUE) − owned, by cooling: capacity / peak kW − owned).
    inf where a capacity is not given."""
    site = economics.site
    peak = site.node_type.power_kw_peak
    if site.power_capacity_kw is None:
        by_power = np.full_like(economics.pue, np.inf)
    else:
        by_power = np.floor(site.power_capacity_kw / (peak * economics.pue) + 1e-9) - site.nodes_owned
    if site.cooling_capacity_kw is None:
        by_cooling = np.full_like(economics.pue, np.inf)
    else:
        by_cooling = np.full_like(
            economics.pue, np.floor(site.cooling_capacity_kw / peak + 1e-9) - site.nodes_owned
        )
    return np.asarray(by_power), by_cooling
