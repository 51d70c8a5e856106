"""Use cases for fleet plans: turn a request into the fleet economics of one site and one rented
offer and term, build the demand, run the vectorised plan, and shape the answer (api.md)."""

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np

from service.contract.catalog import CatalogIn
from service.contract.document import Money
from service.contract.fleet import FleetPlanIn
from service.domain.assumptions import DEFAULTS, default
from service.domain.campaign import Overrides
from service.domain.catalog import Catalog, Offer, Site
from service.domain.explain import CAUTIONS
from service.domain.finance import monthly_rate
from service.domain.fleet import (
    FleetEconomics,
    FleetPlan,
    MonthlyPlan,
    critical_ratio,
    monthly_demand,
    plan_fleet,
    sizes_between,
)
from service.domain.owning import busy_energy_per_accelerator_hour, node_month
from service.domain.terms import upfront_financing_factor
from service.domain.units import HOURS_PER_MONTH
from service.domain.venues import site_economics, sustained_flops
from service.errors import FieldProblem, InvalidInput, NotFound
from service.storage.repository import Storage, StoredQuote, new_id
from service.usecases.catalogs import ParsedCatalogs, catalog_to_use
from service.usecases.idempotency import Created, KeepAnswer

QuoteLookup = Callable[[Sequence[str]], list[StoredQuote | None]]


@dataclass(frozen=True)
class FleetLimits:
    max_cells: int = 50_000_000  # candidate sizes × samples × months
    max_stage_moves: int = 20_000_000  # candidate sizes² × decision points, for the staged plan
    max_candidates: int = 2_000  # candidate sizes, each a row of the answer


def _venues(catalog: Catalog, request: FleetPlanIn) -> tuple[Site, Offer]:
    site = next((s for s in catalog.sites if s.id == request.site), None)
    offer = next((o for o in catalog.offers if o.id == request.offer), None)
    problems = []
    if site is None:
        problems.append(FieldProblem("site", f"no owned site {request.site!r} in the catalog"))
    if offer is None:
        problems.append(FieldProblem("offer", f"no rental offer {request.offer!r} in the catalog"))
    if problems:
        raise InvalidInput("the plan names venues the catalog does not have", problems)
    assert site is not None and offer is not None
    return site, offer


def _rented_price(offer: Offer, term: str, catalog: Catalog) -> float:
    """The term's price per rented accelerator-hour (committed terms with their up-front financing)."""
    if term == "on_demand" and offer.on_demand_per_accelerator_hour is not None:
        return offer.on_demand_per_accelerator_hour
    if term == "interruptible" and offer.interruptible is not None:
        return offer.interruptible.per_accelerator_hour
    for commitment in offer.committed:
        if term == f"committed_{commitment.months}m":
            factor = upfront_financing_factor(upfront_fraction=commitment.upfront_fraction, months=commitment.months,
                                              cost_of_capital_annual=catalog.cost_of_capital_annual)
            return float(commitment.per_accelerator_hour * factor)
    terms = ["on_demand"] * (offer.on_demand_per_accelerator_hour is not None) + [
        f"committed_{c.months}m" for c in offer.committed] + ["interruptible"] * (offer.interruptible is not None)
    raise InvalidInput("the offer has no such term", [FieldProblem("term", f"{offer.id} offers {', '.join(terms)}")])


def _demand(request: FleetPlanIn, lookup: QuoteLookup | None, generator: np.random.Generator) -> np.ndarray:
    d = request.demand
    months = request.horizon_months
    if d.accelerator_hours_first_month is not None:
        return monthly_demand(first_month_hours=d.accelerator_hours_first_month, months=months,
                              doubling_months=d.doubling_months, spread=d.spread, samples=request.samples,
                              generator=generator)
    if d.monthly is not None:
        series = np.zeros(months)
        values = np.asarray(d.monthly[:months], dtype=np.float64)
        series[:values.size] = values
    else:
        series = _demand_from_quotes(request, lookup)
    noise = (generator.lognormal(-0.5 * d.spread**2, d.spread, size=(request.samples, months)) if d.spread
             else np.ones((request.samples, months)))
    return series * noise


def _demand_from_quotes(request: FleetPlanIn, lookup: QuoteLookup | None) -> np.ndarray:
    """Each quoted campaign's accelerator-hours at the site, spread over its recurrence."""
    ids = request.demand.from_quotes or []
    if lookup is None:
        raise InvalidInput("quotes live in the service's database",
                           [FieldProblem("demand.from_quotes", "give --database, or use monthly demand")])
    series = np.zeros(request.horizon_months)
    problems = []
    for k, (quote_id, stored) in enumerate(zip(ids, lookup(ids), strict=True)):
        if stored is None:
            problems.append(FieldProblem(f"demand.from_quotes.{k}", f"no quote {quote_id!r}"))
            continue
        option = next((o for o in stored.response["options"] if o["venue"]["id"] == request.site
                       and o["term"] == "owned_chargeback"), None)
        if option is None or option["timing"]["accelerator_hours"] is None:
            problems.append(FieldProblem(f"demand.from_quotes.{k}", f"quote {quote_id!r} has no option at "
                                         f"{request.site!r} to take the campaign's accelerator-hours from"))
            continue
        hours = float(option["timing"]["accelerator_hours"])
        recurrence = stored.request["campaign"].get("recurrence")
        if recurrence is None:
            series[0] += hours
        else:
            months = min(int(np.ceil(recurrence["for_months"])), request.horizon_months)
            series[:months] += hours / recurrence["every_months"]
    if problems:
        raise InvalidInput("some quotes cannot make demand", problems)
    return series


def fleet_plan(catalog_in: CatalogIn, request: FleetPlanIn, *, limits: FleetLimits,
               lookup: QuoteLookup | None = None) -> dict[str, Any]:
    """The plan's answer body (without the stored id)."""
    if request.candidate_nodes.count > limits.max_candidates:
        raise InvalidInput("the plan is too large", [FieldProblem(
            "candidate_nodes", f"{request.candidate_nodes.count:,} candidate sizes exceed the limit of "
                               f"{limits.max_candidates:,}; widen the step")])
    catalog = catalog_in.to_domain()
    site, offer = _venues(catalog, request)
    c = request.candidate_nodes
    # Keeping today's fleet is always a candidate.
    sizes = np.union1d(sizes_between(low=c.min, high=c.max, step=c.step), [site.nodes_owned]).astype(np.int64)
    cells = sizes.size * request.samples * request.horizon_months
    if cells > limits.max_cells:
        raise InvalidInput("the plan is too large", [FieldProblem(
            "candidate_nodes", f"{cells:,} sizes × samples × months exceed the limit of {limits.max_cells:,}")])
    stages = -(-request.horizon_months // request.decision_every_months)
    moves = sizes.size**2 * stages
    if moves > limits.max_stage_moves:
        raise InvalidInput("the staged plan is too large", [FieldProblem(
            "decision_every_months", f"{sizes.size:,} sizes² × {stages:,} decision points = {moves:,} moves exceed "
            f"the limit of {limits.max_stage_moves:,}; decide less often or give fewer candidate sizes")])
    economics = site_economics(site, catalog, Overrides())
    node = node_month(economics)
    variable = float(busy_energy_per_accelerator_hour(economics))
    site_speed = float(sustained_flops(site.node_type, request.precision, Overrides()))
    offer_speed = float(sustained_flops(offer.node_type, request.precision, Overrides()))
    if not (np.isfinite(site_speed) and np.isfinite(offer_speed)):
        raise InvalidInput("no peak figure for that precision", [FieldProblem("precision", request.precision)])
    listed = _rented_price(offer, request.term, catalog)
    # Demand is in the site's accelerator-hours; renting the same work takes speed-ratio as many.
    price = listed * site_speed / offer_speed
    resale_fraction = default("resale_fraction") if site.resale_fraction is None else site.resale_fraction
    fleet = FleetEconomics(
        accelerators_per_node=site.node_type.accelerators_per_node, fixed_per_node_month=float(node.total),
        variable_per_accelerator_hour=variable, rented_per_accelerator_hour=price,
        max_utilisation=request.max_utilisation, monthly_rate=float(monthly_rate(catalog.cost_of_capital_annual)),
        running_per_node_month=float(node.running), nodes_owned=site.nodes_owned,
        resale_per_node=resale_fraction * site.capex.node_price, capex_per_node=float(economics.capex_per_node))
    with np.errstate(over="ignore", invalid="ignore"):  # checked below
        demand = _demand(request, lookup, np.random.default_rng(request.seed))
    power_limit, why = _site_limit(site, float(economics.pue))
    allowed = (sizes <= power_limit) | (sizes == site.nodes_owned)
    with np.errstate(over="ignore", invalid="ignore"):
        plan = plan_fleet(sizes=sizes[allowed], demand=demand, economics=fleet,
                          decision_every_months=request.decision_every_months)
    if not (np.isfinite(demand).all() and np.isfinite(plan.present_cost).all()):
        # Fast doubling (0.01 months over 48) or huge figures overflow float64: the answer would
        # hold inf and nan, which JSON cannot carry.
        raise InvalidInput("the demand overflows", [FieldProblem(
            "demand", "it grows beyond floating-point range over the horizon; slow the doubling or lower it")])
    document = _document(catalog_in.currency, request, sizes, allowed, why, plan, fleet, listed, demand)
    document["resale_fraction"] = resale_fraction
    document["assumptions"] = [
        {"name": a.name, "value": a.value, "unit": a.unit, "source": a.source}
        for a in [DEFAULTS["resale_fraction"]] if site.resale_fraction is None]
    return document


def _site_limit(site: Site, pue: float) -> tuple[float, str]:
    """The largest fleet the site can hold, feed and cool, and what sets it."""
    peak = site.node_type.power_kw_peak
    bounds = {"the site's nodes_max": float(site.nodes_max)}
    if site.power_capacity_kw is not None:
        bounds["facility power"] = np.floor(site.power_capacity_kw / (peak * pue) + 1e-9)
    if site.cooling_capacity_kw is not None:
        bounds["cooling"] = np.floor(site.cooling_capacity_kw / peak + 1e-9)
    name = min(bounds, key=lambda k: bounds[k])
    return bounds[name], f"more than {bounds[name]:,.0f} nodes exceed {name} at {site.id}"


def _document(currency: str, request: FleetPlanIn, sizes: np.ndarray, allowed: np.ndarray, why: str,
              plan: FleetPlan, fleet: FleetEconomics, listed: float, demand: np.ndarray) -> dict[str, Any]:
    money = Money(currency)
    p5, p50, p95 = np.percentile(plan.present_cost, (5, 50, 95), axis=1)
    mean = plan.expected_present_cost
    feasible_rows = iter(range(plan.sizes.size))
    candidates = []
    for n, ok in zip(sizes.tolist(), allowed.tolist(), strict=True):
        if not ok:  # the same fields as a feasible size, with nothing to say in them
            candidates.append({"nodes": n, "feasible": False, "reason": why, "present_cost_p5": None,
                               "present_cost_p50": None, "present_cost_p95": None, "present_cost_mean": None,
                               "currency": currency, "owned_utilisation": None, "rented_accelerator_hours": None})
            continue
        k = next(feasible_rows)
        candidates.append({
            "nodes": n, "feasible": True, "reason": None,
            "present_cost_p5": money(p5[k]), "present_cost_p50": money(p50[k]), "present_cost_p95": money(p95[k]),
            "present_cost_mean": money(mean[k]), "currency": currency,
            "owned_utilisation": _share(plan.owned_hours[k], plan.capacity_hours[k]),
            "rented_accelerator_hours": round(float(plan.rented_hours[k]), 1)})
    best = int(plan.sizes[plan.best])
    single = {"nodes": best, "added": max(best - fleet.nodes_owned, 0), "retired": max(fleet.nodes_owned - best, 0),
              **_spread(plan.present_cost[plan.best], money)}
    staged = {**_spread(plan.staged_present_cost, money),
              "saving_vs_single_purchase": money(mean[plan.best] - plan.staged_present_cost.mean())}
    m = plan.months
    months = [{"month": t + 1, "nodes": int(n), "demand_accelerator_hours": round(float(d), 1),
               "owned_accelerator_hours": round(float(o), 1), "rented_accelerator_hours": round(float(r), 1),
               "spend": money(s), "currency": currency, "utilisation": _share(o, c)}
              for t, (n, d, o, r, s, c) in enumerate(zip(m.nodes, demand.mean(axis=0), m.owned_hours, m.rented_hours,
                                                          m.spend, m.capacity_hours, strict=True))]
    ratio = critical_ratio(fleet) if fleet.rented_per_accelerator_hour > fleet.variable_per_accelerator_hour else None
    probability = plan.probability_owning_beats_renting
    return {
        "site": request.site, "offer": request.offer, "term": request.term, "currency": currency,
        "horizon_months": request.horizon_months, "samples": request.samples, "seed": request.seed,
        "nodes_owned": fleet.nodes_owned, "decision_every_months": request.decision_every_months,
        "owned_fixed_per_node_month": money(fleet.fixed_per_node_month),
        "owned_running_per_node_month": money(fleet.running),
        "owned_variable_per_accelerator_hour": round(fleet.variable_per_accelerator_hour, 4),
        "resale_per_node": money(fleet.resale_per_node),
        "rented_listed_per_accelerator_hour": round(listed, 4),
        "rented_per_accelerator_hour": round(fleet.rented_per_accelerator_hour, 4),
        "max_utilisation": round(fleet.max_utilisation, 4),
        "usable_accelerator_hours_per_node_month": round(
            fleet.accelerators_per_node * HOURS_PER_MONTH * fleet.max_utilisation, 1),
        "stages": _stages(plan, money),
        "staged": staged,
        "single_purchase": single,
        "cash_flow": _cash_flow(m, money),
        "value_at_horizon_end": money(m.value_at_end),
        "candidates": candidates,
        "best_nodes": best,
        "probability_owning_beats_renting": None if np.isnan(probability) else round(probability, 4),
        "critical_ratio": None if ratio is None else round(ratio, 4),
        "months": months,
        "notes": [
            f"The plan starts from the {fleet.nodes_owned} nodes the site owns today. Their capital is sunk: keeping "
            "them costs their running cost (facility, maintenance, staff, idle energy); retiring one returns its "
            "resale value.",
            f"Every {request.decision_every_months} months the fleet may grow or retire nodes. The stages are the "
            "sequence of fleet sizes with the lowest expected present cost over the candidate sizes, found exactly by "
            "dynamic programming (Bellman 1957, Dynamic Programming, the principle of optimality).",
            "A node bought in the plan is charged the site's capital annuity (capex less residual over the "
            "depreciation months) for every month left in the horizon; the cash flow shows the purchase when it is "
            "paid, and value_at_horizon_end what the bought nodes are still worth on that annuity.",
            "The single-purchase row is the best fleet bought (or retired to) now and held for the whole horizon.",
            "Demand is in accelerator-hours of the site's node type; rented hours are converted by the ratio "
            "of sustained FLOP/s of the two accelerators.",
            "Each month is paid at its end and discounted at the catalog's cost of capital / 12.",
            "Committed terms are priced per hour with their up-front financing; their block sizes are not modelled.",
            "The probability compares the best single purchase with renting everything, when 0 nodes is a candidate.",
        ],
        "cautions": list(CAUTIONS),
    }


def _share(part: float, whole: float) -> float | None:
    """A fraction for display and JSON: 4 decimals, as quotes give utilisation."""
    return round(float(part / whole), 4) if whole else None


def _spread(costs: np.ndarray, money: Money) -> dict[str, Any]:
    p5, p50, p95 = np.percentile(costs, (5, 50, 95))
    return {"present_cost_mean": money(costs.mean()), "present_cost_p5": money(p5), "present_cost_p50": money(p50),
            "present_cost_p95": money(p95), "currency": money.currency}


def _stages(plan: FleetPlan, money: Money) -> list[dict[str, Any]]:
    """One row per change of the fleet, and the first decision point: a run of decision points
    that keep the fleet is one stage."""
    m = plan.months
    nodes = plan.staged_nodes
    changed = np.flatnonzero(np.concatenate([[True], nodes[1:] != nodes[:-1]]))
    first_months = plan.stages.starts[changed]
    ends = np.append(first_months[1:], m.nodes.size)
    rows = []
    for begin, end in zip(first_months.tolist(), ends.tolist(), strict=True):
        span = slice(begin, end)
        rows.append({
            "month": begin + 1, "until_month": end, "nodes": int(m.nodes[begin]), "added": int(m.added[begin]),
            "retired": int(m.retired[begin]), "purchase": money(m.purchases[begin]), "resale": money(m.resale[begin]),
            "rented_accelerator_hours": round(float(m.rented_hours[span].sum()), 1),
            "owned_utilisation": _share(m.owned_hours[span].sum(), m.capacity_hours[span].sum()),
            "currency": money.currency})
    return rows


def _cash_flow(m: MonthlyPlan, money: Money) -> list[dict[str, Any]]:
    """Cash by year of the horizon: purchases less resale, running and busy energy, rent."""
    year = np.arange(m.nodes.size) // 12

    def by_year(values: np.ndarray) -> np.ndarray:
        return np.bincount(year, weights=values)

    capital, operating, rent = by_year(m.purchases - m.resale), by_year(m.running + m.energy), by_year(m.rent)
    rented = by_year(m.rented_hours)
    return [{"year": y + 1, "capital": money(capital[y]), "operating": money(operating[y]), "rent": money(rent[y]),
             "total": money(capital[y] + operating[y] + rent[y]),
             "rented_accelerator_hours": round(float(rented[y]), 1), "currency": money.currency}
            for y in range(capital.size)]


def create_fleet_plan(storage: Storage, catalogs: ParsedCatalogs, request: FleetPlanIn, *, now: datetime,
                      limits: FleetLimits, keep: KeepAnswer | None = None) -> Created:
    """Plan, store and return the plan with its id and links. `keep` (from `once_per_key`) is given
    the answer in the transaction that stores the plan."""
    stored = catalog_to_use(storage, request.catalog_id, field="catalog_id", on=now.date())

    def lookup(ids: Sequence[str]) -> list[StoredQuote | None]:
        with storage.reading() as repository:
            return repository.quotes_by_id(list(ids))

    body = fleet_plan(catalogs.get(stored, storage), request, limits=limits, lookup=lookup)
    plan_id = new_id("fp")
    document = {"id": plan_id, "created_at": now.isoformat().replace("+00:00", "Z"), "catalog_id": stored.id,
                **body, "links": {"self": f"/v1/fleet-plans/{plan_id}",
                                  "chart_svg": f"/v1/fleet-plans/{plan_id}/chart.svg",
                                  "report": f"/v1/fleet-plans/{plan_id}/report"}}
    with storage.writing() as repository:
        repository.add_fleet_plan(plan_id=plan_id, created_at=now, catalog_id=stored.id,
                                  request=request.model_dump(mode="json"), response=document)
        if keep is not None:
            keep(repository, 201, document)
    return Created(201, document)


def find_fleet_plans(storage: Storage, *, limit: int, cursor: str | None) -> tuple[list[dict[str, Any]], str | None]:
    """A page of fleet plans, newest first: what each sized and its answer's headline."""
    with storage.reading() as repository:
        items, next_cursor = repository.fleet_plans(limit=limit, cursor=cursor)
    listed = [{"id": p.id, "created_at": p.created_at.isoformat().replace("+00:00", "Z"), "catalog_id": p.catalog_id,
               **{k: p.response.get(k) for k in ("site", "offer", "term", "best_nodes",
                                                 "probability_owning_beats_renting", "currency")},
               "links": p.response.get("links", {"self": f"/v1/fleet-plans/{p.id}"})} for p in items]
    return listed, next_cursor


def get_fleet_plan(storage: Storage, plan_id: str) -> dict[str, Any]:
    with storage.reading() as repository:
        document = repository.fleet_plan(plan_id)
    if document is None:
        raise NotFound(f"no fleet plan {plan_id!r}")
    return document
