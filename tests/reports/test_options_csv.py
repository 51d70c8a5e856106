"""The options CSV: RFC 4180 as the stdlib reads it, one row per option in the quote's order,
units in the column names, plain decimals (no exponent, no grouping), a currency column, and a
column per cost line item named as in the JSON."""

import csv
import io
import re

from service.reports.csv_export import OPTIONS_CSV_HEADER, options_csv
from tests.reports.conftest import Json, offline_document

HEADER = ["rank", "venue_kind", "venue_id", "jurisdiction", "term", "feasible", "reasons", "nodes", "accelerators",
          "wall_clock_days", "accelerator_hours", "total", "per_accelerator_hour", "programme_total", "npv",
          "cost_view", "full_total", "incremental_total", "it_kwh", "facility_kwh",
          "peak_it_kw", "cooling_tons", "kgco2e", "currency"]
NUMERIC = ["nodes", "accelerators", "wall_clock_days", "accelerator_hours", "total", "per_accelerator_hour",
           "programme_total", "npv", "full_total", "incremental_total", "it_kwh",
           "facility_kwh", "peak_it_kw", "cooling_tons", "kgco2e"]
PLAIN_DECIMAL = re.compile(r"^-?\d+(\.\d+)?$")


def rows_of(document: Json) -> tuple[str, list[dict[str, str]]]:
    text = "".join(options_csv(document))
    return text, list(csv.DictReader(io.StringIO(text, newline="")))


def test_the_header_names_each_column_with_its_unit() -> None:
    document = offline_document("owned-wins")
    text, _rows = rows_of(document)
    items = list(dict.fromkeys(line["item"] for o in document["options"] for line in o["cost"]["lines"]))
    assert {"capital", "facility", "busy_energy", "compute", "commitment", "storage", "egress"} <= set(items)
    assert next(csv.reader(io.StringIO(text))) == [*HEADER, *items, "cautions"]
    assert list(OPTIONS_CSV_HEADER) == HEADER


def test_every_cost_line_is_a_column_with_the_options_amount(any_document: Json) -> None:
    _text, rows = rows_of(any_document)
    for row, option in zip(rows, any_document["options"], strict=True):
        lines = {line["item"]: line["amount"] for line in option["cost"]["lines"]}
        for item in set(row) - set(HEADER) - {"cautions"}:
            if item in lines:
                assert float(row[item]) == lines[item], (item, row[item])
            else:
                assert row[item] == "", item
        assert set(lines) <= set(row)
        assert float(row["programme_total"]) == option["cost"]["programme_total"]
        assert row["cost_view"] == option["cost"]["view"]


def test_every_row_carries_the_cautions_and_a_header_first_reader_reads_every_option(any_document: Json) -> None:
    text, rows = rows_of(any_document)
    assert len(rows) == len(any_document["options"])  # no preamble line taken for a header or a row
    for row in rows:
        for phrase in ("not a vendor quote", "licensed engineers", "not legal advice"):
            assert phrase in row["cautions"]
    header = next(csv.reader(io.StringIO(text, newline="")))
    assert header[-1] == "cautions"
    assert all(len(record) == len(header) for record in csv.reader(io.StringIO(text, newline="")))


def test_one_row_per_option_with_the_quotes_figures(any_document: Json) -> None:
    _text, rows = rows_of(any_document)
    assert len(rows) == len(any_document["options"])
    for row, option in zip(rows, any_document["options"], strict=True):
        assert row["venue_id"] == option["venue"]["id"]
        assert row["venue_kind"] == option["venue"]["kind"]
        assert row["jurisdiction"] == option["venue"]["jurisdiction"]
        assert row["term"] == option["term"]
        assert row["rank"] == ("" if option["rank"] is None else str(option["rank"]))
        assert row["feasible"] == ("true" if option["feasible"] else "false")
        assert row["reasons"] == "; ".join(option["reasons"])
        assert int(row["accelerators"]) == option["layout"]["accelerators"]
        assert float(row["total"]) == option["cost"]["total"]
        assert float(row["per_accelerator_hour"]) == option["cost"]["per_accelerator_hour"]
        assert float(row["wall_clock_days"]) == option["timing"]["wall_clock_days"]
        assert float(row["cooling_tons"]) == option["energy"]["cooling_tons"]
        assert float(row["kgco2e"]) == option["energy"]["kgco2e"]
        assert row["currency"] == any_document["currency"] == "EUR"


def test_numbers_are_plain_decimals(any_document: Json) -> None:
    _text, rows = rows_of(any_document)
    for row in rows:
        for column in NUMERIC:
            assert PLAIN_DECIMAL.match(row[column]), (column, row[column])


def test_lines_end_with_crlf_and_reasons_with_commas_are_quoted() -> None:
    document = offline_document("split")
    text, rows = rows_of(document)
    assert text.endswith("\r\n")
    assert text.count("\r\n") == len(document["options"]) + 1
    assert "\n" not in text.replace("\r\n", "")
    with_commas = [r for r in rows if "," in r["reasons"]]
    assert with_commas, "the split example has deadline reasons with thousands separators"
    for row in with_commas:
        assert f'"{row["reasons"]}"' in text


def test_the_csv_is_streamed_a_row_at_a_time() -> None:
    document = offline_document("owned-wins")
    chunks = list(options_csv(document))
    assert len(chunks) == len(document["options"]) + 1
    assert all(chunk.endswith("\r\n") for chunk in chunks)
