"""Venues and terms: what each owned site and rental offer can do for a campaign, with the
request's overrides applied. Arrays broadcast over scenarios."""

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.assumptions import default
from service.domain.campaign import Overrides, QuoteOptions
from service.domain.catalog import Catalog, NodeType, Offer, Site
from service.domain.owning import SiteEconomics, power_headroom_nodes
from service.domain.scaling import path_efficiency


def _or(value: ArrayLike | None, fallback: ArrayLike) -> Floats:
    return as_floats(fallback if value is None else value)


def at_venue(overrides: Overrides, venue: Site | Offer) -> Overrides:
    """The overrides that apply at one site or offer: its own values (`overrides.sites.<id>`,
    `overrides.offers.<id>`) replace the global ones, and its `_factor`s multiply them."""
    local = (overrides.sites if isinstance(venue, Site) else overrides.offers).get(venue.id)
    if not local:
        return overrides
    changes: dict[str, Any] = {
        name: as_floats(value) * _or(getattr(overrides, name), 1.0) if name.endswith("_factor") else value
        for name, value in local.items()}
    return replace(overrides, **changes)


def sustained_flops(node: NodeType, precision: str, overrides: Overrides) -> Floats:
    """Peak FLOP/s at the precision × utilisation, per accelerator; NaN without a peak figure."""
    accelerator = node.accelerator
    peak = accelerator.peak_tflops.get(precision)
    if peak is None:
        return np.asarray(np.nan)
    return peak * 1e12 * _or(overrides.utilisation, accelerator.utilisation)


def site_economics(site: Site, catalog: Catalog, overrides: Overrides) -> SiteEconomics:
    capex = site.capex
    node_price = capex.node_price * _or(overrides.node_price_factor, 1.0)
    return SiteEconomics(
        site=site,
        capex_per_node=np.asarray(
            node_price + capex.network_per_node + capex.storage_per_node + capex.install_per_node
        ),
        cost_of_capital_annual=_or(overrides.cost_of_capital_annual, catalog.cost_of_capital_annual),
        electricity_price_per_kwh=(_or(overrides.electricity_price_per_kwh, site.electricity_price_per_kwh)
                                   * _or(overrides.electricity_price_factor, 1.0)),
        pue=_or(overrides.pue, site.pue),
        grid_kgco2e_per_kwh=_or(overrides.grid_kgco2e_per_kwh, site.grid_kgco2e_per_kwh),
        utilisation_planned=_or(overrides.utilisation_planned, site.utilisation_planned),
        busy_load_fraction=default("busy_load_fraction"),
    )


@dataclass(frozen=True)
class NodeLimit:
    """The most nodes a term can give, and what sets each bound."""

    venue: Floats
    power: Floats
    cooling: Floats
    request: Floats

    @property
    def nodes(self) -> Floats:
        return np.minimum(np.minimum(self.venue, self.request), np.minimum(self.power, self.cooling))


def request_cap(node: NodeType, options: QuoteOptions) -> Floats:
    if options.max_accelerators is None:
        return np.asarray(np.inf)
    return np.asarray(float(np.floor(options.max_accelerators / node.accelerators_per_node)))


def chargeback_limit(economics: SiteEconomics, options: QuoteOptions) -> NodeLimit:
    """An existing fleet lends its free nodes: owned × (1 − current utilisation)."""
    site = economics.site
    free = np.floor(site.nodes_owned * (1.0 - site.utilisation_current) + 1e-9)
    unlimited = np.asarray(np.inf)
    return NodeLimit(np.asarray(free), unlimited, unlimited, request_cap(site.node_type, options))


def new_build_limit(economics: SiteEconomics, options: QuoteOptions) -> NodeLimit:
    """A new build fills the site up to nodes_max, and up to what its power and cooling allow."""
    site = economics.site
    by_power, by_cooling = power_headroom_nodes(economics)
    return NodeLimit(
        np.asarray(float(site.nodes_max - site.nodes_owned)),
        np.maximum(by_power, 0.0),
        np.maximum(by_cooling, 0.0),
        request_cap(site.node_type, options),
    )


def offer_limit(offer: Offer, options: QuoteOptions) -> NodeLimit:
    unlimited = np.asarray(np.inf)
    return NodeLimit(
        np.asarray(float(offer.nodes_max)), unlimited, unlimited, request_cap(offer.node_type, options)
    )


def venue_path_efficiency(venue: Site | Offer) -> float:
    return path_efficiency(venue.network_path, venue.path_efficiency)


def node_mtbf_hours(node: NodeType, overrides: Overrides) -> Floats:
    if overrides.mtbf_hours is not None:
        return as_floats(overrides.mtbf_hours)
    return np.asarray(np.inf if node.mtbf_hours is None else node.mtbf_hours)


def network_gbps(node: NodeType, overrides: Overrides) -> Floats:
    return _or(overrides.network_gbps, node.network_gbps)


def rented_price_factor(overrides: Overrides, *, on_demand: bool) -> Floats:
    factor = _or(overrides.rented_price_factor, 1.0)
    if on_demand:
        factor = factor * _or(overrides.on_demand_price_factor, 1.0)
    return np.asarray(factor)
