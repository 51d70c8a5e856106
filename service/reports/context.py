"""What the report template shows, prepared from the stored quote document: every figure as a
`Cell` with the text people read and the exact number from the quote (rendered as
`<data value="...">`, so the page can be checked against the quote)."""

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

from service.reports.campaign_text import campaign_facts, residency_rows, residency_rule
from service.reports.figures import (
    category_labels,
    category_of,
    charted_options,
    marker_of,
    site_panels,
)
from service.reports.formatting import (
    DECIDED_BY_WORDS,
    KIND_LABELS,
    MISSING,
    fixed,
    item_label,
    jurisdiction_label,
    layout_words,
    money,
    money_precise,
    number,
    percent,
    plain,
    term_label,
)

Json = dict[str, Any]


@dataclass(frozen=True)
class Cell:
    text: str
    value: str = ""  # the quote's number, plain; empty when there is none

    def __str__(self) -> str:
        return self.text


def cell(value: float | None, text: str) -> Cell:
    return Cell(text, plain(value) if value is not None else "")


def moment(value: object) -> str:
    """An ISO 8601 time as people read it: '2027-01-04 09:00 UTC'."""
    if not value:
        return MISSING
    try:
        when = datetime.fromisoformat(str(value).replace("Z", "+00:00"))
    except ValueError:
        return str(value)
    if when.utcoffset() is not None:
        when = when.astimezone(UTC)
    return when.strftime("%Y-%m-%d %H:%M") + (" UTC" if when.tzinfo is not None else "")


def _option_name(option: Json) -> Json:
    venue = option["venue"]
    return {"venue": venue["id"], "kind": KIND_LABELS.get(venue["kind"], venue["kind"]),
            "term": term_label(option["term"]), "term_code": option["term"],
            "jurisdiction": jurisdiction_label(venue["jurisdiction"]), "rank": option["rank"],
            "feasible": option["feasible"]}


def _option_row(option: Json, currency: str) -> Json:
    cost, timing, layout = option["cost"], option["timing"], option["layout"]
    return {
        **_option_name(option),
        "reasons": option["reasons"],
        "accelerators": cell(layout["accelerators"], number(layout["accelerators"])),
        "days": cell(timing["wall_clock_days"], fixed(timing["wall_clock_days"], 1)),
        "total": cell(cost["total"], money(cost["total"], currency)),
        "per_hour": cell(cost["per_accelerator_hour"], money(cost["per_accelerator_hour"], currency)),
        "kgco2e": cell(option["energy"]["kgco2e"], number(option["energy"]["kgco2e"])),
        "programme": cell(cost.get("programme_total"), money(cost.get("programme_total"), currency)),
        "other_view": cell(_other_view_total(cost), money(_other_view_total(cost), currency)),
    }


def _other_view_total(cost: Json) -> float | None:
    """One instance on the view that does not rank (the full view for quotes stored before views)."""
    other = "incremental_total" if cost.get("view", "full") == "full" else "full_total"
    value: float | None = cost.get(other)
    return value


def _breakdown(option: Json, currency: str) -> Json:
    labels = dict(category_labels())
    lines = [{"item": item_label(line["item"]), "category": labels[category_of(line["item"])],
              "amount": cell(line["amount"], money(line["amount"], currency)),
              "incremental": cell(line.get("incremental_amount"), money(line.get("incremental_amount"), currency)),
              "basis": line["basis"]}
             for line in option["cost"]["lines"]]
    parts = [{"venue": p["venue"]["id"], "term": term_label(p["term"]), "runs": number(p["runs"]),
              "accelerators": number(p["accelerators"]), "days": fixed(p["wall_clock_days"], 1),
              "total": cell(p["total"], money(p["total"], currency))} for p in option.get("parts", [])]
    cost = option["cost"]
    full, incremental = cost.get("full_total", cost["total"]), cost.get("incremental_total")
    years = [{"year": y["year"], **{k: cell(y[k], money(y[k], currency))
                                    for k in ("capital", "operating", "rent", "total")}}
             for y in option.get("cash_flow", [])]
    return {**_option_name(option), "lines": lines, "parts": parts,
            "total": cell(full, money(full, currency)),
            "incremental_total": cell(incremental, money(incremental, currency)),
            "cash_flow": years, "npv": cell(cost.get("npv"), money(cost.get("npv"), currency)),
            "view": cost.get("view", "full")}


def _engineering(option: Json) -> Json:
    t, e, layout = option["timing"], option["energy"], option["layout"]
    collectives = {c["collective"]: c for c in t.get("collectives", [])}

    def seconds(name: str, key: str = "seconds_per_step") -> Cell:
        value = collectives.get(name, {}).get(key)
        return cell(value, fixed(value, 3))

    return {
        **_option_name(option),
        "nodes": cell(layout["nodes"], number(layout["nodes"])),
        "accelerators": cell(layout["accelerators"], number(layout["accelerators"])),
        "layout": layout_words(layout),
        "decided_by": DECIDED_BY_WORDS.get(layout.get("decided_by", ""), layout.get("decided_by", "")),
        "compute_seconds": cell(t.get("compute_seconds"), fixed(t.get("compute_seconds"), 3)),
        "bubble_seconds": cell(t.get("pipeline_bubble_seconds"), fixed(t.get("pipeline_bubble_seconds"), 3)),
        "tensor_seconds": seconds("tensor_parallel"),
        "pipeline_seconds": seconds("pipeline"),
        "data_seconds": seconds("data_parallel"),
        "data_exposed": seconds("data_parallel", "exposed_seconds_per_step"),
        "step_seconds": cell(t["step_seconds"], fixed(t["step_seconds"], 2)),
        "scaling_efficiency": cell(t["scaling_efficiency"], percent(t["scaling_efficiency"])),
        "exposed": cell(t["exposed_communication_fraction"], percent(t["exposed_communication_fraction"])),
        "network_gbps": cell(t["network_gbps_needed_for_95pct"], fixed(t["network_gbps_needed_for_95pct"], 1)),
        "failure_overhead": cell(t["failure_overhead_fraction"], percent(t["failure_overhead_fraction"], 2)),
        "checkpoint_hours": cell(t["checkpoint_interval_hours"], fixed(t["checkpoint_interval_hours"], 1)),
        "staging_days": cell(t.get("data_staging_days"), fixed(t.get("data_staging_days"), 2)),
        "days": cell(t["wall_clock_days"], fixed(t["wall_clock_days"], 1)),
        "accelerator_hours": cell(t["accelerator_hours"], number(t["accelerator_hours"])),
        "it_kwh": cell(e["it_kwh"], number(e["it_kwh"])),
        "facility_kwh": cell(e["facility_kwh"], number(e["facility_kwh"])),
        "peak_it_kw": cell(e["peak_it_kw"], fixed(e["peak_it_kw"], 1)),
        "cooling_kw": cell(e["cooling_kw_thermal"], fixed(e["cooling_kw_thermal"], 1)),
        "cooling_tons": cell(e["cooling_tons"], fixed(e["cooling_tons"], 1)),
        "kgco2e": cell(e["kgco2e"], number(e["kgco2e"])),
    }


class Footnotes:
    """Notes shared by many rows, numbered once and cited by number."""

    def __init__(self) -> None:
        self.texts: list[str] = []

    def cite(self, text: str | None) -> int | None:
        if not text:
            return None
        if text not in self.texts:
            self.texts.append(text)
        return self.texts.index(text) + 1


def _breakeven_rows(document: Json, currency: str, notes: Footnotes) -> list[Json]:
    charted = {line.key for panel in site_panels(document) for line in panel.lines}
    rows = []
    for r in document["breakeven"]:
        key = f"{r['site']}-{r['offer']}-{r['term']}"
        u = r["utilisation"]
        payback = r["payback_months"]
        rows.append({
            "site": r["site"], "offer": r["offer"], "term": term_label(r["term"]), "key": key,
            "charted": key in charted, "glyph": marker_of(r["term"])[1],
            "term_note": notes.cite(r.get("note")),
            "listed": cell(r.get("rented_listed_per_accelerator_hour"),
                           money_precise(r.get("rented_listed_per_accelerator_hour"), currency)),
            "conversion": cell(r.get("conversion"), fixed(r.get("conversion"), 3)),
            "conversion_basis": r.get("conversion_basis") or "",
            "rented": cell(r["rented_per_accelerator_hour"], money(r["rented_per_accelerator_hour"], currency)),
            "fixed": cell(r["owned_fixed_per_month"], money(r["owned_fixed_per_month"], currency)),
            "variable": cell(r["owned_variable_per_accelerator_hour"],
                             money_precise(r["owned_variable_per_accelerator_hour"], currency)),
            "utilisation": cell(u, percent(u, 2) if u is not None else "none"),
            "utilisation_note": notes.cite(r.get("reason")),
            "hours_per_year": cell(r["accelerator_hours_per_year"], number(r["accelerator_hours_per_year"])),
            "campaigns_per_year": cell(r["campaigns_per_year"], fixed(r["campaigns_per_year"], 1)),
            "payback": cell(payback, fixed(payback, 1) if payback is not None
                            else ("none" if "never covers" in (r.get("payback_reason") or "") else "beyond life")),
            "payback_note": notes.cite(r.get("payback_reason")),
            "payback_basis_note": notes.cite(f"Payback at {r['site']}: " + r["payback_basis"]
                                             if r.get("payback_basis") else None),
        })
    return rows


def _recommendation(document: Json, currency: str) -> Json | None:
    chosen = document.get("recommendation")
    if not chosen:
        return None
    option = document["options"][chosen["option_index"]]
    row = _option_row(option, currency)
    deadline = document["request"]["campaign"].get("deadline_days")
    instances = document["work"].get("instances") or 1
    cost = option["cost"]
    view = cost.get("view", "full")
    figures = [("Programme total", row["programme"], f"{number(instances)} instances"),
               ("Per instance", row["total"], ""),
               ("Present value", cell(cost.get("npv"), money(cost.get("npv"), currency)), "of the cash flow")]
    if instances <= 1:
        figures = [("Total cost", row["total"], f"{view} view" if view != "full" else "")]
    figures += [
        ("Per accelerator-hour", row["per_hour"], ""),
        ("Wall-clock days", row["days"], f"deadline {number(deadline, 1)}" if deadline else "no deadline"),
        ("Accelerators", row["accelerators"], ""),
        ("Facility energy", cell(option["energy"]["facility_kwh"], number(option["energy"]["facility_kwh"])), "kWh"),
        ("Emissions", row["kgco2e"], "kg CO2e"),
    ]
    return {**row, "why": chosen["why"], "figures": figures}


def _value(value: object) -> str:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return str(value)
    return number(value, 6)


def report_context(document: Json) -> Json:
    currency = str(document["currency"])
    request = document["request"]
    options = document["options"]
    feasible = [o for o in options if o["feasible"]]
    engineering = feasible or options
    charted, left_out = charted_options(document)
    notes = Footnotes()
    return {
        "campaign_name": request["campaign"]["name"],
        "team": request["campaign"]["team"],
        "quote_id": document.get("id") or "offline (not stored)",
        "created_at": moment(document.get("created_at")),
        "catalog_id": document.get("catalog_id") or "catalog file",
        "catalog_hash": str(document.get("catalog_hash") or "")[:12],
        "model_version": document.get("model_version") or MISSING,
        "currency": currency,
        "recommendation": _recommendation(document, currency),
        "next_steps": document.get("next_steps") or [],
        "facts": campaign_facts(document),
        "options": [_option_row(o, currency) for o in options],
        "feasible_count": len(feasible),
        "breakdowns": [_breakdown(o, currency) for o in feasible],
        "engineering": [_engineering(o) for o in engineering],
        "engineering_all": not feasible,
        "charted_count": len(charted),
        "charted_left_out": left_out,
        "breakeven": _breakeven_rows(document, currency, notes),
        "breakeven_left_out": document.get("breakeven_left_out", []),
        "recurring": (document["work"].get("instances") or 1) > 1,
        "view": (options[0]["cost"].get("view", "full") if options else "full"),
        "breakeven_notes": notes.texts,
        "has_curves": bool(document.get("curves")),
        "residency_rule": residency_rule(request["campaign"].get("data") or {}),
        "residency": residency_rows(document),
        "assumptions": [{"name": a["name"].replace("_", " "), "code": a["name"], "value": _value(a["value"]),
                         "unit": a.get("unit") or "", "source": a.get("source") or ""}
                        for a in document.get("assumptions", [])],
        "cautions": document.get("cautions", []),
    }
