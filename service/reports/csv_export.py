"""The options of a stored quote as CSV for spreadsheets (RFC 4180: CRLF line ends, quoted where
needed): one row per option, units in the column names, plain decimals, a currency column, and the
cautions in a last column on every row: a person sees them beside the figures (and they survive a
sort or a filter), while a reader that takes the first row as the header reads every row as data."""

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
    "total", "per_accelerator_hour", "it_kwh", "facility_kwh", "peak_it_kw", "cooling_tons", "kgco2e", "currency",
    "cautions",
)


def _row(option: Json, currency: str, cautions: str) -> list[str]:
    venue, layout, timing = option["venue"], option["layout"], option["timing"]
    cost, energy = option["cost"], option["energy"]
    values: list[object] = [
        option["rank"], venue["kind"], venue["id"], venue["jurisdiction"], option["term"], option["feasible"],
        "; ".join(option["reasons"]),
        layout["nodes"], layout["accelerators"], timing["wall_clock_days"], timing["accelerator_hours"],
        cost["total"], cost["per_accelerator_hour"], energy["it_kwh"], energy["facility_kwh"], energy["peak_it_kw"],
        energy["cooling_tons"], energy["kgco2e"], cost.get("currency") or currency, cautions,
    ]
    return [plain(v) for v in values]


def options_csv(document: Json) -> Iterator[str]:
    """The CSV a line at a time: the header, then one row per option in the quote's order."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    currency = str(document["currency"])
    said = " ".join(cautions(document))
    for row in (list(OPTIONS_CSV_HEADER), *(_row(o, currency, said) for o in document["options"])):
        writer.writerow(row)
        yield buffer.getvalue()
        buffer.seek(0)
        buffer.truncate()
