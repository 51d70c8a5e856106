"""The report in a real browser: a `berth serve` process on a loopback port and a temporary SQLite
file (tests/e2e/conftest.py), Debian's chromium driven by Playwright. The page shows the
recommendation, both charts at a real size and the cautions, raises no console error, asks the
network for nothing but itself, hides its navigation when printed, and leaves a full-page screenshot
in test-artifacts/report.png for people to look at."""

import shutil
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.conftest import load_example
from tests.e2e.conftest import REPO_ROOT, BerthServer

CHROMIUM = Path("/usr/bin/chromium")
# Headless, and quiet on a closed network (otherwise chromium floods it with refused connections).
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", "--no-first-run"]
ARTIFACTS = REPO_ROOT / "test-artifacts"

playwright_api = pytest.importorskip("playwright.sync_api", reason="the test extra installs playwright")
pytestmark = [
    pytest.mark.e2e,
    pytest.mark.skipif(not CHROMIUM.exists() or shutil.which(str(CHROMIUM)) is None,
                       reason="needs Debian's chromium at /usr/bin/chromium (.ci/run installs it)"),
]


def store_demo_quote(server: BerthServer) -> dict[str, Any]:
    response = httpx.post(f"{server.url}/v1/quotes", json=load_example("campaign-owned-wins.json"), timeout=60)
    assert response.status_code == 201, response.text
    body: dict[str, Any] = response.json()
    return body


def test_the_report_renders_in_a_browser_with_its_charts_and_cautions(berth: BerthServer) -> None:
    quote = store_demo_quote(berth)
    url = f"{berth.url}/v1/quotes/{quote['id']}/report"
    console_errors: list[str] = []
    page_errors: list[str] = []
    requested: list[str] = []
    ARTIFACTS.mkdir(exist_ok=True)
    screenshot = ARTIFACTS / "report.png"
    screenshot.unlink(missing_ok=True)

    with playwright_api.sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1200, "height": 900})
            page.on("console", lambda message: console_errors.append(message.text)
                    if message.type == "error" else None)
            page.on("pageerror", lambda error: page_errors.append(str(error)))
            page.on("request", lambda request: requested.append(request.url))
            response = page.goto(url, wait_until="load")
            assert response is not None and response.status == 200

            campaign = quote["request"]["campaign"]["name"]
            assert campaign in page.title()
            recommended = page.locator("#recommended-option")
            assert recommended.is_visible()
            chosen = quote["options"][quote["recommendation"]["option_index"]]
            assert recommended.inner_text() == f"{chosen['venue']['id']} · owned, chargeback"
            assert quote["recommendation"]["why"] in page.locator("#why").inner_text()

            for chart in ("#breakeven-chart svg", "#cost-chart svg"):
                svg = page.locator(chart)
                assert svg.count() == 1 and svg.is_visible(), chart
                box = svg.bounding_box()
                assert box is not None and box["width"] > 400 and box["height"] > 150, (chart, box)
            marks = page.locator("#breakeven-chart g[id^='breakeven-']")
            assert marks.count() > 0
            for k in range(marks.count()):
                assert marks.nth(k).bounding_box() is not None  # each break-even marker is drawn on screen

            cautions = page.locator("#cautions li")
            assert cautions.count() >= 3
            text = " ".join(cautions.all_inner_texts())
            for phrase in ("not a vendor quote", "licensed engineers under local codes", "not legal advice"):
                assert phrase in text
            assert page.locator("#cautions").is_visible()

            page.screenshot(path=str(screenshot), full_page=True)

            assert page.locator("nav.contents").is_visible()
            page.emulate_media(media="print")
            assert not page.locator("nav.contents").is_visible()  # the print rules apply
            assert page.locator("#recommended-option").is_visible()
        finally:
            browser.close()

    assert console_errors == []
    assert page_errors == []
    assert requested == [url], "the page is self-contained: no other request"
    assert screenshot.stat().st_size > 50_000
