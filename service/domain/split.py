"""Hybrid splits: a campaign's runs divided between an owned site's free capacity and the
cheapest feasible rented option, both running at once (model.md §9).

Each part is evaluated as a campaign of its own runs (and its share of the results to send out), a
scenario of the campaign's own evaluation, so each pays its own data transfer and passes its own
screens, residency included; the split's wall clock is the longer part's. A split is offered only
when it beats both pure options of its pair, or when neither pure option is feasible.
"""

from collections.abc import Callable
from dataclasses import fields, replace

import numpy as np

from service.domain.arrays import take_rows
from service.domain.campaign import Campaign, Overrides, QuoteOptions, Runs
from service.domain.catalog import Catalog
from service.domain.evaluate import CampaignEvaluation, OptionResult, evaluate_campaign
from service.domain.layout import LayoutGrid
from service.domain.residency import admits, allowed_jurisdictions
from service.domain.screens import CAPACITY, MEMORY, OWNED_ONLY, PINNED_TOO_FEW, PRECISION, RESIDENCY
from service.domain.terms import Energy

MAX_SPLIT_POINTS = 8  # how many ways of dividing the runs are tried, evenly spaced
OWNED_TERMS = ("owned_chargeback", "owned_new_build")
# Screens that do not depend on how many runs an option takes: a part of the runs cannot lift them.
STANDING = RESIDENCY | OWNED_ONLY | PRECISION | MEMORY | PINNED_TOO_FEW | CAPACITY


def split_points(run_count: int) -> list[int]:
    """Owned run counts to try: 1 … count − 1, at most MAX_SPLIT_POINTS of them."""
    if run_count < 2:
        return []
    points = np.unique(np.round(np.linspace(1, run_count - 1, min(run_count - 1, MAX_SPLIT_POINTS))))
    return [int(p) for p in points]


def _part(campaign: Campaign, runs: np.ndarray, total_runs: int) -> Campaign:
    share = runs / total_runs
    data = replace(campaign.data, results_egress_tb=np.asarray(campaign.data.results_egress_tb) * share)
    return replace(campaign, runs=Runs(runs, campaign.runs.exploration_fraction, campaign.runs.evaluation_fraction),
                   data=data)


def evaluate_with_splits(catalog: Catalog, campaign: Campaign, options: QuoteOptions,
                         overrides: Overrides | None = None) -> CampaignEvaluation:
    """The campaign's evaluation and, for a single-scenario quote, the best split of each owned site
    with the rented options, added to its options. The campaign and both parts at every split point
    are scenarios of one evaluation (the campaign first, then the owned part at each point, then the
    rented part): each venue's shapes, step table and deadline search are then made once for all of
    them, as only the runs (and the share of the results sent out) differ."""
    total = _runs_to_split(catalog, campaign, options)
    points = split_points(total)
    if not points:
        return evaluate_campaign(catalog, campaign, options, overrides)
    owned_runs = np.array(points, dtype=np.float64)
    runs = np.concatenate([[float(total)], owned_runs, total - owned_runs])
    together = evaluate_campaign(catalog, _part(campaign, runs, total), options, overrides)
    evaluation: CampaignEvaluation = take_rows(together, slice(0, 1), runs.size)
    return replace(evaluation, options=evaluation.options + tuple(split_options(together, points, total)))


def _runs_to_split(catalog: Catalog, campaign: Campaign, options: QuoteOptions) -> int:
    """The runs a single-scenario quote may divide between an owned site and a rented option, or 0
    (no split point) when it may not: one scenario, owned capacity lent by chargeback, rented terms asked for, rented
    venues allowed, and some site and some offer where the data may go (residency: the one standing
    screen known before the evaluation; `split_options` checks the others)."""
    count = campaign.runs.count
    if np.ndim(count) != 0 or "owned_chargeback" not in options.terms or campaign.data.owned_only:
        return 0
    if not any(term not in OWNED_TERMS for term in options.terms):
        return 0
    allowed = allowed_jurisdictions(campaign.data.allowed_jurisdictions, catalog.jurisdiction_groups)
    if not all(any(admits(allowed, venue.jurisdiction) for venue in venues)
               for venues in (catalog.sites, catalog.offers)):
        return 0
    return int(np.asarray(count))


def split_options(together: CampaignEvaluation, points: list[int], total: int) -> list[OptionResult]:
    """The best split of each owned site with the rented options. `together` holds every option at the
    campaign's runs (scenario 0, the pure options the splits must beat), then at the owned share of
    the runs at each split point, then at the rented share."""
    owned_options = [o for o in together.options if o.term == "owned_chargeback"]
    rented_options = [o for o in together.options if o.term not in OWNED_TERMS]
    if not (_could_take_a_part(owned_options) and _could_take_a_part(rented_options)):
        return []  # every owned or every rented option is ruled out whatever its share of the runs
    rows, count = 1 + 2 * len(points), len(points)
    # Per owned site, its cheapest split: (total, point, owned option, rented option), the total as the
    # combined option sums it; only that one is then combined.
    best: dict[str, tuple[float, int, OptionResult, OptionResult]] = {}
    for k in range(count):
        owned_row, rented_row = 1 + k, 1 + count + k
        feasible_rented = [o for o in rented_options if bool(o.feasible[rented_row])]
        if not feasible_rented:
            continue
        cheapest = min(feasible_rented, key=lambda o: float(o.total[rented_row]))
        for owned in owned_options:
            if not bool(owned.feasible[owned_row]):
                continue
            split_total = float(owned.total[owned_row] + cheapest.total[rented_row])
            key = owned.venue_id
            if key not in best or split_total < best[key][0]:
                best[key] = (split_total, k, owned, cheapest)
    pure = {o.label: o for o in together.options}
    splits = (combine(take_rows(owned, slice(1 + k, 2 + k), rows),
                      take_rows(rented, slice(1 + count + k, 2 + count + k), rows),
                      owned_runs=points[k], rented_runs=total - points[k])
              for _, k, owned, rented in best.values())
    return [s for s in splits if _worth_showing(s, pure)]


def _could_take_a_part(options: list[OptionResult]) -> bool:
    """Whether some option is free, at the campaign's own runs (its first scenario), of the screens a
    smaller share of the runs cannot lift."""
    return any(not int(np.asarray(o.screens).reshape(-1)[0]) & STANDING for o in options)


def _worth_showing(split: OptionResult, pure: dict[str, OptionResult]) -> bool:
    owned, rented = split.parts
    rivals = [pure.get(f"{owned.venue_id}/{owned.term}"), pure.get(f"{rented.venue_id}/{rented.term}")]
    feasible = [r for r in rivals if r is not None and bool(r.feasible[0])]
    return all(float(split.total[0]) < float(r.total[0]) for r in feasible)


def combine(owned: OptionResult, rented: OptionResult, *, owned_runs: int, rented_runs: int) -> OptionResult:
    """One option made of two parts running at the same time."""
    hours = owned.layout.accelerator_hours + rented.layout.accelerator_hours

    def weighted(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        return np.asarray((a * owned.layout.accelerator_hours + b * rented.layout.accelerator_hours) / hours)

    layout = LayoutGrid(**{f.name: _combined(f.name, owned.layout, rented.layout, weighted)
                           for f in fields(LayoutGrid) if f.name != "accelerator_hours"}, accelerator_hours=hours)
    e, f = owned.energy, rented.energy
    lines = {f"{owned.venue_id}: {k}": v for k, v in owned.lines.items()}
    lines.update({f"{rented.venue_id}: {k}": v for k, v in rented.lines.items()})
    return OptionResult(
        venue_kind="split",
        venue_id=f"{owned.venue_id}+{rented.venue_id}",
        jurisdiction=f"{owned.jurisdiction}+{rented.jurisdiction}",
        term="split",
        node_type=owned.node_type,
        layout=layout,
        screens=owned.screens | rented.screens,
        min_nodes=owned.min_nodes,
        needed_nodes=owned.needed_nodes,
        limit=owned.limit,
        lines=lines,
        total=owned.total + rented.total,
        energy=Energy(e.it_kwh + f.it_kwh, e.facility_kwh + f.facility_kwh, e.peak_it_kw + f.peak_it_kw,
                      e.cooling_kw_thermal + f.cooling_kw_thermal, e.kgco2e + f.kgco2e),
        transfer=rented.transfer,
        staging_seconds=np.maximum(owned.staging_seconds, rented.staging_seconds),
        sustained_flops_per_accelerator=owned.sustained_flops_per_accelerator,
        details={"owned_runs": np.full_like(hours, owned_runs), "rented_runs": np.full_like(hours, rented_runs)},
        parts=(owned, rented),
    )


# How a split's two layouts, running at the same time, combine into one figure (the layout's shape
# is the owned part's; the rented part's is in `parts`).
_SUMMED = {"nodes", "accelerators"}
_SLOWER = {"state_bytes", "activation_bytes", "compute_seconds", "bubble_seconds", "tensor_seconds",
           "pipeline_seconds", "data_seconds", "data_exposed_seconds", "step_seconds", "checkpoint_seconds",
           "wall_seconds"}
_WEIGHTED = {"scaling_efficiency", "exposed_fraction", "failure_overhead"}


def _combined(name: str, owned: LayoutGrid, rented: LayoutGrid,
              weighted: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> np.ndarray:
    a, b = getattr(owned, name), getattr(rented, name)
    if name in _SUMMED:
        return np.asarray(a + b)
    if name in _SLOWER:
        return np.asarray(np.maximum(a, b))
    if name in _WEIGHTED:
        return weighted(a, b)
    if name == "fits":
        return np.asarray(a & b)
    if name == "network_gbps_needed":
        return np.asarray(np.fmax(a, b))
    if name == "checkpoint_interval_seconds":
        return np.asarray(np.fmin(a, b))
    return np.asarray(a)
