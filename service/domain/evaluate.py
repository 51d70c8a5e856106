"""Evaluate a campaign on every venue and term of a catalog: the vectorised heart of a quote.

One call handles any number of scenarios (arrays along axis 0); Python loops run only over
venues and terms, never over scenarios.
"""

import functools
from collections.abc import Iterable
from dataclasses import dataclass, field, fields, replace
from typing import Any, Literal

import numpy as np

from service.domain import screens
from service.domain.arrays import Bools, Floats, Ints, as_floats, broadcast, longest_axis
from service.domain.assumptions import default
from service.domain.campaign import Campaign, MeasuredWork, Overrides, QuoteOptions, Recurrence, TransformerWork
from service.domain.catalog import Catalog, NodeType, Offer, Site
from service.domain.charges import (
    Charges,
    chargeback_charges,
    committed_charges,
    data_charges,
    hourly_charges,
    new_build_charges,
)
from service.domain.choice import Choice, Eligible, as_column, choose_priced, choose_priced_each, eligible
from service.domain.compiled import Kernel
from service.domain.gravity import Transfer, staging_seconds, transfer
from service.domain.layout import Architecture, Candidates, Hardware, LayoutGrid, Load, NodeFit, layout_search, node_fit
from service.domain.lockstep import Search, drive, together
from service.domain.owning import (
    NodeMonth,
    SiteEconomics,
    busy_energy_per_accelerator_hour,
    node_month,
)
from service.domain.recurrence import instances_per_year, instances_total
from service.domain.residency import admits, allowed_jurisdictions
from service.domain.terms import Energy, campaign_energy
from service.domain.units import GIB, SECONDS_PER_DAY, TB
from service.domain.venues import (
    NodeLimit,
    at_venue,
    chargeback_limit,
    network_gbps,
    new_build_limit,
    node_mtbf_hours,
    offer_limit,
    rented_price_factor,
    site_economics,
    sustained_flops,
    venue_path_efficiency,
)
from service.domain.work import WorkAmount, runs_multiplier, work_amount


@dataclass(frozen=True)
class OptionResult:
    """One venue on one term, at the layout chosen per scenario: (S,) arrays."""

    venue_kind: Literal["owned", "rented", "split"]
    venue_id: str
    jurisdiction: str
    term: str
    node_type: NodeType
    layout: LayoutGrid
    screens: Ints
    min_nodes: Floats  # the memory minimum
    needed_nodes: Floats  # the memory minimum, or the pinned count when one is pinned
    limit: NodeLimit
    lines: dict[str, Floats]
    total: Floats
    energy: Energy
    transfer: Transfer
    staging_seconds: Floats
    sustained_flops_per_accelerator: Floats  # the venue's speed on this work (model.md §1, §8)
    details: dict[str, Floats] = field(default_factory=dict)
    parts: tuple["OptionResult", ...] = ()  # a split's owned and rented parts

    @functools.cached_property
    def feasible(self) -> Bools:
        return np.asarray(self.screens == 0)

    @property
    def label(self) -> str:
        return f"{self.venue_id}/{self.term}"

    @property
    def per_accelerator_hour(self) -> Floats:
        return self.total / self.layout.accelerator_hours


@dataclass(frozen=True)
class SiteFigures:
    """An owned site's monthly fixed cost per node F and busy energy per accelerator-hour v."""

    economics: SiteEconomics
    node: NodeMonth
    variable_per_accelerator_hour: Floats


@dataclass(frozen=True)
class CampaignEvaluation:
    work: WorkAmount
    runs_multiplier: Floats
    instances_total: Floats
    instances_per_year: Floats
    options: tuple[OptionResult, ...]
    sites: dict[str, SiteFigures]
    cost_of_capital_annual: Floats
    recurrence: Recurrence | None


@dataclass(frozen=True)
class _Context:
    """What every venue's evaluation shares for one campaign."""

    catalog: Catalog
    campaign: Campaign
    options: QuoteOptions
    overrides: Overrides
    work: WorkAmount
    multiplier: Floats
    load: Load  # what the campaign asks of any venue: the same for every venue
    scenarios: int  # how many the campaign and its overrides run over
    allowed: frozenset[str] | None
    home: Site | Offer | None
    fits: dict[tuple[int, float], NodeFit] = field(default_factory=dict)  # by node size, shared by its venues
    kernel: Kernel | None = None  # the compiled pricing and choice (compiled.py), else numpy


def evaluate_campaign(
    catalog: Catalog, campaign: Campaign, options: QuoteOptions, overrides: Overrides | None = None, *,
    kernel: Kernel | None = None,
) -> CampaignEvaluation:
    """Every venue and requested term of the catalog for the campaign; each term's layout priced and
    chosen by `kernel` where one is given (`compiled.kernel()`, a sweep's choice), else in numpy."""
    overrides = overrides or Overrides()
    venues: dict[str, Site | Offer] = {site.id: site for site in catalog.sites}
    venues.update({offer.id: offer for offer in catalog.offers})
    work = _work(catalog, campaign, options, overrides)
    multiplier = runs_multiplier(campaign.runs)
    context = _Context(
        catalog=catalog, campaign=campaign, options=options, overrides=overrides, work=work, multiplier=multiplier,
        load=_load(campaign, options, work, multiplier), scenarios=longest_axis((campaign, overrides)),
        allowed=allowed_jurisdictions(campaign.data.allowed_jurisdictions, catalog.jurisdiction_groups),
        home=None if campaign.data.home is None else venues[campaign.data.home], kernel=kernel,
    )
    # Each venue's options are a search (lockstep.py), run together: one step_figures call per round.
    searches: list[Search[list[OptionResult]]] = []
    sites: dict[str, SiteFigures] = {}
    for site in catalog.sites:
        local = replace(context, overrides=at_venue(overrides, site))  # per-venue overrides resolved
        economics = site_economics(site, catalog, local.overrides)
        figures = SiteFigures(economics, node_month(economics), busy_energy_per_accelerator_hour(economics))
        sites[site.id] = figures
        searches.append(_site_options(site, figures, local))
    searches.extend(_offer_options(offer, replace(context, overrides=at_venue(overrides, offer)))
                    for offer in catalog.offers)
    results = [option for options in drive(together(searches)) for option in options]
    return CampaignEvaluation(
        work=context.work,
        runs_multiplier=context.multiplier,
        instances_total=instances_total(campaign.recurrence),
        instances_per_year=instances_per_year(campaign.recurrence),
        options=tuple(results),
        sites=sites,
        cost_of_capital_annual=_cost_of_capital(catalog, overrides),
        recurrence=campaign.recurrence,
    )


@dataclass(frozen=True)
class _Venue:
    kind: Literal["owned", "rented"]
    id: str
    jurisdiction: str
    node_type: NodeType
    source: Site | Offer
    pue: Floats
    grid_kgco2e_per_kwh: Floats
    allowed: frozenset[str] | None
    owned_only: bool
    transfer: Transfer


def _site_options(site: Site, figures: SiteFigures, context: _Context) -> Search[list[OptionResult]]:
    economics = figures.economics
    options = context.options
    link = transfer(site, context.home)
    venue = _Venue("owned", site.id, site.jurisdiction, site.node_type, site, economics.pue,
                   economics.grid_kgco2e_per_kwh, context.allowed, False, link)
    limits = {"owned_chargeback": chargeback_limit(economics, options),
              "owned_new_build": new_build_limit(economics, options)}
    limits = {term: limit for term, limit in limits.items() if term in options.terms}
    if not limits:
        return []
    data = data_charges(context.campaign, link, storage_per_gb_month=None,
                        results_egress_per_gb=site.egress_per_gb)
    physics = yield from _physics(venue, context, limits=[limit.nodes for limit in limits.values()])
    results = []
    if "owned_chargeback" in limits:
        results.append(_evaluate(venue, "owned_chargeback", limits["owned_chargeback"],
                                 chargeback_charges(figures.node, figures.variable_per_accelerator_hour,
                                                    economics, data), physics))
    if "owned_new_build" in limits:
        results.append(_evaluate(venue, "owned_new_build", limits["owned_new_build"],
                                 new_build_charges(figures.node, figures.variable_per_accelerator_hour,
                                                   economics, context.campaign, data), physics))
    return results


def _offer_options(offer: Offer, context: _Context) -> Search[list[OptionResult]]:
    terms, overrides = context.options.terms, context.overrides
    link = transfer(offer, context.home)
    venue = _Venue("rented", offer.id, offer.jurisdiction, offer.node_type, offer,
                   as_floats(np.nan if offer.pue is None else offer.pue),
                   as_floats(np.nan if offer.grid_kgco2e_per_kwh is None else offer.grid_kgco2e_per_kwh),
                   context.allowed, context.campaign.data.owned_only, link)
    limit = offer_limit(offer, context.options)
    data = data_charges(context.campaign, link, storage_per_gb_month=offer.storage_per_gb_month,
                        results_egress_per_gb=offer.egress_per_gb)
    searches = [_physics(venue, context, limits=[limit.nodes])]
    interruptible = offer.interruptible if "interruptible" in terms else None
    if interruptible is not None:  # interruptions change the wall clock, so this term gets physics of its own
        searches.append(_physics(venue, context, limits=[limit.nodes],
                                 interruption_mean_hours=interruptible.mean_hours_between_interruptions))
    physics, *interrupted = yield from together(searches)
    priced: list[tuple[str, Charges]] = []  # the terms on the offer's own physics and limit
    if "on_demand" in terms and offer.on_demand_per_accelerator_hour is not None:
        price = offer.on_demand_per_accelerator_hour * rented_price_factor(overrides, on_demand=True)
        priced.append(("on_demand", hourly_charges(price, data)))
    if "committed" in terms:
        cost_of_capital = _cost_of_capital(context.catalog, overrides)
        for commitment in offer.committed:
            price = commitment.per_accelerator_hour * rented_price_factor(overrides, on_demand=False)
            priced.append((f"committed_{commitment.months}m", committed_charges(
                commitment.months, commitment.upfront_fraction, price, cost_of_capital,
                offer.node_type.accelerators_per_node, context.campaign, data)))
    # Chosen together: the compiled kernel scans their candidates once for all of them.
    choices = choose_priced_each(physics.candidates(limit), physics.grid.blocks, [c for _, c in priced],
                                 physics.kernel) if priced else []
    results = [_evaluate(venue, term, limit, charges, physics, choice)
               for (term, charges), choice in zip(priced, choices, strict=True)]
    if interruptible is not None:
        price = interruptible.per_accelerator_hour * rented_price_factor(overrides, on_demand=False)
        results.append(_evaluate(venue, "interruptible", limit, hourly_charges(price, data), interrupted[0]))
    return results


@dataclass(frozen=True)
class _Physics:
    """What a venue does with the campaign at every candidate layout, shared by its terms."""

    load: Load
    hardware: Hardware
    grid: Candidates
    min_nodes: Floats  # the fewest nodes any layout needs to hold the model; inf when none can
    pinned_nodes: float | None  # options.fixed_accelerators as whole nodes
    kernel: Kernel | None  # the compiled eligibility, pricing and choice (compiled.py), else numpy
    _candidates: dict[int, tuple[NodeLimit, Eligible]] = field(default_factory=dict)

    def candidates(self, limit: NodeLimit) -> Eligible:
        """Which layouts a term under that limit may take; computed once per limit, as the terms
        of an offer share one."""
        if id(limit) not in self._candidates:  # the limit is kept with them, so its id is not reused
            self._candidates[id(limit)] = limit, eligible(self.grid, node_limit=limit.nodes,
                                                          deadline_seconds=self.load.deadline_seconds,
                                                          kernel=self.kernel)
        return self._candidates[id(limit)][1]


def _physics(venue: _Venue, context: _Context, *, limits: list[Floats],
             interruption_mean_hours: float = np.inf) -> Search[_Physics]:
    node = venue.node_type
    campaign, options, overrides = context.campaign, context.options, context.overrides
    load = context.load
    storage = venue.source.storage_write_gbps
    hardware = Hardware(
        accelerators_per_node=node.accelerators_per_node,
        memory_bytes=node.accelerator.memory_gb * GIB,
        sustained_flops_per_accelerator=_venue_sustained(node, campaign, overrides, context.work),
        intra_node_gbps=node.intra_node_gbps,
        network_gbps=network_gbps(node, overrides),
        path_efficiency=venue_path_efficiency(venue.source),
        checkpoint_write_gbps=node.checkpoint_write_gbps,
        storage_write_gbps=default("storage_write_gbps") if storage is None else storage,
        node_mtbf_hours=node_mtbf_hours(node, overrides),
        interruption_mean_hours=interruption_mean_hours,
        staging_seconds=staging_seconds(dataset_tb=campaign.data.dataset_tb, link=venue.transfer),
    )
    grid, min_nodes = yield from layout_search(load, hardware, node_limits=limits, scenarios=context.scenarios,
                                               fixed_accelerators=options.fixed_accelerators,
                                               fit=_node_fit(context, hardware))
    pinned = None if options.fixed_accelerators is None else float(grid.blocks[0].nodes[0, 0])
    return _Physics(load, hardware, grid, min_nodes, pinned, context.kernel)


def _node_fit(context: _Context, hardware: Hardware) -> NodeFit:
    """What the node's size makes of the campaign's model, made once per size (accelerators per node,
    memory per accelerator) and shared by the venues of that size and their terms."""
    size = (hardware.accelerators_per_node, float(hardware.memory_bytes))
    if size not in context.fits:
        context.fits[size] = node_fit(context.load, hardware)
    return context.fits[size]


def _evaluate(venue: _Venue, term: str, limit: NodeLimit, charges: Charges, physics: _Physics,
              choice: Choice | None = None) -> OptionResult:
    """Price every candidate layout, keep the cheapest per scenario (unless chosen already), itemise that one."""
    node, grid = venue.node_type, physics.grid
    if choice is None:
        choice = choose_priced(physics.candidates(limit), grid.blocks, charges, physics.kernel)
    chosen = grid.pick(choice.index)
    lines_at, details_at = charges.itemise(as_column(chosen))
    # A line that does not depend on the layout may vary by scenario when nothing else does.
    shape = (max(choice.index.size, *(np.size(v) for v in (*lines_at.values(), *details_at.values()))),)
    if shape != choice.index.shape:
        choice = Choice(*(broadcast(v, shape) for v in (choice.index, choice.any_fits, choice.meets_deadline)))
        chosen = LayoutGrid(**{f.name: _per_scenario(getattr(chosen, f.name), shape) for f in fields(chosen)})
    lines = {item: _per_scenario(amount, shape) for item, amount in lines_at.items()}
    min_nodes = broadcast(physics.min_nodes, shape)
    pinned = physics.pinned_nodes
    needed = min_nodes if pinned is None else broadcast(pinned, shape)  # OptionResult.needed_nodes
    mask = _screen(venue, physics.hardware, limit, min_nodes, needed, choice.any_fits, choice.meets_deadline,
                   shape=shape)
    if pinned is not None:
        holds = _per_scenario(grid.each(lambda block: block.fits).any(axis=1), shape)  # only the pin is evaluated
        mask |= np.where(~holds & np.isfinite(min_nodes), screens.PINNED_TOO_FEW, 0)
        # A pinned count that cannot hold the model is that problem, not a capacity one.
        mask &= np.where(~holds, ~(screens.CAPACITY | screens.POWER | screens.COOLING), -1)
    energy = campaign_energy(
        chosen, idle_kw=node.power_kw_idle, peak_kw=node.power_kw_peak,
        load=default("busy_load_fraction"), pue=venue.pue, grid_kgco2e_per_kwh=venue.grid_kgco2e_per_kwh)
    return OptionResult(
        venue_kind=venue.kind,
        venue_id=venue.id,
        jurisdiction=venue.jurisdiction,
        term=term,
        node_type=node,
        layout=chosen,
        screens=mask,
        min_nodes=min_nodes,
        needed_nodes=needed,
        limit=limit,
        lines=lines,
        total=sum_lines(lines.values()),
        energy=energy,
        transfer=venue.transfer,
        staging_seconds=broadcast(physics.hardware.staging_seconds, shape),
        sustained_flops_per_accelerator=broadcast(physics.hardware.sustained_flops_per_accelerator, shape),
        details={name: _per_scenario(value, shape) for name, value in details_at.items()},
    )


def _cost_of_capital(catalog: Catalog, overrides: Overrides) -> Floats:
    return as_floats(catalog.cost_of_capital_annual if overrides.cost_of_capital_annual is None
                     else overrides.cost_of_capital_annual)


def _per_scenario(values: Any, shape: tuple[int, ...]) -> Any:
    """A figure of the chosen layout ((S, 1), (1, 1) or a scalar) as an (S,) array."""
    return broadcast(np.asarray(values).reshape(-1), shape)


def sum_lines(lines: Iterable[Floats]) -> Floats:
    """The total of an option's cost lines, in the order they are listed."""
    return functools.reduce(np.add, lines)


def _screen(venue: _Venue, hardware: Hardware, limit: NodeLimit, min_nodes: Floats, needed: Floats,
            any_fits: np.ndarray, meets_deadline: np.ndarray, *, shape: tuple[int, ...]) -> Ints:
    mask = np.zeros(shape, dtype=np.int64)
    if not admits(venue.allowed, venue.jurisdiction):
        mask |= screens.RESIDENCY
    if venue.owned_only:
        mask |= screens.OWNED_ONLY
    no_precision = np.isnan(as_floats(hardware.sustained_flops_per_accelerator))
    held = np.isfinite(min_nodes)  # some node count holds the model
    # Each screen is set only where some scenario fails it: most options pass them all (a sweep's whole chunk).
    if held.all() and any_fits.all() and meets_deadline.all() and not no_precision.any():
        return mask
    no_precision = broadcast(no_precision, shape)
    short = held & ~any_fits & ~no_precision
    if short.any():
        mask |= np.where(short & (np.minimum(limit.venue, limit.request) < needed), screens.CAPACITY, 0)
        mask |= np.where(short & (limit.power < needed), screens.POWER, 0)
        mask |= np.where(short & (limit.cooling < needed), screens.COOLING, 0)
    for failed, screen in ((no_precision, screens.PRECISION), (~held & ~no_precision, screens.MEMORY),
                           (any_fits & ~meets_deadline & ~no_precision, screens.DEADLINE)):
        if failed.any():
            mask |= np.where(failed, screen, 0)
    return mask


def _work(catalog: Catalog, campaign: Campaign, options: QuoteOptions, overrides: Overrides) -> WorkAmount:
    reference = None
    if isinstance(campaign.work, MeasuredWork):
        node = catalog.node_types[campaign.work.reference_node_type]
        reference = sustained_flops(node, campaign.training.precision, overrides)
    return work_amount(campaign.work, recompute=campaign.training.activation_recompute,
                       utilisation_basis=options.utilisation_basis, reference_sustained_flops=reference)


def _venue_sustained(node: NodeType, campaign: Campaign, overrides: Overrides, work: WorkAmount) -> Floats:
    """Sustained FLOP/s per accelerator, or for measured work the measured speed relative to
    the reference node type when the catalog states one."""
    measured = campaign.work
    if isinstance(measured, MeasuredWork) and measured.reference_node_type in node.measured_relative_speed:
        accelerator_seconds = as_floats(measured.samples) / as_floats(measured.samples_per_second_per_accelerator)
        reference_rate = work.timed_flops / accelerator_seconds
        return np.asarray(reference_rate * node.measured_relative_speed[measured.reference_node_type])
    return sustained_flops(node, campaign.training.precision, overrides)


def _load(campaign: Campaign, options: QuoteOptions, work: WorkAmount, multiplier: Floats) -> Load:
    training = campaign.training
    architecture = None
    transformer = campaign.work
    if (isinstance(transformer, TransformerWork) and transformer.layers is not None
            and transformer.d_model is not None and transformer.sequence_length is not None):
        heads = (float(transformer.d_model) / default("head_dim")  # type: ignore[arg-type]
                 if transformer.attention_heads is None else float(transformer.attention_heads))  # type: ignore[arg-type]
        architecture = Architecture(int(transformer.layers), float(transformer.d_model),  # type: ignore[arg-type]
                                    float(transformer.sequence_length), heads)  # type: ignore[arg-type]
    pins = options.layout
    micro_batch = (pins.micro_batch if pins.micro_batch is not None
                   else training.micro_batch_sequences if training.micro_batch_sequences is not None
                   else default("micro_batch_sequences"))
    checkpoint = None if campaign.data.checkpoint_tb is None else as_floats(campaign.data.checkpoint_tb) * TB
    deadline = (np.asarray(np.inf) if campaign.deadline_days is None
                else as_floats(campaign.deadline_days) * SECONDS_PER_DAY)
    return Load(
        timed_flops_per_run=work.timed_flops,
        timed_flops_per_token=work.timed_flops_per_token,
        runs_multiplier=multiplier,
        parameters=work.parameters,
        tokens_per_run=work.tokens,
        global_batch_tokens=as_floats(default("global_batch_tokens") if training.global_batch_tokens is None
                                      else training.global_batch_tokens),
        architecture=architecture,
        micro_batch=float(micro_batch),  # type: ignore[arg-type]
        checkpoint_bytes=checkpoint,
        recompute=training.activation_recompute,
        parallelism=campaign.parallelism,
        pins=pins,
        deadline_seconds=np.asarray(deadline),
        restart_seconds=default("restart_minutes") * 60.0,
    )
