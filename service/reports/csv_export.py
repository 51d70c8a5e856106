"""The options of a stored quote as CSV for spreadsheets (RFC 4180: CRLF line ends, quoted where
needed): one row per option, units in the column names, plain decimals, a currency column; after
the fixed columns, one column per cost line item, named as in the quote's JSON (empty where an
option has no such line); and the cautions in a last column on every row: a person sees them beside
the figures (and they survive a sort or a filter), while a reader that takes the first row as the
header reads every row as data."""

import csv
import io
from collections.abc import Iterator
from typing import Any

from service.reports.cautions import cautions
from service.reports.formatting import plain

Json = dict[str, Any]

OPTIONS_CSV_HEADER = (
    "rank", "venue_kind", "venue_id", "jurisdiction", "term", "feasible", "reasons",
    "nodes", "accelerators", "wall_clock_days", "accelerator_hours",
    "total", "per_accelerator_hour", "programme_total", "npv", "cost_view", "full_total", "incremental_total",
    "it_kwh", "facility_kwh", "peak_it_kw", "cooling_tons", "kgco2e", "currency",
)
CAUTIONS_COLUMN = "cautions"


def _row(option: Json, currency: str, items: list[str], said: str) -> list[str]:
    venue, layout, timing = option["venue"], option["layout"], option["timing"]
    cost, energy = option["cost"], option["energy"]
    values: list[object] = [
        option["rank"], venue["kind"], venue["id"], venue["jurisdiction"], option["term"], option["feasible"],
        "; ".join(option["reasons"]),
        layout["nodes"], layout["accelerators"], timing["wall_clock_days"], timing["accelerator_hours"],
        cost["total"], cost["per_accelerator_hour"], cost.get("programme_total"), cost.get("npv"), cost.get("view"),
        cost.get("full_total"), cost.get("incremental_total"), energy["it_kwh"], energy["facility_kwh"],
        energy["peak_it_kw"], energy["cooling_tons"], energy["kgco2e"], cost.get("currency") or currency,
    ]
    amounts = {line["item"]: line["amount"] for line in cost["lines"]}
    return ([plain(v) for v in values] + [plain(amounts[item]) if item in amounts else "" for item in items]
            + [said])


def line_items(document: Json) -> list[str]:
    """Every cost line item of the quote's options, in the order they first appear."""
    return list(dict.fromkeys(line["item"] for o in document["options"] for line in o["cost"]["lines"]))


def options_csv(document: Json) -> Iterator[str]:
    """The CSV a line at a time: the header, then one row per option in the quote's order."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    currency = str(document["currency"])
    items = line_items(document)
    said = " ".join(cautions(document))
    header = [*OPTIONS_CSV_HEADER, *items, CAUTIONS_COLUMN]
    for row in (header, *(_row(o, currency, items, said) for o in document["options"])):
        writer.writerow(row)
        yield buffer.getvalue()
        buffer.seek(0)
        buffer.truncate()
