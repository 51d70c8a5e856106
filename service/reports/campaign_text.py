"""The campaign in plain words, from the normalised request stored in the quote, and the residency
screen venue by venue."""

from typing import Any

from service.reports.figures import residency_ruled_out
from service.reports.formatting import KIND_LABELS, jurisdiction_label, number, percent, scientific, term_label, words

Json = dict[str, Any]

OVERRIDE_UNITS = {
    "utilisation": "share of accelerator time", "electricity_price_per_kwh": "per kWh",
    "on_demand_price_factor": "× on-demand prices", "rented_price_factor": "× every rented price",
    "pue": "power usage effectiveness", "cost_of_capital_annual": "a year",
    "node_price_factor": "× node prices", "utilisation_planned": "planned utilisation of owned sites",
    "grid_kgco2e_per_kwh": "kg CO2e per kWh", "mtbf_hours": "hours between failures per node",
    "network_gbps": "Gbps per node", "electricity_price_factor": "× electricity prices",
}


def _work(work: Json, totals: Json) -> str:
    kind = work.get("kind")
    if kind == "transformer":
        text = (f"Train a transformer of {words(work['parameters'])} parameters on {words(work['tokens'])} "
                "tokens per run")
        if work.get("layers"):
            text += (f" ({number(work['layers'])} layers, width {number(work['d_model'])}, "
                     f"sequences of {number(work['sequence_length'])} tokens)")
    elif kind == "flops":
        text = f"Train a model needing {scientific(work['total_flops'])} FLOPs per run"
    elif kind == "measured":
        text = (f"Train on {words(work['samples'])} samples, measured at "
                f"{number(work['samples_per_second_per_accelerator'], 2)} samples per second per accelerator "
                f"on {work['reference_node_type']}")
    else:
        text = f"Train a model (work of kind {kind})"
    recompute = work.get("activation_recompute", "none")
    text += f", in {work.get('precision', 'bf16')} precision"
    text += ", without activation recompute" if recompute == "none" else f", with {recompute} activation recompute"
    if work.get("parameters") and kind != "transformer":
        text += f"; the model has {words(work['parameters'])} parameters"
    if work.get("global_batch_tokens"):
        text += f"; global batch of {words(work['global_batch_tokens'])} tokens"
    return f"{text}. In all, {scientific(totals.get('runs_total_flops'))} model FLOPs."


def _runs(campaign: Json, totals: Json) -> str:
    runs = campaign.get("runs") or {}
    count = int(runs.get("count", 1))
    text = f"{count} run{'s' if count != 1 else ''}"
    extras = [f"{percent(runs[k], 0)} more for {label}" for k, label in
              (("exploration_fraction", "exploration"), ("evaluation_fraction", "evaluation")) if runs.get(k)]
    if extras:
        text += ", plus " + " and ".join(extras)
    recurrence = campaign.get("recurrence")
    if recurrence:
        text += (f"; repeated every {number(recurrence['every_months'], 1)} month(s) for "
                 f"{number(recurrence['for_months'], 1)} months ({number(totals.get('instances'))} instances "
                 "in all; owned and committed capacity is shared between them)")
    return text + "."


def _data(data: Json) -> str:
    parts = [f"Dataset of {number(data.get('dataset_tb'), 2)} TB"]
    if data.get("checkpoint_tb"):
        parts.append(f"checkpoints of {number(data['checkpoint_tb'], 3)} TB, {number(data.get('checkpoints_kept'))} "
                     "kept")
    parts.append(f"{number(data.get('results_egress_tb'), 3)} TB of results leave the venue")
    text = "; ".join(parts) + "."
    if data.get("home"):
        text += f" The dataset lives at {data['home']}; moving it elsewhere costs transfer time and fees."
    return text


def residency_rule(data: Json) -> str:
    allowed = data.get("allowed_jurisdictions")
    text = ("No residency rule was entered: every venue passes the screen." if not allowed else
            "The data may be processed only in: " + ", ".join(jurisdiction_label(a) for a in allowed)
            + ". Named groups are defined in the catalog.")
    if data.get("owned_only"):
        text += " Only owned sites may be used."
    return text


def campaign_facts(document: Json) -> list[tuple[str, str]]:
    """(heading, sentence) pairs describing the campaign and the choices asked for."""
    request = document["request"]
    campaign = request["campaign"]
    totals = document.get("work") or {}
    options = request.get("options") or {}
    deadline = campaign.get("deadline_days")
    facts = [
        ("Work", _work(campaign["work"], totals)),
        ("Runs", _runs(campaign, totals)),
        ("Deadline", f"Must finish within {number(deadline, 1)} days." if deadline else "No deadline was set."),
        ("Data", _data(campaign.get("data") or {})),
        ("Residency", residency_rule(campaign.get("data") or {})),
    ]
    terms = "; ".join(term_label(t) for t in options.get("terms", []))
    scope = f"Terms considered: {terms}. Parallelism: {campaign.get('parallelism', 'auto')}."
    if options.get("fixed_accelerators"):
        scope += f" Pinned to {number(options['fixed_accelerators'])} accelerators."
    elif options.get("max_accelerators"):
        scope += f" At most {number(options['max_accelerators'])} accelerators."
    scope += f" Ranked by {str(options.get('rank_by', 'cost')).replace('_', '-')}."
    facts.append(("Scope", scope))
    given = request.get("overrides") or {}
    overrides = [(k, "", v) for k, v in given.items() if v is not None and k not in ("sites", "offers")]
    overrides += [(k, f" at {venue}", v) for kind in ("sites", "offers")
                  for venue, values in given.get(kind, {}).items() for k, v in values.items() if v is not None]
    if overrides:
        facts.append(("Overrides", "Catalog values replaced for this quote: " + "; ".join(
            f"{k.replace('_', ' ')}{where} = {number(v, 4)} {OVERRIDE_UNITS.get(k, '')}".rstrip()
            for k, where, v in overrides) + "."))
    return facts


def residency_rows(document: Json) -> list[Json]:
    """Each venue once (splits are made of venues listed on their own), whether the residency
    screen let it through, and why not."""
    blocked = residency_ruled_out(document)
    rows: dict[str, Json] = {}
    for option in document["options"]:
        venue = option["venue"]
        if venue["kind"] == "split" or venue["id"] in rows:
            continue
        reason = blocked.get(venue["id"])
        rows[venue["id"]] = {
            "venue": venue["id"], "kind": KIND_LABELS.get(venue["kind"], venue["kind"]),
            "jurisdiction": jurisdiction_label(venue["jurisdiction"]),
            "passes": reason is None, "reason": reason or "",
        }
    return sorted(rows.values(), key=lambda r: (r["passes"], r["venue"]))
