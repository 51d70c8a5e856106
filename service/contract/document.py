"""The quote as clients read it (api.md): built from one scenario of an evaluation, money
rounded to the currency's minor unit here at the edge, and nowhere earlier."""

import math
from typing import Any

from babel.numbers import get_currency_precision

from service.contract.request import QuoteRequestIn, TransformerWorkIn
from service.domain import explain, screens
from service.domain.arrays import scenario_value
from service.domain.assumptions import DEFAULTS
from service.domain.breakeven import ABOVE_FULL_USE, NO_MARGIN
from service.domain.campaign import OwnedCostView
from service.domain.catalog import Catalog
from service.domain.choice import decided_by
from service.domain.comparison import CURVE_UTILISATIONS, BreakEvenRow, breakeven_rows, curves, rank
from service.domain.evaluate import CampaignEvaluation, OptionResult, SiteFigures
from service.domain.layout import LayoutGrid
from service.domain.owning import cooling_tons
from service.domain.programme import OptionCosts, cash_flow, npv, option_costs, view_lines
from service.domain.recurrence import programme_months
from service.domain.units import SECONDS_PER_DAY, SECONDS_PER_HOUR

Json = dict[str, Any]


def _number(value: Any, digits: int | None = None) -> float | None:
    """A JSON number, or None for NaN and infinities (JSON has neither)."""
    x = float(value)
    if not math.isfinite(x):
        return None
    return round(x, digits) if digits is not None else x


class Money:
    """Rounds amounts to the currency's ISO 4217 minor unit."""

    def __init__(self, currency: str) -> None:
        self.currency = currency
        self.digits = get_currency_precision(currency)

    def __call__(self, value: Any) -> float | None:
        return _number(value, self.digits)


def quote_document(catalog: Catalog, request: QuoteRequestIn, evaluation: CampaignEvaluation,
                   *, scenario: int = 0) -> Json:
    """The response body of a quote, less the storage fields (id, created_at, catalog id)."""
    i = scenario
    money = Money(catalog.currency)
    campaign = request.campaign
    view = request.options.owned_cost_view
    costs = {id(o): option_costs(o, evaluation, view) for o in evaluation.options}
    order = rank(evaluation, i, request.options.rank_by, view,
                 programme=[costs[id(o)].programme for o in evaluation.options])
    ranked = [evaluation.options[k] for k in order]
    feasible = [o for o in ranked if bool(o.feasible[i])]
    options = [_option(o, position, i, catalog, evaluation, request, money, costs[id(o)])
               for position, o in enumerate(ranked)]
    rows = breakeven_rows(evaluation)
    work = evaluation.work
    instances = float(scenario_value(evaluation.instances_total, i))
    body: Json = {
        "request": request.model_dump(mode="json"),
        "currency": catalog.currency,
        "work": {
            "training_flops": _number(scenario_value(work.model_flops, i)),
            "hardware_flops": _number(scenario_value(work.hardware_flops, i)),
            "flops_per_token": (None if work.flops_per_token is None
                                else _number(scenario_value(work.flops_per_token, i))),
            "runs_total_flops": _number(scenario_value(work.model_flops * evaluation.runs_multiplier, i)),
            "instances": _number(instances),
            "programme_months": _number(scenario_value(programme_months(evaluation.recurrence), i)),
        },
        "options": options,
        "recommendation": None if not feasible else _recommendation(feasible, i, evaluation, catalog, request, costs),
        "next_steps": [] if feasible else explain.next_steps(ranked, i, campaign.deadline_days, catalog.currency),
        "breakeven": _breakeven_rows(rows, i, money, evaluation),
        "breakeven_left_out": [
            {"offer": o.venue_id, "term": o.term,
             "reasons": explain.reasons(o, i, catalog, campaign.data.allowed_jurisdictions, campaign.deadline_days)}
            for o in evaluation.options if o.venue_kind == "rented" and evaluation.sites and not bool(o.feasible[i])],
        "curves": [
            {"site": site_id, "currency": catalog.currency,
             "points": [{"utilisation": float(u), "owned_per_accelerator_hour": _number(c, 4)}
                        for u, c in zip(CURVE_UTILISATIONS, values[i if len(values) > 1 else 0], strict=True)]}
            for site_id, values in curves(evaluation).items()
        ],
        "assumptions": [
            {"name": a.name, "value": a.value, "unit": a.unit, "source": a.source}
            for a in (DEFAULTS[name] for name in explain.used_assumptions(catalog, evaluation, _given(request)))
        ],
        "cautions": list(explain.CAUTIONS),
    }
    return body


def _given(request: QuoteRequestIn) -> dict[str, bool]:
    work = request.campaign.work
    transformer = isinstance(work, TransformerWorkIn)
    return {
        "transformer": transformer,
        "parameters": getattr(work, "parameters", None) is not None,
        "architecture": transformer and work.layers is not None,  # type: ignore[union-attr]
        "attention_heads": transformer and work.attention_heads is not None,  # type: ignore[union-attr]
        "micro_batch": transformer and work.micro_batch_sequences is not None,  # type: ignore[union-attr]
        "global_batch": work.global_batch_tokens is not None,
        "recompute_full": work.activation_recompute == "full",
        "recompute_selective": work.activation_recompute == "selective",
    }


def _recommendation(feasible: list[OptionResult], i: int, evaluation: CampaignEvaluation, catalog: Catalog,
                    request: QuoteRequestIn, costs: dict[int, OptionCosts]) -> Json:
    """The first feasible option, why, and whether the other view of owned cost would rank another first."""
    view = request.options.owned_cost_view
    other_view: OwnedCostView = "incremental" if view == "full" else "full"
    _, by_other = min(enumerate(feasible),  # the first of equal costs
                      key=lambda pair: (float(scenario_value(costs[id(pair[1])].other(view), i)), pair[0]))
    owned_compared = any(o.venue_kind == "owned" for o in feasible)
    best = feasible[0]
    return {
        "option_index": 0,
        "venue": best.venue_id,
        "term": best.term,
        "view": view,
        "views_agree": by_other is best or not owned_compared,
        "other_view": {"view": other_view, "venue": by_other.venue_id, "term": by_other.term},
        "why": explain.why(feasible, i, evaluation, catalog.currency, request.options.rank_by,
                           [costs[id(o)] for o in feasible], view,
                           other_best=None if by_other is best or not owned_compared else by_other,
                           owned_compared=owned_compared),
    }


def _option(o: OptionResult, position: int, i: int, catalog: Catalog, evaluation: CampaignEvaluation,
            request: QuoteRequestIn, money: Money, costs: OptionCosts) -> Json:
    view = request.options.owned_cost_view
    flow = cash_flow(o, evaluation, view)
    yearly = flow.by_year()
    layout = o.layout
    feasible = bool(o.feasible[i])
    site = evaluation.sites.get(o.venue_id) if o.venue_kind == "owned" else None
    details = {name: _number(values[i], 6) for name, values in o.details.items()}
    return {
        "rank": position + 1 if feasible else None,
        "venue": {"kind": o.venue_kind, "id": o.venue_id, "jurisdiction": o.jurisdiction,
                  "node_type": o.node_type.id},
        "term": o.term,
        "feasible": feasible,
        "reasons": explain.reasons(o, i, catalog, request.campaign.data.allowed_jurisdictions,
                                   request.campaign.deadline_days, site),
        "layout": _layout(layout, i, missed_deadline=bool(o.screens[i] & screens.DEADLINE)),
        "memory": {
            "model_state_bytes_per_accelerator": _number(layout.state_bytes[i], 0),
            "activation_bytes_per_accelerator": _number(layout.activation_bytes[i], 0),
            "fits": bool(layout.fits[i]),
        },
        "timing": {
            "step_seconds": _number(layout.step_seconds[i], 6),
            "compute_seconds": _number(layout.compute_seconds[i], 6),
            "pipeline_bubble_seconds": _number(layout.bubble_seconds[i], 6),
            "collectives": _collectives(layout, i),
            "scaling_efficiency": _number(layout.scaling_efficiency[i], 6),
            "exposed_communication_fraction": _number(layout.exposed_fraction[i], 6),
            "network_gbps_needed_for_95pct": _number(layout.network_gbps_needed[i], 1),
            "failure_overhead_fraction": _number(layout.failure_overhead[i], 6),
            "checkpoint_interval_hours": _number(layout.checkpoint_interval_seconds[i] / SECONDS_PER_HOUR, 4),
            "wall_clock_days": _number(layout.wall_seconds[i] / SECONDS_PER_DAY, 4),
            "data_staging_days": _number(o.staging_seconds[i] / SECONDS_PER_DAY, 4),
            "accelerator_hours": _number(layout.accelerator_hours[i], 2),
        },
        "energy": {
            "it_kwh": _number(o.energy.it_kwh[i], 1),
            "facility_kwh": _number(o.energy.facility_kwh[i], 1),
            "peak_it_kw": _number(o.energy.peak_it_kw[i], 2),
            "cooling_kw_thermal": _number(o.energy.cooling_kw_thermal[i], 2),
            "cooling_tons": _number(cooling_tons(o.energy.cooling_kw_thermal[i]), 2),
            "kgco2e": _number(o.energy.kgco2e[i], 1),
        },
        "cost": {
            "currency": money.currency,
            "view": view,
            "total": money(scenario_value(costs.ranked, i)),
            "per_instance_total": money(scenario_value(costs.ranked, i)),
            "programme_total": money(scenario_value(costs.programme, i)),
            "npv": money(scenario_value(npv(flow, evaluation), i)),
            "full_total": money(scenario_value(costs.full, i)),
            "incremental_total": money(scenario_value(costs.incremental, i)),
            "per_accelerator_hour": _number(scenario_value(costs.ranked, i) / layout.accelerator_hours[i], 4),
            "lines": _lines(o, i, catalog, evaluation, money),
        },
        "cash_flow": [
            {"year": year + 1, "capital": money(capital), "operating": money(operating), "rent": money(rent),
             "total": money(total), "currency": money.currency}
            for year, (capital, operating, rent, total) in enumerate(zip(
                yearly.capital[i].tolist(), yearly.operating[i].tolist(), yearly.rent[i].tolist(),
                yearly.total[i].tolist(), strict=True))],
        "term_figures": details,
        **({"parts": [_part(p, runs, i, money) for p, runs in
                      zip(o.parts, (o.details["owned_runs"][i], o.details["rented_runs"][i]), strict=True)]}
           if o.parts else {}),
    }


def _layout(layout: LayoutGrid, i: int, *, missed_deadline: bool) -> Json:
    """The chosen (t, p, d) layout in the words of api.md; `strategy` and `shards` stay for
    clients of the first model version (replicated or fully sharded data parallelism)."""
    t, p, d, stage = int(layout.tensor[i]), int(layout.pipeline[i]), int(layout.data[i]), int(layout.zero_stage[i])
    plain = t == 1 and p == 1
    return {
        "nodes": int(layout.nodes[i]),
        "accelerators": int(layout.accelerators[i]),
        "tensor": t,
        "pipeline": p,
        "data": d,
        "zero_stage": stage,
        "sequence_parallel": bool(layout.sequence_parallel[i]),
        "micro_batch": int(layout.micro_batch[i]),
        "micro_batches": _number(layout.micro_batches[i], 4),
        "pipeline_chunks": int(layout.pipeline_chunks[i]),
        "pipeline_bubble_fraction": _number(layout.bubble_seconds[i] / layout.compute_seconds[i], 6),
        "decided_by": decided_by(int(layout.origin[i]), missed_deadline=missed_deadline),
        # The first version's words: "sharded" meant fully sharded (ZeRO-3), "replicated" parameters on
        # every accelerator (stages 0-2 keep them so).
        "strategy": ("sharded" if stage == 3 else "replicated") if plain else "tensor-pipeline-data",
        "shards": t * p * (d if stage == 3 else 1),
    }


def _collectives(layout: LayoutGrid, i: int) -> list[Json]:
    """Time per optimiser step of each kind of collective, where it runs and what hides it."""
    crosses = "node link" if layout.nodes[i] > 1 else "intra-node fabric"
    sharded = int(layout.zero_stage[i]) == 3
    return [
        {"collective": "tensor_parallel", "link": "intra-node fabric",
         "seconds_per_step": _number(layout.tensor_seconds[i], 6),
         "exposed_seconds_per_step": _number(layout.tensor_seconds[i], 6),
         "overlap": "none: on the critical path of every layer"},
        {"collective": "pipeline", "link": crosses if layout.pipeline[i] > 1 else "none",
         "seconds_per_step": _number(layout.pipeline_seconds[i], 6),
         "exposed_seconds_per_step": _number(layout.pipeline_seconds[i], 6),
         "overlap": "none: between micro-batches on the critical path"},
        {"collective": "data_parallel", "link": crosses if layout.data[i] > 1 else "none",
         "seconds_per_step": _number(layout.data_seconds[i], 6),
         "exposed_seconds_per_step": _number(layout.data_exposed_seconds[i], 6),
         "overlap": ("parameter gathers prefetched behind every micro-batch" if sharded
                     else "gradient reduction behind the last micro-batch's backward pass")},
    ]


def _lines(o: OptionResult, i: int, catalog: Catalog, evaluation: CampaignEvaluation, money: Money) -> list[Json]:
    """Cost lines with their basis; a split's lines are its parts' lines, named by venue."""
    if o.parts:
        return [{**line, "item": f"{part.venue_id}: {line['item']}"}
                for part in o.parts for line in _lines(part, i, catalog, evaluation, money)]
    site = evaluation.sites.get(o.venue_id) if o.venue_kind == "owned" else None
    incremental = view_lines(o, evaluation, "incremental")
    return [{"item": item, "amount": money(amount[i]),
             "incremental_amount": money(scenario_value(incremental[item], i)),
             "basis": explain.line_basis(o, item, i, catalog, site, money.currency)}
            for item, amount in o.lines.items()]


def _part(p: OptionResult, runs: float, i: int, money: Money) -> Json:
    """One part of a split, in brief: where, on what term, how many runs, how long, how much."""
    return {
        "venue": {"kind": p.venue_kind, "id": p.venue_id, "jurisdiction": p.jurisdiction, "node_type": p.node_type.id},
        "term": p.term,
        "runs": int(runs),
        "accelerators": int(p.layout.accelerators[i]),
        "wall_clock_days": _number(p.layout.wall_seconds[i] / SECONDS_PER_DAY, 4),
        "accelerator_hours": _number(p.layout.accelerator_hours[i], 2),
        "total": money(p.total[i]),
        "currency": money.currency,
    }


def _breakeven_rows(rows: list[BreakEvenRow], i: int, money: Money, evaluation: CampaignEvaluation) -> list[Json]:
    """The break-even rows of scenario i (none for a rented option it rules out), each site's payback
    basis written once for all its rows."""
    bases: dict[str, str] = {}
    shown = []
    for row in rows:
        if bool(scenario_value(row.figures.ruled_out, i)):
            continue
        site = evaluation.sites[row.site]
        if row.site not in bases:
            bases[row.site] = explain.payback_basis(site, i)
        shown.append(_breakeven(row, i, money, site, bases[row.site]))
    return shown


def _breakeven(row: BreakEvenRow, i: int, money: Money, site: SiteFigures, payback_basis: str) -> Json:
    f = row.figures
    paid = row.payback

    def at(values: Any) -> Any:
        return scenario_value(values, i)

    reason = str(at(f.utilisation_reason))
    if reason == NO_MARGIN:
        words: str | None = "the rented price is below the owned busy-energy cost: owning never wins"
    elif reason == ABOVE_FULL_USE:
        words = (f"owning would need {_number(at(f.utilisation_unbounded) * 100, 1)}% utilisation: "
                 "renting wins at any achievable use")
    else:  # a break-even within reach ("") or a rented option ruled out (a row the quote leaves out)
        words = None
    payback = {} if paid is None else explain.payback_words(paid, i, site, payback_basis)
    return {
        "site": row.site,
        "offer": row.offer,
        "term": row.term,
        "currency": money.currency,
        "rented_per_accelerator_hour": _number(at(row.rented_per_accelerator_hour), 4),
        "rented_listed_per_accelerator_hour": _number(at(row.rented_listed_per_accelerator_hour), 4),
        "conversion": _number(at(row.conversion), 6),
        "conversion_basis": explain.conversion_words(row, i, money.currency),
        "owned_fixed_per_month": money(at(row.owned_fixed_per_month)),
        "owned_variable_per_accelerator_hour": _number(at(row.owned_variable_per_accelerator_hour), 4),
        "utilisation": _number(at(f.utilisation), 4),
        "accelerator_hours_per_year": _number(at(f.accelerator_hours_per_year), 0),
        "campaigns_per_year": _number(at(f.campaigns_per_year), 2),
        "reason": words,
        **payback,
        "note": " ".join(filter(None, (
            "Rented price per unit of work: the listed price per accelerator-hour converted to the site's "
            "accelerator by relative speed.",
            COMMITTED_NOTE if row.term.startswith("committed_") else None))),
    }


COMMITTED_NOTE = ("Committed hours are paid whether used or not; compared here at full use of the commitment, "
                  "its up-front share financed at the cost of capital.")
