"""The HTML report says what the stored quote says: every section is there, the figures shown are
the quote's own (checked through each cell's <data value> and its babel-formatted text), the
cautions are present, user text is escaped, and the page stands alone."""

import copy
import functools
import json
import re
from collections import Counter

import pytest
from babel.numbers import format_currency

from service.reports.html import render_report
from tests.conftest import load_example
from tests.reports.conftest import Json, document_for, offline_document
from tests.reports.page import Element, parse, value_of

SECTIONS = ("recommendation", "campaign", "options", "breakdown", "timing", "energy", "breakeven", "residency",
            "assumptions", "cautions")


@functools.lru_cache(maxsize=16)
def _page(serialised: str) -> Element:
    return parse(render_report(json.loads(serialised)))


def page_of(document: Json) -> Element:
    """The parsed report; pages are cached by content, since rendering is the slow part."""
    return _page(json.dumps(document, sort_keys=True))


def test_every_section_is_present_with_a_heading(any_document: Json) -> None:
    page = page_of(any_document)
    for section_id in SECTIONS:
        section = page.by_id(section_id)
        assert section.tag == "section"
        headings = section.find_all("h2")
        assert headings and headings[0].text, section_id
        assert section.attrs["aria-labelledby"] == headings[0].attrs["id"]


def test_the_recommendation_and_its_why_are_the_quotes() -> None:
    document = offline_document("owned-wins")
    page = page_of(document)
    chosen = document["options"][document["recommendation"]["option_index"]]
    assert chosen["term"] == "owned_chargeback"
    assert page.by_id("recommended-option").text == f"{chosen['venue']['id']} · owned, chargeback"
    assert page.by_id("why").text == f"Why: {document['recommendation']['why']}"
    figures = {dt.text: dd for div in page.find_all("dl", class_="figures")[0].find_all("div")
               for dt, dd in [(div.find("dt"), div.find("dd"))]}
    assert float(value_of(figures["Total cost"])) == chosen["cost"]["total"]
    assert figures["Total cost"].text == format_currency(chosen["cost"]["total"], "EUR", locale="en")
    assert float(value_of(figures["Wall-clock days"])) == chosen["timing"]["wall_clock_days"]
    assert float(value_of(figures["Emissions"])) == chosen["energy"]["kgco2e"]


def test_with_no_feasible_option_the_page_says_so_and_lists_the_next_steps() -> None:
    document = offline_document("residency-blocked")
    assert document["recommendation"] is None and document["next_steps"]
    page = page_of(document)
    assert page.by_id("recommended-option").text == "No feasible option"
    steps = [li.text for li in page.by_id("next-steps").find_all("li")]
    assert steps == [" ".join(step.split()) for step in document["next_steps"]]
    assert "No option is feasible" in page.by_id("breakdown").text


def test_each_option_row_shows_the_quotes_total_formatted_with_babel(any_document: Json) -> None:
    page = page_of(any_document)
    rows = [tr for tr in page.by_id("options-table").find_all("tr") if "data-venue" in tr.attrs]
    assert len(rows) == len(any_document["options"])
    for row, option in zip(rows, any_document["options"], strict=True):
        assert row.attrs["data-venue"] == option["venue"]["id"]
        assert row.attrs["data-term"] == option["term"]
        # A recurring campaign leads with the programme; a one-off shows its one instance.
        headline = "programme_total" if any_document["work"]["instances"] > 1 else "total"
        total = row.find("td", class_="total")
        assert float(value_of(total)) == option["cost"][headline]
        assert total.text == format_currency(option["cost"][headline], any_document["currency"], locale="en")
        rank = row.find("td").text
        assert rank == (str(option["rank"]) if option["feasible"] else "—")


def test_ruled_out_options_carry_their_reasons() -> None:
    document = offline_document("split")
    text = page_of(document).by_id("options-table").text
    for option in document["options"]:
        for reason in option["reasons"]:
            assert " ".join(reason.split()) in text


def test_each_feasible_option_has_its_cost_lines_summing_to_its_total(any_document: Json) -> None:
    page = page_of(any_document)
    tables = page.by_id("breakdown").find_all("table", class_="lines")
    feasible = [o for o in any_document["options"] if o["feasible"]]
    assert len(tables) == len(feasible)
    for table, option in zip(tables, feasible, strict=True):
        assert table.attrs["data-rank"] == str(option["rank"])
        body_rows = table.find("tbody").find_all("tr")
        assert [float(value_of(r.find("td", class_="n"))) for r in body_rows] == \
            [line["amount"] for line in option["cost"]["lines"]]
        assert [r.find("td", class_="basis").text for r in body_rows] == \
            [" ".join(line["basis"].split()) for line in option["cost"]["lines"]]
        assert float(value_of(table.find("tfoot"))) == option["cost"]["total"]


def test_the_breakeven_table_shows_every_row_with_the_quotes_utilisation(any_document: Json) -> None:
    if not any_document["breakeven"]:  # every rented option failed a screen: the page says which
        left_out = page_of(any_document).by_id("breakeven-left-out").text
        assert all(r["offer"] in left_out for r in any_document["breakeven_left_out"])
        return
    table = page_of(any_document).by_id("breakeven-table")
    rows = {tr.attrs["data-key"]: tr for tr in table.find_all("tr") if "data-key" in tr.attrs}
    assert len(rows) == len(any_document["breakeven"])
    for expected in any_document["breakeven"]:
        cell = rows[f"{expected['site']}-{expected['offer']}-{expected['term']}"].find("td", class_="be")
        if expected["utilisation"] is None:
            assert cell.text.startswith("none") and not cell.find_all("data")
        else:
            assert float(value_of(cell)) == expected["utilisation"]
            assert cell.text == f"{expected['utilisation'] * 100:.2f}%"


def test_a_breakeven_without_a_crossing_cites_its_reason() -> None:
    document = copy.deepcopy(offline_document("owned-wins"))
    row = document["breakeven"][0]  # as a rented price below the busy energy would make it
    row.update(utilisation=None, accelerator_hours_per_year=None, campaigns_per_year=None,
               reason="the rented price is below the owned busy-energy cost: owning never wins")
    nulls = [r for r in document["breakeven"] if r["utilisation"] is None]
    page = page_of(document)
    notes = page.by_id("breakeven").find("ol", class_="notes").text
    for row in nulls:
        assert row["reason"][1:] in notes


def test_timing_and_energy_show_the_recommended_options_figures() -> None:
    document = offline_document("owned-wins")
    chosen = document["options"][0]
    page = page_of(document)
    layout_row = page.by_id("layout-table").find("tr", class_="chosen")
    values = [float(value_of(td)) for td in layout_row.find_all("td", class_="n")]
    assert chosen["timing"]["network_gbps_needed_for_95pct"] in values
    assert chosen["timing"]["scaling_efficiency"] in values
    energy_row = page.by_id("energy-table").find("tr", class_="chosen")
    values = [float(value_of(td)) for td in energy_row.find_all("td", class_="n")]
    for key in ("it_kwh", "facility_kwh", "peak_it_kw", "cooling_kw_thermal", "cooling_tons", "kgco2e"):
        assert chosen["energy"][key] in values, key


def test_the_residency_screen_names_each_venue_ruled_out_and_why() -> None:
    document = offline_document("owned-wins")
    page = page_of(document)
    assert "EEA" in page.by_id("residency").find("p").text
    rows = {tr.attrs["data-venue"]: tr for tr in page.by_id("residency-table").find_all("tr")
            if "data-venue" in tr.attrs}
    assert set(rows) == {o["venue"]["id"] for o in document["options"]}
    assert rows["tidewell-halvert-a88"].attrs["data-passes"] == "false"
    assert "processes data in US" in rows["tidewell-halvert-a88"].text
    assert all(rows[v].attrs["data-passes"] == "true" for v in rows if v != "tidewell-halvert-a88")


def test_without_a_residency_rule_every_venue_passes() -> None:
    page = page_of(offline_document("renting-wins"))
    assert "No residency rule was entered" in page.by_id("residency").text
    rows = [tr for tr in page.by_id("residency-table").find_all("tr") if "data-venue" in tr.attrs]
    assert rows and all(tr.attrs["data-passes"] == "true" for tr in rows)


def test_every_assumption_is_listed_with_its_source(any_document: Json) -> None:
    text = page_of(any_document).by_id("assumptions-table").text
    assert any_document["assumptions"]
    for assumption in any_document["assumptions"]:
        assert assumption["name"] in text
        assert " ".join(assumption["source"].split()) in text


def test_the_three_cautions_are_present(any_document: Json) -> None:
    items = [li.text for li in page_of(any_document).by_id("cautions").find_all("li")]
    for phrase in ("not a vendor quote", "licensed engineers under local codes", "not legal advice"):
        assert any(phrase in item for item in items), phrase


def test_the_cautions_are_kept_even_when_a_stored_quote_lacks_them() -> None:
    document = offline_document("owned-wins")
    document["cautions"] = []
    items = [li.text for li in page_of(document).by_id("cautions").find_all("li")]
    assert len(items) == 3
    assert any("licensed engineers" in item for item in items)


def test_a_campaign_name_with_markup_is_escaped() -> None:
    request = load_example("campaign-owned-wins.json")
    request["campaign"]["name"] = '<script>alert("x")</script> & <b>co</b>'
    html = render_report(document_for(request))
    assert "<script" not in html
    assert "<b>co</b>" not in html
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; &lt;b&gt;co&lt;/b&gt;" in html
    assert parse(html).by_id("campaign-name").text == '<script>alert("x")</script> & <b>co</b>'


def test_the_page_is_self_contained_and_needs_no_script(any_document: Json) -> None:
    html = render_report(any_document)
    page = parse(html)
    assert not page.find_all("script") and not page.find_all("img") and not page.find_all("iframe")
    # The one <link> is an empty inline icon, so a browser does not ask the server for /favicon.ico.
    assert [(link.attrs["rel"], link.attrs["href"]) for link in page.find_all("link")] == [("icon", "data:,")]
    for element in page.walk():
        for name in ("src", "href", "xlink:href"):
            if name in element.attrs and element.tag != "link":
                assert element.attrs[name].startswith("#"), (element.tag, element.attrs[name])
    assert not re.search(r"url\((?!#)", html), "only in-page references in styles"
    assert "@import" not in html
    assert "@media print" in page.find("style").text


def test_ids_are_unique_and_every_reference_resolves(any_document: Json) -> None:
    page = page_of(any_document)
    ids = Counter(e.attrs["id"] for e in page.walk() if "id" in e.attrs)
    assert [i for i, n in ids.items() if n > 1] == []
    for element in page.walk():
        for reference in element.attrs.get("aria-labelledby", "").split():
            assert reference in ids, reference
        href = element.attrs.get("href", "")
        if href.startswith("#"):
            assert href[1:] in ids, href


def test_both_charts_are_inline_accessible_images(any_document: Json) -> None:
    page = page_of(any_document)
    charts = page.find_all("svg")
    assert {svg.attrs["data-chart"] for svg in charts} == {"chart-costs", "chart-breakeven"}
    for svg in charts:
        assert svg.attrs["role"] == "img"
        title_id, desc_id = svg.attrs["aria-labelledby"].split()
        assert svg.find("title", id=title_id).text
        assert svg.find("desc", id=desc_id).text


def test_every_table_has_a_caption_and_scoped_headers(any_document: Json) -> None:
    tables = page_of(any_document).find_all("table")
    ids = {t.attrs.get("id") for t in tables}
    assert {"options-table", "layout-table", "timing-table", "energy-table", "residency-table",
            "assumptions-table"} <= ids
    assert ("breakeven-table" in ids) == bool(any_document["breakeven"])
    for table in tables:
        assert table.find_all("caption"), table.attrs
        for th in table.find_all("th"):
            assert th.attrs.get("scope") in ("col", "row", "rowgroup"), th.text


@pytest.mark.parametrize("name", ["owned-wins", "split"])
def test_the_report_depends_on_the_stored_json_alone(name: str) -> None:
    document = offline_document(name)
    round_tripped = json.loads(json.dumps(document))
    assert render_report(document) == render_report(round_tripped)


def test_the_report_names_the_quote_catalog_and_model() -> None:
    document = offline_document("recurring")
    page = page_of(document)
    masthead = page.find("header", class_="masthead").text
    for text in (document["id"], document["catalog_id"], document["catalog_hash"][:12], document["model_version"],
                 "2027-01-04 09:00 UTC", document["request"]["campaign"]["team"]):
        assert text in masthead
    facts = page.by_id("campaign").text
    assert "repeated every 1 month(s) for 36 months (36 instances" in facts
    assert "Must finish within 28 days." in facts
