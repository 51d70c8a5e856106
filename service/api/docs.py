"""The interactive API docs at /docs, served with their scripts and styles from an installed package
(swagger-ui-bundle-v2) under /docs/assets: nothing is loaded from a public network, so the page works
on an offline or locked-down network."""

from pathlib import Path

from fastapi import FastAPI
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import HTMLResponse
from starlette.staticfiles import StaticFiles
from swagger_ui_bundle import swagger_ui_path

ASSETS = "/docs/assets"


def install_docs(app: FastAPI, *, openapi_url: str = "/openapi.json") -> None:
    app.mount(ASSETS, StaticFiles(directory=Path(swagger_ui_path)), name="docs-assets")

    @app.get("/docs", include_in_schema=False)
    async def docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=openapi_url, title=f"{app.title}: API", swagger_js_url=f"{ASSETS}/swagger-ui-bundle.js",
            swagger_css_url=f"{ASSETS}/swagger-ui.css", swagger_favicon_url=f"{ASSETS}/favicon-32x32.png",
            oauth2_redirect_url=None,
            # No call to a public validator service for the "valid" badge.
            swagger_ui_parameters={"validatorUrl": None})
