"""Every chart and sheet a person may read alone carries the cautions: each SVG in its `<desc>` and
as a footnote drawn below the chart (inside the image, on white), each CSV in a column a header-first
reader reads as data. The options CSV's is checked in test_options_csv.py, the sweep CSV's in the
sweep suites."""

import xml.etree.ElementTree as ET
from collections.abc import Callable
from typing import Any

import pytest

from service.reports.breakeven_chart import breakeven_svg
from service.reports.cost_chart import cost_figure_svg
from service.reports.fleet_chart import fleet_figure_svg
from tests.reports.conftest import Json, offline_document
from tests.reports.test_fleet_report import demo_plan

SVG = "{http://www.w3.org/2000/svg}"
PHRASES = ("not a vendor quote", "licensed engineers", "not legal advice")
CHARTS: dict[str, Callable[[], str]] = {
    "break-even": lambda: breakeven_svg(offline_document("owned-wins")),
    "break-even without an owned site": lambda: breakeven_svg(
        {**offline_document("owned-wins"), "curves": [], "breakeven": []}),
    "costs": lambda: cost_figure_svg(offline_document("split")),
    "fleet plan": lambda: fleet_figure_svg(demo_plan()),
}


def height_pt(root: ET.Element) -> float:
    return float(root.attrib["height"].removesuffix("pt"))


@pytest.mark.parametrize("name", list(CHARTS))
def test_each_chart_carries_the_cautions_in_its_desc_and_as_a_footnote_below_it(name: str) -> None:
    root = ET.fromstring(CHARTS[name]().removeprefix('<?xml version="1.0" encoding="utf-8" standalone="no"?>\n'))
    desc = root.find(f"{SVG}desc")
    assert desc is not None and desc.text is not None
    assert all(phrase in desc.text for phrase in PHRASES)
    [footnote] = [g for g in root.iter(f"{SVG}g") if g.attrib.get("class") == "cautions"]
    text = " ".join(t.text or "" for t in footnote.iter(f"{SVG}text"))
    assert all(phrase in text for phrase in PHRASES)
    # Drawn inside the image, below everything matplotlib drew, each line within the width.
    background = footnote.find(f"{SVG}rect")
    assert background is not None
    top = float(background.attrib["y"])
    assert top + float(background.attrib["height"]) == pytest.approx(height_pt(root))
    assert all(top < float(t.attrib["y"]) <= height_pt(root) for t in footnote.iter(f"{SVG}text"))
    view = [float(v) for v in root.attrib["viewBox"].split()]
    assert view[3] == pytest.approx(height_pt(root))
    width = view[2]
    assert all(len(t.text or "") * 7 * 0.6 <= width for t in footnote.iter(f"{SVG}text"))


def test_a_documents_own_cautions_are_used_and_missing_ones_added() -> None:
    document: dict[str, Any] = offline_document("owned-wins")
    document = {**document, "cautions": ["Our own words: not a vendor quote, just planning."]}
    svg = breakeven_svg(document)
    assert "Our own words" in svg and "licensed engineers" in svg and "not legal advice" in svg


def test_the_footnote_keeps_charts_byte_identical() -> None:
    document: Json = offline_document("owned-wins")
    assert breakeven_svg(document) == breakeven_svg(document)
