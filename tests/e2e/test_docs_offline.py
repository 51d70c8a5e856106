"""The interactive API docs with the network blocked: a real `berth serve`, Debian's chromium driven
by Playwright, and every request that is not to the server itself aborted. The page must still render
the API's title and its operations (its scripts and styles come from an installed package), and ask
for nothing outside the server."""

import shutil
from urllib.parse import urlsplit

import pytest

from tests.e2e.conftest import BerthServer
from tests.e2e.test_report_browser import CHROMIUM, CHROMIUM_ARGS

playwright_api = pytest.importorskip("playwright.sync_api", reason="the test extra installs playwright")
pytestmark = [
    pytest.mark.e2e,
    pytest.mark.skipif(not CHROMIUM.exists() or shutil.which(str(CHROMIUM)) is None,
                       reason="needs Debian's chromium at /usr/bin/chromium (.ci/run installs it)"),
]


def test_the_docs_render_with_every_outside_request_blocked(berth: BerthServer) -> None:
    server = urlsplit(berth.url).netloc
    blocked: list[str] = []
    page_errors: list[str] = []

    def only_the_server(route: "playwright_api.Route") -> None:
        if urlsplit(route.request.url).netloc == server:
            route.continue_()
        else:
            blocked.append(route.request.url)
            route.abort("internetdisconnected")

    with playwright_api.sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        try:
            context = browser.new_context()
            context.route("**/*", only_the_server)
            page = context.new_page()
            page.on("pageerror", lambda error: page_errors.append(str(error)))
            response = page.goto(f"{berth.url}/docs", wait_until="load")
            assert response is not None and response.status == 200
            page.wait_for_selector(".swagger-ui .info .title", timeout=15_000)
            assert "berth" in page.inner_text(".swagger-ui .info .title")
            page.wait_for_selector(".opblock-summary-path", timeout=15_000)
            paths = page.locator(".opblock-summary-path").all_inner_texts()
            assert any("/v1/quotes" in p for p in paths)
            assert any("/v1/catalogs/default" in p for p in paths)
        finally:
            browser.close()
    assert blocked == []
    assert page_errors == []
