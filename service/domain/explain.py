"""Words for people: why an option was ruled out, what each cost line is made of, why the
recommendation wins, and what to change when nothing is feasible. Pure string formatting over
one scenario of an evaluation."""

from collections.abc import Sequence

import numpy as np

from service.domain import screens
from service.domain.arrays import scenario_value
from service.domain.breakeven import BEYOND_LIFE, NO_SAVING, Payback
from service.domain.campaign import OwnedCostView
from service.domain.catalog import Catalog, Colocation, Offer, Site
from service.domain.comparison import BreakEvenRow, listed_rented_price, work_conversion
from service.domain.evaluate import CampaignEvaluation, OptionResult, SiteFigures
from service.domain.owning import fixed_cost_sharing_kw
from service.domain.programme import OptionCosts
from service.domain.units import HOURS_PER_MONTH, SECONDS_PER_DAY, SECONDS_PER_HOUR

CAUTIONS = (
    "Planning estimate, not a vendor quote: prices, power draw and performance are the catalog's "
    "figures and the model's published methods, not offers from any supplier.",
    "Power, cooling and electrical figures are for sizing discussions only and must be confirmed by "
    "licensed engineers under local codes.",
    "The residency result is a screen against the jurisdiction rules entered with the request, not "
    "legal advice.",
)


def _n(value: float, digits: int = 0) -> str:
    return f"{value:,.{digits}f}"


def _pct(value: float) -> str:
    return f"{value * 100:.1f}%"


def reasons(option: OptionResult, i: int, catalog: Catalog, campaign_allowed: Sequence[str] | None,
            deadline_days: float | None, site: SiteFigures | None = None) -> list[str]:
    """One sentence per screen that ruled the option out, each naming what would change it."""
    mask = int(option.screens[i])
    node = option.node_type
    out: list[str] = []
    for bit in screens.names(mask):
        if bit == screens.RESIDENCY:
            allowed = ", ".join(campaign_allowed or ())
            out.append(f"residency: {option.venue_id} processes data in {option.jurisdiction}, outside the "
                       f"allowed jurisdictions ({allowed})")
        elif bit == screens.OWNED_ONLY:
            out.append("the request allows owned sites only (data.owned_only)")
        elif bit == screens.PRECISION:
            out.append(f"precision: accelerator {node.accelerator.id} has no peak figure for the requested "
                       "precision")
        elif bit == screens.MEMORY:
            out.append(f"memory: the model's states and activations do not fit on any number of "
                       f"{node.accelerator.id} accelerators ({_n(node.accelerator.memory_gb)} GiB each) with any "
                       "tensor, pipeline and data split berth may use here; use full activation recompute, allow "
                       "more splits (campaign.parallelism auto, options.layout) or a larger accelerator")
        elif bit == screens.PINNED_TOO_FEW:
            out.append(f"memory: the pinned {_n(option.layout.accelerators[i])} accelerators cannot hold the "
                       f"model's states and activations; it needs at least {_n(np.ceil(option.min_nodes[i]))} "
                       "nodes, or another split over these accelerators (options.layout)")
        elif bit == screens.CAPACITY:
            out.append(f"capacity: {_needs(option, i)}; "
                       f"{_capacity_words(option, i, catalog)}")
        elif bit in (screens.POWER, screens.COOLING) and site is not None:
            out.append(_facility_reason(bit, option, i, site))
        elif bit == screens.DEADLINE and deadline_days is not None:
            days = option.layout.wall_seconds[i] / SECONDS_PER_DAY
            staged = option.staging_seconds[i] / SECONDS_PER_DAY  # copying the data does not scale
            head = (f"deadline: the fastest layout here ({_n(option.layout.accelerators[i])} accelerators) "
                    f"takes {_n(days, 1)} days, {_n(days - deadline_days, 1)} days past the "
                    f"{_n(deadline_days, 1)}-day deadline; ")
            if staged >= deadline_days:
                out.append(head + f"copying the dataset alone takes {_n(staged, 1)} days, so no layout here "
                           "can meet it")
            else:
                needed = option.layout.accelerators[i] * (days - staged) / (deadline_days - staged)
                out.append(head + f"meeting it would take at least {_n(np.ceil(needed))} accelerators at "
                           "ideal scaling")
    return out


def _facility_reason(bit: int, option: OptionResult, i: int, site: SiteFigures) -> str:
    """Power or cooling: what the new nodes need against what the site has left, in kW."""
    s = site.economics.site
    peak = s.node_type.power_kw_peak
    wanted = float(option.needed_nodes[i])
    if bit == screens.POWER:
        pue = _at(site.economics.pue, i)
        capacity = float(s.power_capacity_kw or 0.0)
        used = s.nodes_owned * peak * pue
        need = wanted * peak * pue
        return (f"power: {_n(wanted)} new nodes draw {_n(need, 1)} kW at the facility at peak "
                f"({_n(wanted * peak, 1)} kW IT × PUE {pue:g}); the site's {_n(capacity, 1)} kW less the owned "
                f"fleet's {_n(used, 1)} kW leaves "
                f"{_n(capacity - used, 1)} kW, {_n(need - (capacity - used), 1)} kW short")
    capacity = float(s.cooling_capacity_kw or 0.0)
    used = s.nodes_owned * peak
    need = wanted * peak
    return (f"cooling: {_n(wanted)} new nodes reject {_n(need, 1)} kW of heat at peak; the site's {_n(capacity, 1)} kW "
            f"of cooling less the owned fleet's {_n(used, 1)} kW leaves {_n(capacity - used, 1)} kW, "
            f"{_n(need - (capacity - used), 1)} kW short")


def _needs(option: OptionResult, i: int) -> str:
    if option.needed_nodes[i] != option.min_nodes[i]:
        return f"the pinned layout needs {_n(option.needed_nodes[i])} nodes"
    return f"holding the model needs at least {_n(option.min_nodes[i])} nodes"


def _at(value: np.ndarray, i: int) -> float:
    return float(scenario_value(value, i))


def _capacity_words(option: OptionResult, i: int, catalog: Catalog) -> str:
    venue = _venue(catalog, option.venue_id)
    limit = _at(np.minimum(option.limit.venue, option.limit.request), i)
    if _at(option.limit.request, i) < _at(option.limit.venue, i):
        return f"the request's max_accelerators allows {_n(limit)} nodes"
    if isinstance(venue, Site) and option.term == "owned_chargeback":
        return (f"the site's free nodes are {venue.nodes_owned} owned × (1 − {_pct(venue.utilisation_current)} "
                f"current utilisation) = {_n(limit)}")
    if isinstance(venue, Site):
        return f"the site has room for {venue.nodes_max} − {venue.nodes_owned} owned = {_n(limit)} new nodes"
    return f"the offer's nodes_max is {_n(limit)}"


def _venue(catalog: Catalog, venue_id: str) -> Site | Offer:
    venues: list[Site | Offer] = [*catalog.sites, *catalog.offers]
    for venue in venues:
        if venue.id == venue_id:
            return venue
    raise KeyError(venue_id)


def line_basis(option: OptionResult, item: str, i: int, catalog: Catalog,
               site: SiteFigures | None, currency: str) -> str:
    """The inputs and formula behind one cost line."""
    layout = option.layout
    hours = layout.accelerator_hours[i]
    per_node = option.node_type.accelerators_per_node
    if item in DATA_ITEMS:
        return _data_basis(option, item, i, _venue(catalog, option.venue_id), catalog, currency)
    if site is not None:
        return _owned_basis(option, item, i, site, currency, hours, per_node)
    price = option.details["price_per_accelerator_hour"][i]
    if item == "compute":
        extra = (f", including {_pct(layout.failure_overhead[i])} lost to failures and interruptions"
                 if option.term == "interruptible" else "")
        return f"{_n(hours)} accelerator-hours × {price:,.4g} {currency} per accelerator-hour{extra}"
    d = option.details
    return (f"{_n(layout.nodes[i] * per_node)} accelerators × {option.term.split('_')[1][:-1]} months × "
            f"{_n(HOURS_PER_MONTH)} h × {price:,.4g} {currency} × {_n(d['terms_needed'][i])} term(s) × "
            f"up-front financing {d['financing_factor'][i]:.4f} / {_n(d['sharing_instances'][i])} "
            "recurring instance(s) sharing it; paid whether used or not")


DATA_ITEMS = frozenset({"storage", "ingress", "egress_at_home", "egress"})


def _data_basis(option: OptionResult, item: str, i: int, venue: Site | Offer, catalog: Catalog,
                currency: str) -> str:
    link = option.transfer
    if item == "storage":
        assert isinstance(venue, Offer)
        months = option.layout.wall_seconds[i] / SECONDS_PER_HOUR / HOURS_PER_MONTH
        return (f"(dataset + kept checkpoints) GB × {venue.storage_per_gb_month:g} {currency} per GB-month × "
                f"{months:.2f} months of wall clock")
    if item == "ingress":
        where = "from an unstated home" if link.home is None else f"from {link.home}"
        return f"dataset GB × {link.ingress_per_gb:g} {currency} per GB into {venue.id} ({where})"
    if item == "egress_at_home":
        return (f"dataset GB × {link.egress_at_home_per_gb:g} {currency} per GB out of {link.home}, where the "
                f"dataset lives; copying it over {link.link_gbps:g} Gb/s adds staging time to the wall clock"
                + (" (link speed assumed: neither end states one)" if link.link_assumed else ""))
    return f"results GB × {venue.egress_per_gb:g} {currency} per GB out of {venue.id}"


def _owned_basis(option: OptionResult, item: str, i: int, site: SiteFigures, currency: str,
                 hours: float, per_node: int) -> str:
    s = site.economics.site
    node = site.node
    e = site.economics
    if item == "busy_energy":
        return (f"{_n(hours)} accelerator-hours × ({s.node_type.power_kw_peak:g} − {s.node_type.power_kw_idle:g} kW) "
                f"/ {per_node} × PUE {_at(e.pue, i):g} × {_at(e.electricity_price_per_kwh, i):g} {currency}/kWh")
    amount, words = getattr(node, item), _fixed_words(item, site, i, currency)
    monthly = f"{_n(_at(amount, i), 2)} {currency} per node-month ({words})"
    if option.term == "owned_chargeback":
        return (f"{_n(hours)} accelerator-hours × {monthly} / ({per_node} accelerators × 730 h × "
                f"{_pct(_at(e.utilisation_planned, i))} planned utilisation)")
    d = option.details
    return (f"{_n(option.layout.nodes[i])} new nodes × {_n(d['carried_months'][i])} months carried / "
            f"{_n(d['sharing_instances'][i])} recurring instance(s) sharing them × {monthly}")


def _fixed_words(item: str, site: SiteFigures, i: int, currency: str) -> str:
    """How an owned node's fixed cost line `item` (programme.FIXED_ITEMS) is made, per node-month."""
    s, e = site.economics.site, site.economics
    if item == "capital":
        return (f"annuity of {_n(_at(e.capex_per_node, i))} {currency} capex less {_pct(s.residual_fraction)} "
                f"residual over {s.depreciation_months} months at {_pct(_at(e.cost_of_capital_annual, i))}/12 a month")
    if item == "facility":
        return _facility_words(site, i, currency)
    if item == "maintenance":
        return f"{_pct(s.maintenance_fraction_per_year)} of capex a year"
    if item == "staff":
        return f"{_n(s.staff_cost_per_node_year)} {currency} per node-year"
    return (f"{s.node_type.power_kw_idle:g} kW idle × 730 h × PUE {_at(e.pue, i):g} × "
            f"{_at(e.electricity_price_per_kwh, i):g} {currency}/kWh")


def _facility_words(site: SiteFigures, i: int, currency: str) -> str:
    s = site.economics.site
    f = s.facility
    if isinstance(f, Colocation):
        return f"colocation {f.price_per_kw_month:g} {currency} per kW-month × {s.node_type.power_kw_peak:g} kW"
    sharing = _at(fixed_cost_sharing_kw(site.economics), i)
    if f.allocate == "installed" and s.nodes_owned > 0:
        shared = (f"the installed IT load of {s.nodes_owned} owned nodes × {s.node_type.power_kw_peak:g} kW = "
                  f"{_n(sharing, 1)} kW (facility.allocate installed)")
    else:
        shared = (f"the IT power it can feed, {_n(s.power_capacity_kw or 0.0, 1)} kW / PUE "
                  f"{_at(site.economics.pue, i):g} = {_n(sharing, 1)} kW (facility.allocate {f.allocate}"
                  + ("; no nodes installed" if f.allocate == "installed" else "") + ")")
    return (f"owned hall {f.capex_per_kw:g} {currency}/kW over {f.life_years:g} years plus "
            f"{_n(f.fixed_cost_per_year)} {currency} a year × {s.node_type.power_kw_peak:g} kW / {shared}")


VIEW_WORDS = {
    "full": "the full view (owned capacity charged its chargeback at planned utilisation)",
    "incremental": ("the incremental view (only what running the campaign adds to a site: busy energy, data, "
                    "and nodes beyond its free capacity)"),
}


def why(ranked: Sequence[OptionResult], i: int, evaluation: CampaignEvaluation, currency: str,
        rank_by: str, costs: Sequence[OptionCosts], view: OwnedCostView,
        other_best: OptionResult | None = None, owned_compared: bool = False) -> str:
    """Why the first option wins: against the runner-up, over the whole programme when the campaign
    recurs, the input the answer hinges on, and whether the other view of owned cost agrees."""
    best = ranked[0]
    instances = _at(evaluation.instances_total, i)
    recurring = instances > 1

    def amount(k: int) -> float:
        return _at(costs[k].programme if recurring else costs[k].ranked, i)

    total = amount(0)
    figure = (f"{_n(total)} {currency} over the programme of {_n(instances)} instances "
              f"({_n(_at(costs[0].ranked, i))} {currency} an instance{_outlay(best, i, evaluation, currency)})"
              if recurring else f"{_n(total)} {currency}{_outlay(best, i, evaluation, currency)}")
    on_view = "" if view == "full" else " on the incremental view"
    if len(ranked) == 1:
        head = (f"{best.label} is the only feasible option, at {figure}{on_view}; every other option was ruled "
                "out (see its reasons)")
        return head + "." + _views(best, other_best, costs[0], i, view, currency, owned_compared)
    runner = ranked[1]
    runner_total = amount(1)
    gap = runner_total - total
    share = f" ({_pct(gap / runner_total)})" if runner_total > 0 else ""  # both free: no share of nothing
    head = (f"{best.label} costs {figure}{on_view}, {_n(gap)} {currency}{share} "
            f"less than the runner-up {runner.label}")
    if rank_by == "wall_clock":
        head = (f"{best.label} finishes in {_n(best.layout.wall_seconds[i] / SECONDS_PER_DAY, 1)} days against "
                f"{_n(runner.layout.wall_seconds[i] / SECONDS_PER_DAY, 1)} for {runner.label}, at {figure}")
    elif rank_by == "carbon":
        head = (f"{best.label} emits {_n(best.energy.kgco2e[i])} kgCO2e against "
                f"{_n(runner.energy.kgco2e[i])} for {runner.label}, at {figure}")
    hinge = (_hinge(ranked, i, evaluation) if view == "full" or best.venue_kind != "owned" else
             "on this view the site's fixed cost is already paid, so running the campaign there adds only its "
             "busy energy and data")
    return (head + "; " + hinge + "."
            + _views(best, other_best, costs[0], i, view, currency, owned_compared))


def _outlay(option: OptionResult, i: int, evaluation: CampaignEvaluation, currency: str) -> str:
    """A new build's capital when bought, which its annuity spreads over the nodes' life."""
    if option.term != "owned_new_build":
        return ""
    site = evaluation.sites[option.venue_id]
    capex = option.layout.nodes[i] * _at(site.economics.capex_per_node, i)
    return f", its {_n(option.layout.nodes[i])} new nodes {_n(capex)} {currency} of capital when bought"


def _views(best: OptionResult, other_best: OptionResult | None, cost: OptionCosts, i: int,
           view: OwnedCostView, currency: str, owned_compared: bool) -> str:
    other: OwnedCostView = "incremental" if view == "full" else "full"
    if other_best is None:
        return f" It ranks first on {VIEW_WORDS[other]} too." if owned_compared else ""
    return (f" The views disagree: on {VIEW_WORDS[other]} {other_best.label} ranks first, and "
            f"{best.label} costs {_n(_at(cost.other(view), i))} {currency} an instance there.")


def _hinge(ranked: Sequence[OptionResult], i: int, evaluation: CampaignEvaluation) -> str:
    best, runner = ranked[0], ranked[1]
    if best.parts:
        part_owned, part_rented = best.parts
        return (f"it runs {_n(best.details['owned_runs'][i])} of the runs on {part_owned.venue_id}'s free capacity "
                f"({_n(part_owned.layout.wall_seconds[i] / SECONDS_PER_DAY, 1)} days) and "
                f"{_n(best.details['rented_runs'][i])} on {part_rented.label} "
                f"({_n(part_rented.layout.wall_seconds[i] / SECONDS_PER_DAY, 1)} days) at the same time, so the "
                "cheap owned hours carry what they can within the deadline")
    rented = next((o for o in ranked if o.venue_kind == "rented"), None)
    owned = next((o for o in ranked if o.term == "owned_chargeback"), None)
    if owned is not None and rented is not None and best in (owned, rented):
        site = evaluation.sites[owned.venue_id]
        # The rented price per unit of work on the site's accelerator, as in the break-even table.
        price = float((listed_rented_price(rented) * work_conversion(rented, owned))[i])
        v = _at(site.variable_per_accelerator_hour, i)
        planned = _at(site.economics.utilisation_planned, i)
        current = site.economics.site.utilisation_current
        if price > v:
            u = _at(site.node.total, i) / (owned.node_type.accelerators_per_node * HOURS_PER_MONTH * (price - v))
            if best is owned:
                return (f"it hinges on {owned.venue_id}'s planned utilisation of {_pct(planned)} (its current "
                        f"utilisation is {_pct(current)}): below {_pct(u)} the best rented option, {rented.label}, "
                        "would cost less")
            if u <= 1.0:
                return (f"owning at {owned.venue_id} would win only above {_pct(u)} planned utilisation "
                        f"(the plan is {_pct(planned)})")
            return f"owning at {owned.venue_id} cannot match it even at full utilisation"
    if best.term == "owned_new_build" or runner.term == "owned_new_build":
        build = best if best.term == "owned_new_build" else runner
        return (f"a new build is charged its nodes' whole depreciation life shared by "
                f"{_n(build.details['sharing_instances'][i])} recurring instance(s), giving them "
                f"{_pct(build.details['utilisation'][i])} utilisation")
    return (f"it hinges on price and speed: {_n(best.layout.accelerator_hours[i])} accelerator-hours at "
            f"{_n(best.per_accelerator_hour[i], 2)} all-in against {_n(runner.layout.accelerator_hours[i])} at "
            f"{_n(runner.per_accelerator_hour[i], 2)}")


def conversion_words(row: BreakEvenRow, i: int, currency: str) -> str:
    """How a rented price became a price per unit of work on the site's accelerator."""
    rented, owned = row.rented, row.owned
    listed = _at(row.rented_listed_per_accelerator_hour, i)
    committed = (f" ({_at(rented.details['price_per_accelerator_hour'], i):.4g} at full use of the commitment, × "
                 f"{_at(rented.details['financing_factor'], i):.4f} up-front financing)"
                 if row.term.startswith("committed_") else "")
    speed = _at(owned.sustained_flops_per_accelerator, i) / _at(rented.sustained_flops_per_accelerator, i)
    words = (f"{listed:,.4f} {currency} per {rented.node_type.accelerator.id} accelerator-hour{committed} × "
             f"{speed:.4f} ({owned.node_type.accelerator.id} sustains "
             f"{_at(owned.sustained_flops_per_accelerator, i) / 1e12:,.1f} TFLOP/s on this work, "
             f"{rented.node_type.accelerator.id} {_at(rented.sustained_flops_per_accelerator, i) / 1e12:,.1f})")
    if row.term == "interruptible":
        words += (f" × (1 + {_pct(rented.layout.failure_overhead[i])} of hours lost to interruptions and failures) "
                  f"/ (1 + {_pct(owned.layout.failure_overhead[i])} on the site)")
    price = _at(row.rented_per_accelerator_hour, i)
    return words + f" = {price:,.4f} {currency} per {row.site} accelerator-hour of work"


def payback_words(paid: Payback, i: int, site: SiteFigures, basis: str) -> dict[str, object]:
    """The payback fields of a break-even row: months, the reason where there are none, the stated
    demand it assumes, and `basis`, how the site's payback is reckoned (`payback_basis`)."""
    months = _at(paid.months, i)
    reason = str(scenario_value(paid.reason, i))
    if reason == NO_SAVING:
        why: str | None = "none: the rent saved never covers the new nodes' running cost"
    elif reason == BEYOND_LIFE:
        why = (f"not within the {site.economics.site.depreciation_months}-month depreciation life: the discounted "
               f"saving repays {_pct(_at(paid.recovered_fraction, i))} of the capex by then")
    else:
        why = None
    return {
        "payback_months": None if not np.isfinite(months) else round(months, 1),
        "payback_reason": why,
        "payback_demand_accelerator_hours_per_month": round(_at(paid.demand_hours_per_month, i), 0),
        "payback_basis": basis,
    }


def payback_basis(site: SiteFigures, i: int) -> str:
    """How a site's payback is reckoned: the same words against every rented option."""
    s = site.economics.site
    return (f"the nodes a new build at {s.id} buys for this campaign, paid for now; each month they serve the "
            f"campaign's instances plus background work at the site's current utilisation of "
            f"{_pct(s.utilisation_current)} of their hours (at most all of them), which would otherwise be rented "
            f"at this price; saving = hours × (rented price − busy energy) − their running cost, discounted at "
            f"{_pct(_at(site.economics.cost_of_capital_annual, i))} a year (monthly); no residual value counted")


def next_steps(options: Sequence[OptionResult], i: int, deadline_days: float | None,
               currency: str) -> list[str]:
    """What to change when no option is feasible, nearest first."""
    steps: list[str] = []
    deadline_only = [o for o in options if int(o.screens[i]) == screens.DEADLINE]
    if deadline_only and deadline_days is not None:
        fastest = min(deadline_only, key=lambda o: float(o.layout.wall_seconds[i]))
        days = float(fastest.layout.wall_seconds[i]) / SECONDS_PER_DAY
        steps.append(f"relax the deadline to {np.ceil(days):.0f} days ({fastest.label} can finish by then)")
    residency_only = sorted((o for o in options if int(o.screens[i]) == screens.RESIDENCY),
                            key=lambda o: float(o.total[i]))
    cheapest_by_jurisdiction = {o.jurisdiction: o for o in reversed(residency_only)}
    for jurisdiction in dict.fromkeys(o.jurisdiction for o in residency_only):
        option = cheapest_by_jurisdiction[jurisdiction]
        steps.append(f"allow jurisdiction {jurisdiction}, if the data's rules permit it: {option.label} would "
                     f"then cost {_n(float(option.total[i]))} {currency}")
    if any(int(o.screens[i]) & screens.CAPACITY for o in options):
        steps.append("raise max_accelerators, free capacity on an owned site, or add an offer with more nodes")
    if any(int(o.screens[i]) & screens.MEMORY for o in options):
        steps.append("use full activation recompute, let berth split the model (parallelism auto) or use "
                     "accelerators with more memory")
    if any(int(o.screens[i]) & (screens.POWER | screens.COOLING) for o in options):
        steps.append("add facility power or cooling at the site, or build at another site")
    if any(int(o.screens[i]) & screens.OWNED_ONLY for o in options):
        steps.append("allow rented capacity (data.owned_only: false)")
    return steps


def used_assumptions(catalog: Catalog, evaluation: CampaignEvaluation, campaign_has: dict[str, bool]) -> list[str]:
    """Names of the defaults (see `assumptions.DEFAULTS`) this quote relied on.

    `campaign_has` says which optional request figures were given: architecture, global batch,
    micro batch, attention heads, parameters; and the recompute mode in use ("recompute_full",
    "recompute_selective").
    """
    names = ["usable_memory_fraction", "communication_overlap", "target_scaling_efficiency",
             "restart_minutes", "busy_load_fraction", "hours_per_month", "kw_per_ton_of_refrigeration"]
    if campaign_has.get("parameters"):
        names += ["bytes_per_parameter_model_states", "gradient_bytes_per_parameter"]
    if campaign_has.get("transformer") or campaign_has.get("parameters"):
        names.append("training_flops_per_parameter_token")
    if campaign_has.get("recompute_full"):
        names.append("full_recompute_flops_factor")
    if campaign_has.get("recompute_selective"):
        names.append("selective_recompute_flops_factor")
    if campaign_has.get("architecture"):
        if not campaign_has.get("micro_batch"):
            names.append("micro_batch_sequences")
        if not campaign_has.get("attention_heads"):
            names.append("head_dim")
    else:
        names.append("activation_reserve_fraction")
    if not campaign_has.get("global_batch"):
        names.append("global_batch_tokens")
    venues: list[Site | Offer] = [*catalog.sites, *catalog.offers]
    names += sorted({f"path_efficiency_{v.network_path}" for v in venues if v.path_efficiency is None})
    if any(o.transfer.link_assumed for o in evaluation.options):
        names.append("data_link_gbps")
    return list(dict.fromkeys(names))
