"""Serving an app the way `berth serve` does: the same server options, in one process or in worker
processes that each build their own app (and engine) from the environment after the fork."""

import os
import tempfile
from collections.abc import Callable
from typing import Any

from fastapi import FastAPI

from service.api.connections import HeaderTimeoutProtocol, raise_open_file_limit
from service.api.observability import configure_logging
from service.config import Settings


def run_server(overrides: dict[str, Any], *, workers: int, app: Callable[[Settings], FastAPI], factory: str) -> None:
    """Serve `app(settings)` in this process, or with `workers` > 1 the app that `factory` (an import
    string of a function of no arguments) builds from the BERTH_* environment in each worker. The
    workers' shared metrics directory lives as long as the server, unless PROMETHEUS_MULTIPROC_DIR
    names one."""
    import uvicorn

    settings = Settings(**overrides)
    configure_logging(settings.log_level)
    raise_open_file_limit()
    # The app reads X-Forwarded-* itself (BERTH_FORWARDED_ALLOW_IPS), keeping the socket's peer for
    # local mode; uvicorn's own reading would overwrite the peer before the app sees it.
    options: dict[str, Any] = {"host": settings.host, "port": settings.port, "log_config": None,
                               "proxy_headers": False, "http": HeaderTimeoutProtocol}
    if workers == 1:
        uvicorn.run(app(settings), **options)
        return
    os.environ.update({f"BERTH_{name.upper()}": str(value) for name, value in overrides.items()})
    with tempfile.TemporaryDirectory(prefix="berth-metrics-") as metrics:
        os.environ.setdefault("PROMETHEUS_MULTIPROC_DIR", metrics)
        uvicorn.run(factory, factory=True, workers=workers, **options)
