"""Leaner shapes of a stored quote document: the `summary` view (what a portal shows: the
recommendation and one row per option) and the row of the quote list. Both are cut from the document
generically, so fields the document gains (a layout's tensor, pipeline and data degrees, ZeRO stage,
micro-batch, bubble fraction, `decided_by`; new cost totals) pass through without a change here."""

from typing import Any, Literal

Json = dict[str, Any]
View = Literal["summary", "full"]

IDENTITY = ("id", "created_at", "catalog_id", "catalog_hash", "model_version", "currency")
OPTION_FIELDS = ("rank", "venue", "term", "feasible", "reasons", "layout")
TIMING_FIELDS = ("wall_clock_days", "accelerator_hours")
BREAKEVEN_FIELDS = ("site", "offer", "term", "utilisation", "payback_months", "reason")


def _totals(cost: Json) -> Json:
    """Every figure of an option's cost but its lines: total, per accelerator-hour, currency, and any
    total the document adds."""
    return {k: v for k, v in cost.items() if not isinstance(v, list | dict)}


def summary_view(document: Json) -> Json:
    """The recommendation, one row per option (rank, venue, term, feasible, reasons, the whole layout,
    days, accelerator-hours and the cost totals), break-even utilisation and payback, next steps and
    the cautions."""
    options = []
    for option in document.get("options", []):
        row = {k: option[k] for k in OPTION_FIELDS if k in option}
        timing = option.get("timing", {})
        row.update({k: timing.get(k) for k in TIMING_FIELDS})
        row["cost"] = _totals(option.get("cost", {}))
        options.append(row)
    request = document.get("request", {})
    campaign = request.get("campaign", {})
    quote_id = document.get("id")
    return {
        "view": "summary",
        **{k: document.get(k) for k in IDENTITY},
        "campaign": {"name": campaign.get("name"), "team": campaign.get("team")},
        "recommendation": document.get("recommendation"),
        "options": options,
        "breakeven": [{k: row.get(k) for k in BREAKEVEN_FIELDS} for row in document.get("breakeven", [])],
        "next_steps": document.get("next_steps", []),
        "cautions": document.get("cautions", []),
        "links": {} if quote_id is None else {"full": f"/v1/quotes/{quote_id}?view=full"},
    }


def shaped(document: Json, view: View) -> Json:
    return summary_view(document) if view == "summary" else document


def recommended(document: Json) -> Json | None:
    """The recommended option's name and total (its programme total where the document gives one: all
    runs and recurrences), or None when no option is feasible."""
    recommendation = document.get("recommendation")
    if not recommendation:
        return None
    option = document["options"][recommendation["option_index"]]
    cost = option.get("cost", {})
    return {"option": f"{option['venue']['id']}/{option['term']}",
            "programme_total": cost.get("programme_total", cost.get("total")),
            "currency": cost.get("currency", document.get("currency"))}
