"""Comparing options: ranking, break-even of every owned site against every rented price, and
the chargeback curves (model.md §8-9). Vectorised over scenarios."""

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, fields
from functools import cached_property

import numpy as np

from service.domain.arrays import Bools, Floats, Ints, broadcast, scenario_value
from service.domain.breakeven import (
    CURVE_UTILISATIONS,
    BreakEven,
    Payback,
    break_even,
    breakeven_utilisation,
    chargeback_curve,
    payback,
    within_reach,
)
from service.domain.campaign import OwnedCostView, RankBy
from service.domain.compiled import Kernel, reached_utilisations
from service.domain.evaluate import CampaignEvaluation, OptionResult, SiteFigures
from service.domain.programme import MAX_CASH_FLOW_MONTHS, programme_total
from service.domain.recurrence import instances_by_month
from service.domain.units import HOURS_PER_MONTH


def ranking_keys(option: OptionResult, evaluation: CampaignEvaluation, rank_by: RankBy,
                 view: OwnedCostView = "full", programme: Floats | None = None) -> tuple[Floats, Floats, Floats]:
    """Sort keys, most significant first: the programme's total cost in the chosen view of owned
    cost (one instance's for a one-off campaign), then wall clock, then carbon; `rank_by` brings
    wall clock or carbon to the front. Unknown carbon sorts last. `programme` is the option's
    `programme_total` in the view where the caller has it already."""
    order = [rank_by] + [k for k in ("cost", "wall_clock", "carbon") if k != rank_by]
    first, second, third = (ranking_key(option, evaluation, key, view, programme) for key in order)
    return first, second, third


def ranking_key(option: OptionResult, evaluation: CampaignEvaluation, key: RankBy,
                view: OwnedCostView = "full", programme: Floats | None = None) -> Floats:
    """One of `ranking_keys`, made alone."""
    if key == "cost":
        return programme_total(option, evaluation, view) if programme is None else programme
    if key == "wall_clock":
        return np.asarray(option.layout.wall_seconds, dtype=np.float64)
    return np.where(np.isnan(option.energy.kgco2e), np.inf, option.energy.kgco2e)


def cheapest(evaluation: CampaignEvaluation, rank_by: RankBy = "cost", view: OwnedCostView = "full") -> Ints:
    """Per scenario, the index of the best feasible option by the first ranking key; -1 if none."""
    options = evaluation.options
    firsts = np.stack(np.broadcast_arrays(*[np.where(o.feasible, ranking_key(o, evaluation, rank_by, view), np.inf)
                                            for o in options]))
    best = np.argmin(firsts, axis=0)
    return np.where(np.isfinite(firsts.min(axis=0)), best, -1).astype(np.int64)


def rank(evaluation: CampaignEvaluation, i: int, rank_by: RankBy, view: OwnedCostView = "full",
         programme: Sequence[Floats] | None = None) -> list[int]:
    """Option indices in the order people should read them for scenario i: feasible ones by
    the ranking keys, then the infeasible ones by cost. `programme` holds each option's
    `programme_total` in the view, in the evaluation's order, where the caller has them already."""
    options = evaluation.options

    def key(k: int) -> tuple[bool, float, float, float]:
        first, second, third = (float(scenario_value(v, i)) for v in ranking_keys(
            options[k], evaluation, rank_by, view, None if programme is None else programme[k]))
        return (not bool(options[k].feasible[i]), first, second, third)
    return sorted(range(len(options)), key=key)


def listed_rented_price(option: OptionResult) -> Floats:
    """The rented price per accelerator-hour after overrides; a committed term's at full use of the
    commitment, with its up-front share financed at the cost of capital."""
    price = option.details["price_per_accelerator_hour"]
    if option.term.startswith("committed_"):
        return price * option.details["financing_factor"]
    return price


def work_conversion(rented: OptionResult, owned: OptionResult) -> Floats:
    """Rented accelerator-hours that do the work of one owned accelerator-hour: the owned
    accelerator's sustained FLOP/s over the rented one's (relative speed on this work); for
    interruptible capacity also × (1 + its share of hours lost to interruptions and failures) /
    (1 + the owned site's). One value where both speeds are one for every scenario (a view repeats
    them), else one per scenario."""
    speed = _one_where_repeated(owned.sustained_flops_per_accelerator) / _one_where_repeated(
        rented.sustained_flops_per_accelerator)
    if rented.term != "interruptible":
        return np.asarray(speed)
    return np.asarray(speed * (1.0 + rented.layout.failure_overhead) / (1.0 + owned.layout.failure_overhead))


def _one_where_repeated(values: Floats) -> Floats:
    """A per-scenario figure as its one value where it repeats one (a view of stride 0, as
    `arrays.broadcast` makes), so that what is made of it is not made once per scenario."""
    array = np.asarray(values)
    return array[:1] if array.ndim == 1 and array.strides == (0,) else array


@dataclass(frozen=True)
class BreakEvenRow:
    site: str
    offer: str
    term: str
    owned: OptionResult  # the site's option whose speed converts the rented work (its chargeback, else its first)
    rented: OptionResult
    rented_listed_per_accelerator_hour: Floats
    conversion: Floats  # rented accelerator-hours per owned accelerator-hour of work
    rented_per_accelerator_hour: Floats  # listed × conversion
    owned_fixed_per_month: Floats
    owned_variable_per_accelerator_hour: Floats
    figures: BreakEven
    payback: Payback | None


@dataclass(frozen=True)
class _Rented:
    """Every rented option with its listed price and whether it is ruled out, each one value or one per
    scenario (the same against every owned site); stacked (rented, scenarios) when asked."""

    options: list[OptionResult]
    listed_each: list[Floats]
    ruled_out_each: list[Bools]

    @cached_property
    def listed(self) -> Floats:
        return np.stack(np.broadcast_arrays(*self.listed_each))

    @cached_property
    def ruled_out(self) -> Bools:
        return np.stack(np.broadcast_arrays(*self.ruled_out_each))


@dataclass(frozen=True)
class _AgainstRented:
    """An owned site against every rented option: per rented option, its conversion to owned work, one
    value or one per scenario; the prices (rented, scenarios) in owned work when asked."""

    site_id: str
    site: SiteFigures
    reference: OptionResult  # its chargeback option, whose campaign the demand counts
    new_build: OptionResult
    rented: _Rented
    conversion_each: list[Floats]

    @cached_property
    def conversion(self) -> Floats:
        return np.stack(np.broadcast_arrays(*self.conversion_each))

    @cached_property
    def prices(self) -> Floats:
        return np.asarray(self.rented.listed * self.conversion)


def _against_rented(evaluation: CampaignEvaluation) -> Iterator[_AgainstRented]:
    options = [o for o in evaluation.options if o.venue_kind == "rented"]
    if not options:
        return
    rented = _Rented(options, [listed_rented_price(o) for o in options], [~o.feasible for o in options])
    for site_id, site in evaluation.sites.items():
        owned = [o for o in evaluation.options if o.venue_kind == "owned" and o.venue_id == site_id]
        if not owned:
            continue
        reference = next((o for o in owned if o.term == "owned_chargeback"), owned[0])
        new_build = next((o for o in owned if o.term == "owned_new_build"), reference)
        yield _AgainstRented(site_id, site, reference, new_build, rented,
                             [work_conversion(o, reference) for o in options])


def breakeven_rows(evaluation: CampaignEvaluation) -> list[BreakEvenRow]:
    """One row per (owned site, rented offer, term); a rented option that failed a screen in a
    scenario has no break-even there (`figures.ruled_out`)."""
    rows = []
    for against in _against_rented(evaluation):
        site, prices, new_build = against.site, against.prices, against.new_build
        s = site.economics.site
        fleet = np.asarray(float(s.nodes_owned)) if s.nodes_owned else new_build.layout.nodes
        figures = break_even(
            fixed_per_node_month=site.node.total, accelerators_per_node=s.node_type.accelerators_per_node,
            variable_per_accelerator_hour=site.variable_per_accelerator_hour, rented_per_accelerator_hour=prices,
            fleet_nodes=fleet, campaign_accelerator_hours=against.reference.layout.accelerator_hours,
            ruled_out=against.rented.ruled_out)
        paid = _payback(evaluation, against.site_id, new_build, prices)
        stacked = {f.name: broadcast(getattr(figures, f.name), prices.shape) for f in fields(figures)}
        paid_by = {f.name: getattr(paid, f.name) for f in fields(paid)}
        for r, option in enumerate(against.rented.options):
            rows.append(BreakEvenRow(
                against.site_id, option.venue_id, option.term, against.reference, option, against.rented.listed[r],
                against.conversion[r],
                prices[r], site.node.total, site.variable_per_accelerator_hour,
                BreakEven(**{name: values[r] for name, values in stacked.items()}),
                Payback(**{name: values[r] for name, values in paid_by.items()})))
    return rows


def breakeven_utilisations(evaluation: CampaignEvaluation, scenarios: int,
                           kernel: Kernel | None = None) -> tuple[list[tuple[str, str, str]], Floats]:
    """What a sweep reads of `breakeven_rows`: each row's (site, offer, term) and its break-even
    utilisation over the `scenarios` (`BreakEven.utilisation`: NaN where it is out of reach or ruled
    out), made alone into one (rows, S) array; by the compiled `kernel` where one is given
    (`compiled.reached_utilisations`, the same figures, written in place)."""
    against_each = list(_against_rented(evaluation))
    labels = [(against.site_id, option.venue_id, option.term) for against in against_each
              for option in against.rented.options]
    utilisations = np.empty((len(labels), scenarios))
    row = 0
    for against in against_each:
        site, rented = against.site, against.rented
        block = utilisations[row:row + len(rented.options)]
        row += len(rented.options)
        per_node = site.economics.site.node_type.accelerators_per_node
        if kernel is not None:
            reached_utilisations(site.node.total, per_node, site.variable_per_accelerator_hour, rented.listed_each,
                                 against.conversion_each, rented.ruled_out_each, kernel, out=block)
            continue
        u = breakeven_utilisation(
            fixed_per_node_month=site.node.total, accelerators_per_node=per_node,
            variable_per_accelerator_hour=site.variable_per_accelerator_hour,
            rented_per_accelerator_hour=against.prices)
        block[...] = np.where(within_reach(u, rented.ruled_out), u, np.nan)
    return labels, utilisations


def _payback(evaluation: CampaignEvaluation, site_id: str, new_build: OptionResult, prices: Floats) -> Payback:
    """Payback of the nodes a new build for this campaign buys, for the stated demand: the
    campaign's instances plus background work at the site's current utilisation."""
    site = evaluation.sites[site_id]
    s = site.economics.site
    nodes = new_build.layout.nodes
    life = min(s.depreciation_months, MAX_CASH_FLOW_MONTHS)
    campaign = (instances_by_month(evaluation.recurrence, life)
                * np.asarray(new_build.layout.accelerator_hours)[..., np.newaxis])
    figures = payback(
        capex=nodes * site.economics.capex_per_node, running_per_month=nodes * site.node.running,
        capacity_hours_per_month=nodes * s.node_type.accelerators_per_node * HOURS_PER_MONTH,
        campaign_hours_by_month=campaign, background_utilisation=s.utilisation_current,
        rented_per_accelerator_hour=prices, variable_per_accelerator_hour=site.variable_per_accelerator_hour,
        cost_of_capital_annual=site.economics.cost_of_capital_annual)
    shape = prices.shape
    return Payback(**{f.name: broadcast(getattr(figures, f.name), shape) for f in fields(figures)})


def curves(evaluation: CampaignEvaluation) -> dict[str, Floats]:
    """c(u) for each owned site on CURVE_UTILISATIONS: (S, U) arrays by site id."""
    return {
        site_id: chargeback_curve(
            fixed_per_node_month=site.node.total,
            accelerators_per_node=site.economics.site.node_type.accelerators_per_node,
            variable_per_accelerator_hour=site.variable_per_accelerator_hour)
        for site_id, site in evaluation.sites.items()
    }


__all__ = ["CURVE_UTILISATIONS", "BreakEvenRow", "breakeven_rows", "breakeven_utilisations", "cheapest", "curves",
           "rank", "work_conversion"]
