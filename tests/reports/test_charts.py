"""The charts: the break-even SVG parses as XML, marks exactly the quote's break-even utilisations
and planned utilisations, and is byte-identical on every render, in this process or another; the
cost chart's bars add up to each option's total."""

import json
import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from service.reports.breakeven_chart import breakeven_svg
from service.reports.cost_chart import cost_figure_svg
from service.reports.figures import charted_options
from tests.reports.conftest import Json, document_for, offline_document

SVG = "{http://www.w3.org/2000/svg}"


def groups(svg: str, prefix: str) -> dict[str, ET.Element]:
    root = ET.fromstring(svg.encode("utf-8"))
    return {g.attrib["id"]: g for g in root.iter(f"{SVG}g") if g.attrib.get("id", "").startswith(prefix)}


def cheapest_eligible_rows(document: Json) -> dict[tuple[str, str], Json]:
    """Per (site, term), the lowest rented price among the break-even rows (only rented options
    that passed every screen have one): the pairings the chart is meant to draw."""
    best: dict[tuple[str, str], Json] = {}
    for row in document["breakeven"]:
        key = (row["site"], row["term"])
        if key not in best or row["rented_per_accelerator_hour"] < best[key]["rented_per_accelerator_hour"]:
            best[key] = row
    return best


def test_the_breakeven_svg_marks_the_quotes_breakeven_utilisations(any_document: Json) -> None:
    marks = groups(breakeven_svg(any_document), "breakeven-")
    expected = {f"breakeven-{r['site']}-{r['offer']}-{r['term']}": r
                for r in cheapest_eligible_rows(any_document).values() if r["utilisation"] is not None}
    assert set(marks) == set(expected)
    # Every example with a rented option that passed its screens has a break-even to mark.
    assert bool(marks) == bool(any_document["breakeven"])
    for gid, mark in marks.items():
        row = expected[gid]
        assert (mark.attrib["data-site"], mark.attrib["data-offer"], mark.attrib["data-term"]) == \
            (row["site"], row["offer"], row["term"])
        assert float(mark.attrib["data-utilisation"]) == row["utilisation"]


HINGE = re.compile(r"it hinges on (\S+)'s planned utilisation of [\d.]+% \(its current utilisation is [\d.]+%\): "
                   r"below ([\d.]+)% the best rented option, ([^/]+)/(\S+),")


def test_the_marked_breakeven_agrees_with_the_recommendations_why() -> None:
    document = offline_document("owned-wins")
    hinge = HINGE.search(document["recommendation"]["why"])
    assert hinge, document["recommendation"]["why"]
    site, percent, offer, term = hinge.groups()
    mark = groups(breakeven_svg(document), "breakeven-")[f"breakeven-{site}-{offer}-{term}"]
    assert f"{float(mark.attrib['data-utilisation']) * 100:.1f}" == percent


def test_each_rented_line_is_drawn_at_the_quotes_price(any_document: Json) -> None:
    lines = groups(breakeven_svg(any_document), "rented-")
    rows = {f"rented-{r['site']}-{r['offer']}-{r['term']}": r for r in any_document["breakeven"]}
    assert bool(lines) == bool(rows)
    for gid, line in lines.items():
        assert float(line.attrib["data-price-per-accelerator-hour"]) == \
            pytest.approx(rows[gid]["rented_per_accelerator_hour"], rel=1e-6)


def test_each_sites_planned_utilisation_is_marked(any_document: Json) -> None:
    marks = groups(breakeven_svg(any_document), "planned-")
    planned = {o["venue"]["id"]: o["term_figures"]["utilisation"] for o in any_document["options"]
               if o["term"] == "owned_chargeback"}
    assert {gid.removeprefix("planned-") for gid in marks} == set(planned)
    for gid, mark in marks.items():
        assert float(mark.attrib["data-utilisation"]) == planned[gid.removeprefix("planned-")]


def test_the_breakeven_svg_has_axes_with_units_and_currency_and_a_text_alternative() -> None:
    svg = breakeven_svg(offline_document("owned-wins"))
    root = ET.fromstring(svg.encode("utf-8"))
    assert root.attrib["role"] == "img"
    title_id, desc_id = root.attrib["aria-labelledby"].split()
    assert root.find(f"{SVG}title").attrib["id"] == title_id
    desc = root.find(f"{SVG}desc")
    document = offline_document("owned-wins")
    hinge = HINGE.search(document["recommendation"]["why"])
    assert hinge and desc.attrib["id"] == desc_id and f"break-even at {hinge.group(2)}%" in desc.text
    texts = " ".join("".join(t.itertext()) for t in root.iter(f"{SVG}text"))
    assert "EUR per used accelerator-hour" in texts
    assert "utilisation of the site's accelerators" in texts
    assert "planned 60%" in texts


def test_two_renders_are_byte_identical(any_document: Json) -> None:
    assert breakeven_svg(any_document).encode() == breakeven_svg(any_document).encode()
    assert cost_figure_svg(any_document).encode() == cost_figure_svg(any_document).encode()


def test_a_render_in_another_process_is_byte_identical(tmp_path: Path) -> None:
    document = offline_document("split")
    source = tmp_path / "quote.json"
    source.write_text(json.dumps(document), encoding="utf-8")
    script = ("import json, sys; from service.reports.breakeven_chart import breakeven_svg; "
              "sys.stdout.buffer.write(breakeven_svg(json.load(open(sys.argv[1], encoding='utf-8'))).encode())")
    result = subprocess.run([sys.executable, "-c", script, str(source)], capture_output=True, timeout=120,
                            check=False)
    assert result.returncode == 0, result.stderr.decode()
    assert result.stdout == breakeven_svg(document).encode()


def test_without_owned_sites_the_chart_says_there_is_nothing_to_compare() -> None:
    document = offline_document("renting-wins")
    document["curves"], document["breakeven"] = [], []
    svg = breakeven_svg(document)
    root = ET.fromstring(svg.encode("utf-8"))
    assert "no owned site" in " ".join(root.itertext())
    assert not groups(svg, "breakeven-")


def test_the_cost_bars_add_up_to_each_charted_options_total(any_document: Json) -> None:
    shown, _left_out = charted_options(any_document)
    segments = groups(cost_figure_svg(any_document), "cost-")
    for option in shown:
        rank = str(option["rank"])
        parts = [float(g.attrib["data-amount"]) for g in segments.values()
                 if g.attrib["data-rank"] == rank and "data-amount" in g.attrib]
        assert sum(parts) == pytest.approx(option["cost"]["total"], abs=0.01 * len(option["cost"]["lines"]))
        assert float(segments[f"cost-{rank}-total"].attrib["data-total"]) == option["cost"]["total"]
        categories = {g.attrib["data-category"] for g in segments.values()
                      if g.attrib["data-rank"] == rank and "data-category" in g.attrib}
        if option["venue"]["kind"] == "rented":
            assert "rental" in categories and "capital_facility" not in categories
        if option["venue"]["kind"] == "owned":
            assert "capital_facility" in categories and "rental" not in categories


def test_the_cost_chart_leaves_out_options_over_ten_times_the_cheapest() -> None:
    document = offline_document("owned-wins")
    shown, left_out = charted_options(document)
    feasible = [o for o in document["options"] if o["feasible"]]
    cheapest = min(o["cost"]["total"] for o in feasible)
    assert [o["rank"] for o in shown] == [o["rank"] for o in feasible if o["cost"]["total"] <= 10 * cheapest]
    assert left_out == len(feasible) - len(shown) > 0


def test_with_no_feasible_option_the_cost_chart_says_so() -> None:
    svg = cost_figure_svg(offline_document("residency-blocked"))
    assert "No feasible option" in " ".join(ET.fromstring(svg.encode("utf-8")).itertext())


def test_a_campaign_whose_every_option_costs_nothing_draws_its_bars_on_a_unit_axis() -> None:
    """A smoke test (a million samples at a billion a second per accelerator: a millisecond's work): every
    feasible option costs 0.00 once rounded to the cent, so the widest bar is 0. The chart spans one
    currency unit rather than the empty span matplotlib widens with a warning (an error under the tests'
    settings, and a 500 from the report's route)."""
    document = document_for({"campaign": {"name": "smoke-test", "team": "language", "work": {
        "kind": "measured", "reference_node_type": "b176-x8", "samples": 1e6,
        "samples_per_second_per_accelerator": 1e9}}})
    shown, _left_out = charted_options(document)
    assert shown and all(option["cost"]["total"] == 0.0 for option in shown)
    totals = {gid: g.attrib["data-total"] for gid, g in groups(cost_figure_svg(document), "cost-").items()
              if gid.endswith("-total")}
    assert totals == {f"cost-{option['rank']}-total": "0.00" for option in shown}


def test_every_svg_id_is_unique_and_every_reference_resolves(any_document: Json) -> None:
    checked = 0
    for svg in (breakeven_svg(any_document), cost_figure_svg(any_document)):
        root = ET.fromstring(svg.encode("utf-8"))
        ids = [e.attrib["id"] for e in root.iter() if "id" in e.attrib]
        assert len(ids) == len(set(ids))
        for by_url, by_href in re.findall(r'url\(#([^)]+)\)|href="#([^"]+)"', svg):
            assert (by_url or by_href) in ids
            checked += 1
    assert checked > 0  # clip paths and markers are referenced in every break-even chart


def test_the_two_charts_share_no_id_so_both_fit_in_one_page() -> None:
    document = offline_document("owned-wins")
    ids = [set(re.findall(r'\bid="([^"]+)"', svg)) for svg in (breakeven_svg(document), cost_figure_svg(document))]
    assert ids[0] and ids[1] and not ids[0] & ids[1]
