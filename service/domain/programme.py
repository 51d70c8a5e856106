"""A campaign's whole programme and the two views of owned cost (model.md §6).

Views: `full` charges owned capacity its chargeback at the planned utilisation (every cost line);
`incremental` only what running the campaign adds to the site: its busy energy and data lines,
and the fixed cost of any nodes beyond the site's free capacity at its current utilisation (a new
build buys all its nodes, so both views agree there). Rented capacity costs the same in both.

Programme: every instance of a recurring campaign, with the commitments they share (a new build's
nodes, a committed term) bought whole. Cash flow: money by month as it is paid, each month's at its
start (capital when bought and the residual back in the life's last month; running costs monthly;
committed fees up front and monthly; each instance's own costs in the month it starts), summed by
year, and its present value at the cost of capital. Vectorised over scenarios.
"""

import functools
from dataclasses import dataclass
from typing import Literal

import numpy as np

from service.domain.arrays import Floats, as_floats, broadcast
from service.domain.campaign import OwnedCostView
from service.domain.evaluate import CampaignEvaluation, OptionResult, sum_lines
from service.domain.finance import monthly_rate, present_value
from service.domain.recurrence import instances_by_month, programme_months, starts_by_month
from service.domain.units import HOURS_PER_MONTH, MONTHS_PER_YEAR

FIXED_ITEMS = ("capital", "facility", "maintenance", "staff", "idle_energy")  # an owned node's month
MAX_CASH_FLOW_MONTHS = 1200  # a programme longer than a century has no cash flow (NaN), only its totals
Column = Literal["capital", "operating", "rent"]


def column_of(item: str) -> Column:
    """Where a cost line goes in a cash flow ("site: capital" is a split's line of one part)."""
    base = item.rsplit(": ", 1)[-1]
    if base == "capital":
        return "capital"
    if base in ("compute", "commitment"):
        return "rent"
    return "operating"


def free_nodes(option: OptionResult, evaluation: CampaignEvaluation) -> Floats:
    """A site's free nodes at its current utilisation: ⌊owned × (1 − current)⌋ (none for a new build,
    which buys every node it uses)."""
    site = evaluation.sites[option.venue_id].economics.site
    if option.term == "owned_new_build":
        return np.asarray(0.0)
    return np.asarray(np.floor(site.nodes_owned * (1.0 - site.utilisation_current) + 1e-9))


def beyond_free_share(option: OptionResult, evaluation: CampaignEvaluation) -> Floats:
    """The share of an owned option's nodes beyond the site's free capacity: its fixed cost is
    incremental in that share."""
    nodes = option.layout.nodes
    extra = np.clip(nodes - free_nodes(option, evaluation), 0.0, nodes)
    return np.asarray(extra / np.where(nodes > 0, nodes, 1.0))


def view_lines(option: OptionResult, evaluation: CampaignEvaluation, view: OwnedCostView) -> dict[str, Floats]:
    """An option's cost lines in a view: in `incremental`, an owned option's fixed lines count only
    for its nodes beyond the site's free capacity; a split's parts each in the view."""
    if option.parts:
        return {f"{part.venue_id}: {item}": amount for part in option.parts
                for item, amount in view_lines(part, evaluation, view).items()}
    if view == "full" or option.venue_kind != "owned":
        return option.lines
    share = beyond_free_share(option, evaluation)
    return {item: amount * share if item in FIXED_ITEMS else amount for item, amount in option.lines.items()}


def view_total(option: OptionResult, evaluation: CampaignEvaluation, view: OwnedCostView) -> Floats:
    """One instance's cost in a view: the sum of its lines in that view."""
    if view == "full" or option.venue_kind == "rented":
        return option.total
    return sum_lines(view_lines(option, evaluation, view).values())


def shared_items(option: OptionResult) -> tuple[str, ...]:
    """The cost lines that are an instance's share of a commitment bought whole: a new build's
    node-months, a committed fee; none for terms that commit to nothing."""
    if option.term == "owned_new_build":
        return FIXED_ITEMS
    if option.term.startswith("committed_"):
        return ("commitment",)
    return ()


def term_months(option: OptionResult) -> float:
    """A committed term's length: `committed_12m` → 12."""
    return float(option.term.removeprefix("committed_").removesuffix("m"))


def shared_per_instance(option: OptionResult) -> Floats:
    """The part of one instance's cost that is its share of a commitment bought whole."""
    items = shared_items(option)
    return sum_lines(option.lines[item] for item in items) if items else np.zeros_like(option.total)


def commitments(option: OptionResult, evaluation: CampaignEvaluation) -> Floats:
    """How many commitments (node purchases, committed terms) the programme buys: ⌈N / sharing⌉."""
    sharing = option.details.get("sharing_instances")
    if sharing is None:
        return np.zeros_like(option.total)
    return np.ceil(evaluation.instances_total / sharing - 1e-9)


def programme_total(option: OptionResult, evaluation: CampaignEvaluation, view: OwnedCostView) -> Floats:
    """Every instance of the programme in a view: N × the per-instance total, plus the unused part
    of the last commitment when the instances do not fill it: (⌈N / s⌉ · s − N) × the shared part
    of one instance, s instances sharing each commitment."""
    n = evaluation.instances_total
    total = n * view_total(option, evaluation, view)
    sharing = option.details.get("sharing_instances")
    if sharing is None:
        return np.asarray(total)
    return np.asarray(total + (commitments(option, evaluation) * sharing - n) * shared_per_instance(option))


@dataclass(frozen=True)
class CashFlow:
    """Money paid by month, at the start of months t = 0 (now) … M − 1: (S, M) arrays."""

    capital: Floats
    operating: Floats
    rent: Floats

    @functools.cached_property
    def total(self) -> Floats:
        return np.asarray(self.capital + self.operating + self.rent)

    def by_year(self) -> "CashFlow":
        """Summed by year: year y holds months 12(y − 1) … 12y − 1."""
        one_hot = _years_of_months(self.capital.shape[-1])
        return CashFlow(self.capital @ one_hot, self.operating @ one_hot, self.rent @ one_hot)


@functools.lru_cache(maxsize=64)
def _years_of_months(months: int) -> Floats:
    """(months, years): 1 where month m lies in year y; read-only, as every cash flow of that length shares it."""
    years = int(np.ceil(months / MONTHS_PER_YEAR))
    year = np.arange(months) // int(MONTHS_PER_YEAR)
    one_hot: Floats = (year[:, np.newaxis] == np.arange(years)[np.newaxis, :]).astype(np.float64)
    one_hot.setflags(write=False)
    return one_hot


def _lagged(cumulative: Floats, lag: Floats) -> Floats:
    """U(t − lag) for t = 0 … M − 1 from the cumulative counts U(0 … M − 1), 0 before month 0."""
    months = cumulative.shape[-1]
    lags = np.asarray(lag, dtype=np.int64)
    if lags.size == 1:  # one lag for every scenario (a quote): the counts shifted along the months
        shape = (cumulative.shape if lags.shape in ((), cumulative.shape[:-1])
                 else np.broadcast_shapes(cumulative.shape, (*lags.shape, 1)))
        shift, out = int(lags.reshape(-1)[0]), np.zeros(shape)
        if shift >= 0:
            out[..., shift:] = cumulative[..., :max(months - shift, 0)]
        else:  # the last month's count from month M + lag on, as the clipped index below reads it
            out[..., :max(months + shift, 0)] = cumulative[..., -shift:]
            out[..., max(months + shift, 0):] = cumulative[..., -1:]
        return out
    index = np.arange(months) - lags[..., np.newaxis]
    taken = np.take_along_axis(cumulative, np.clip(index, 0, months - 1), axis=-1)
    return np.where(index >= 0, taken, 0.0)


def _horizon(option: OptionResult, evaluation: CampaignEvaluation,
             commitment: tuple[Floats, Floats] | None) -> tuple[int, Floats]:
    """Months the cash flow needs (the programme, and the last commitment's whole length where the
    option buys some: their `commitment` spacing and length), and which scenarios have one: those
    whose figures are finite and need at most MAX_CASH_FLOW_MONTHS."""
    needed = programme_months(evaluation.recurrence)
    if commitment is not None:
        spacing, length = commitment
        last_start = np.floor((commitments(option, evaluation) - 1.0).clip(0.0) * spacing + 1e-9)
        needed = np.maximum(needed, last_start + length)
    needed = broadcast(needed, np.shape(option.total))
    shown = np.isfinite(needed) & (needed <= MAX_CASH_FLOW_MONTHS)
    return int(needed.max(where=shown, initial=1.0)), np.asarray(shown)


def _commitment_calendar(option: OptionResult, evaluation: CampaignEvaluation) -> tuple[Floats, Floats] | None:
    """Months between the commitments an option buys (its sharing instances' span) and each one's
    length (a new build's carried months, whole; a committed term's terms); None when it buys none."""
    sharing = option.details.get("sharing_instances")
    if sharing is None:
        return None
    every = as_floats(1.0 if evaluation.recurrence is None else evaluation.recurrence.every_months)
    if option.term == "owned_new_build":
        return sharing * every, np.ceil(option.details["carried_months"] - 1e-9)
    return sharing * every, option.details["terms_needed"] * term_months(option)


def cash_flow(option: OptionResult, evaluation: CampaignEvaluation, view: OwnedCostView) -> CashFlow:
    """The programme's money by month (model.md §6: capital when bought, residual at the end of
    the life, operating by month; rented by month)."""
    lines = view_lines(option, evaluation, view)
    shape = np.shape(option.total)
    columns: dict[Column, Floats] = {}
    commitment = _commitment_calendar(option, evaluation)
    months, shown = _horizon(option, evaluation, commitment)
    instances = broadcast(instances_by_month(evaluation.recurrence, months), (*shape, months))
    # Each instance's own lines, paid in the month it starts in.
    shared = shared_items(option)
    for item, amount in lines.items():
        if item in shared:
            continue
        column = column_of(item)
        columns[column] = columns.get(column, 0.0) + instances * np.asarray(amount)[..., np.newaxis]
    if commitment is not None:
        spacing, length = np.where(shown, commitment[0], 1.0), np.where(shown, commitment[1], 0.0)
        count = np.where(shown, commitments(option, evaluation), 0.0)
        starts = starts_by_month(spacing_months=spacing, count=count, months=months)
        for column, flow in _commitment_flows(option, evaluation, starts, length).items():
            columns[column] = columns.get(column, 0.0) + flow
    zero = np.where(shown[..., np.newaxis], np.zeros((*shape, months)), np.nan)
    return CashFlow(*(np.asarray(columns.get(c, zero) + zero) for c in ("capital", "operating", "rent")))


def _commitment_flows(option: OptionResult, evaluation: CampaignEvaluation, starts: Floats,
                      length: Floats) -> dict[Column, Floats]:
    """What commitments starting in the months `starts` counts pay: a new build its capex when it
    starts, its running cost every month of its life and its residual back in the life's last
    month; a committed term its up-front share when each term starts and the rest monthly over it."""
    started = np.cumsum(starts, axis=-1)
    shape = np.shape(option.total)
    nodes = option.layout.nodes
    if option.term == "owned_new_build":
        site = evaluation.sites[option.venue_id]
        capex = nodes * site.economics.capex_per_node
        running = nodes * site.node.running
        residual = capex * site.economics.site.residual_fraction
        ended = _lagged(started, length)  # bought by month t − L: their life is over
        active = started - ended  # bought in months t − L + 1 … t
        bought = starts
        returned = _lagged(started, length - 1.0) - ended
        capital = bought * capex[..., np.newaxis] - returned * residual[..., np.newaxis]
        return {"capital": capital, "operating": active * np.asarray(running)[..., np.newaxis]}
    months = term_months(option)
    details = option.details
    fee = (nodes * option.node_type.accelerators_per_node * months * HOURS_PER_MONTH
           * details["price_per_accelerator_hour"])
    upfront = details["upfront_fraction"]
    rent = np.zeros_like(started)
    terms = np.where(np.isfinite(details["terms_needed"]), details["terms_needed"], 0.0)
    for q in range(int(min(np.max(terms), MAX_CASH_FLOW_MONTHS / months))):
        held = (q < details["terms_needed"])[..., np.newaxis]
        lag = np.full(shape, q * months)
        began = _lagged(started, lag)  # the commitments whose q-th term has begun by month t
        begun = began - _lagged(started, lag + 1.0)
        active = began - _lagged(started, lag + months)
        rent += held * (begun * (upfront * fee)[..., np.newaxis]
                        + active * ((1.0 - upfront) * fee / months)[..., np.newaxis])
    return {"rent": rent}


def npv(flow: CashFlow, evaluation: CampaignEvaluation) -> Floats:
    """Present value of a cash flow at the monthly cost of capital: Σ_t total_t / (1 + r/12)^t."""
    return present_value(flow.total, monthly_rate(evaluation.cost_of_capital_annual))


@dataclass(frozen=True)
class OptionCosts:
    """One option's cost in both views and over the programme: (S,) arrays."""

    full: Floats
    incremental: Floats
    ranked: Floats  # one instance in the view that ranks
    programme: Floats  # every instance in the view that ranks

    def other(self, view: OwnedCostView) -> Floats:
        return self.incremental if view == "full" else self.full


def option_costs(option: OptionResult, evaluation: CampaignEvaluation, view: OwnedCostView) -> OptionCosts:
    full = option.total
    incremental = view_total(option, evaluation, "incremental")
    return OptionCosts(full, incremental, full if view == "full" else incremental,
                       programme_total(option, evaluation, view))
