"""Comparing options: ranking, break-even of every owned site against every rented price, and
the chargeback curves (model.md §8-9). Vectorised over scenarios."""

from dataclasses import dataclass, fields

import numpy as np

from service.domain.arrays import Floats, Ints
from service.domain.breakeven import CURVE_UTILISATIONS, BreakEven, break_even, chargeback_curve
from service.domain.campaign import RankBy
from service.domain.evaluate import CampaignEvaluation, OptionResult


def ranking_keys(option: OptionResult, rank_by: RankBy) -> tuple[Floats, Floats, Floats]:
    """Sort keys, most significant first: total cost, then wall clock, then carbon; `rank_by`
    brings wall clock or carbon to the front. Unknown carbon sorts last."""
    carbon = np.where(np.isnan(option.energy.kgco2e), np.inf, option.energy.kgco2e)
    keys = {"cost": option.total, "wall_clock": option.layout.wall_seconds, "carbon": carbon}
    order = [rank_by] + [k for k in ("cost", "wall_clock", "carbon") if k != rank_by]
    first, second, third = (np.asarray(keys[k], dtype=np.float64) for k in order)
    return first, second, third


def cheapest(options: tuple[OptionResult, ...], rank_by: RankBy = "cost") -> Ints:
    """Per scenario, the index of the best feasible option by the first ranking key; -1 if none."""
    firsts = np.stack(np.broadcast_arrays(*[np.where(o.feasible, ranking_keys(o, rank_by)[0], np.inf)
                                            for o in options]))
    best = np.argmin(firsts, axis=0)
    return np.where(np.isfinite(firsts.min(axis=0)), best, -1).astype(np.int64)


def rank(options: tuple[OptionResult, ...], i: int, rank_by: RankBy) -> list[int]:
    """Option indices in the order people should read them for scenario i: feasible ones by
    the ranking keys, then the infeasible ones by cost."""
    def key(k: int) -> tuple[bool, float, float, float]:
        first, second, third = ranking_keys(options[k], rank_by)
        return (not bool(options[k].feasible[i]), float(first[i]), float(second[i]), float(third[i]))
    return sorted(range(len(options)), key=key)


def listed_rented_price(option: OptionResult) -> Floats:
    """The rented price per accelerator-hour after overrides; committed terms with their
    up-front financing."""
    price = option.details["price_per_accelerator_hour"]
    if option.term.startswith("committed_"):
        return price * option.details["financing_factor"]
    return price


def rented_price_in_site_hours(option: OptionResult, site_accelerator_hours: Floats) -> Floats:
    """What renting costs per accelerator-hour of the site's own node type doing the same work:
    listed price × rented accelerator-hours / the site's accelerator-hours for the campaign.

    This puts accelerators of different speed on one scale, and carries the hours interruptible
    capacity loses to interruptions (they are in its accelerator-hours)."""
    return listed_rented_price(option) * option.layout.accelerator_hours / site_accelerator_hours


@dataclass(frozen=True)
class BreakEvenRow:
    site: str
    offer: str
    term: str
    rented_listed_per_accelerator_hour: Floats
    rented_per_accelerator_hour: Floats
    owned_fixed_per_month: Floats
    owned_variable_per_accelerator_hour: Floats
    figures: BreakEven


def breakeven_rows(evaluation: CampaignEvaluation) -> list[BreakEvenRow]:
    """One row per (owned site, rented offer, term)."""
    rows = []
    rented = [o for o in evaluation.options if o.venue_kind == "rented"]
    for site_id, site in evaluation.sites.items():
        owned = [o for o in evaluation.options if o.venue_kind == "owned" and o.venue_id == site_id]
        reference = next((o for o in owned if o.term == "owned_chargeback"), owned[0] if owned else None)
        new_build = next((o for o in owned if o.term == "owned_new_build"), reference)
        s = site.economics.site
        per_node = s.node_type.accelerators_per_node
        campaign_hours = reference.layout.accelerator_hours if reference else np.asarray(np.nan)
        new_nodes = new_build.layout.nodes if new_build else np.asarray(1.0)
        fleet = np.asarray(float(s.nodes_owned)) if s.nodes_owned else new_nodes
        if not rented:
            continue
        # Every rented option against this site at once: (rented options, scenarios).
        prices = np.stack(np.broadcast_arrays(*(rented_price_in_site_hours(o, campaign_hours) for o in rented)))
        figures = break_even(
            fixed_per_node_month=site.node.total, running_per_node_month=site.node.running,
            capex_per_node=site.economics.capex_per_node, accelerators_per_node=per_node,
            variable_per_accelerator_hour=site.variable_per_accelerator_hour,
            rented_per_accelerator_hour=prices, fleet_nodes=fleet,
            campaign_accelerator_hours=campaign_hours,
            demand_hours_per_year=campaign_hours * evaluation.instances_per_year,
            new_nodes=new_nodes, depreciation_months=float(s.depreciation_months))
        stacked = {f.name: np.broadcast_to(getattr(figures, f.name), prices.shape) for f in fields(figures)}
        for r, option in enumerate(rented):
            rows.append(BreakEvenRow(site_id, option.venue_id, option.term, listed_rented_price(option),
                                     prices[r], site.node.total, site.variable_per_accelerator_hour,
                                     BreakEven(**{name: values[r] for name, values in stacked.items()})))
    return rows


def curves(evaluation: CampaignEvaluation) -> dict[str, Floats]:
    """c(u) for each owned site on CURVE_UTILISATIONS: (S, U) arrays by site id."""
    return {
        site_id: chargeback_curve(
            fixed_per_node_month=site.node.total,
            accelerators_per_node=site.economics.site.node_type.accelerators_per_node,
            variable_per_accelerator_hour=site.variable_per_accelerator_hour)
        for site_id, site in evaluation.sites.items()
    }


__all__ = ["CURVE_UTILISATIONS", "BreakEvenRow", "breakeven_rows", "cheapest", "curves", "rank"]
