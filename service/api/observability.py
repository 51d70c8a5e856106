"""Metrics and logs: Prometheus text at /metrics (HTTP metrics plus the domain's own), and one
JSON object per log line carrying the request id."""

import json
import logging
import sys
from typing import Any

from fastapi import FastAPI
from fastapi.responses import PlainTextResponse
from prometheus_client import REGISTRY, CollectorRegistry, Counter, Histogram
from prometheus_fastapi_instrumentator import Instrumentator

from service.api.middleware import REQUEST_ID


class DomainMetrics:
    """The trade's own counters, registered once per registry."""

    def __init__(self, registry: CollectorRegistry = REGISTRY) -> None:
        self.quotes_created = Counter("berth_quotes_created_total", "Quotes stored.", registry=registry)
        self.quote_seconds = Histogram("berth_quote_seconds", "Time to compute and store one quote.",
                                       buckets=(0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 2, 5), registry=registry)
        self.sweep_scenarios = Counter("berth_sweep_scenarios_total", "Sweep scenarios evaluated.",
                                       registry=registry)
        self.fleet_plans = Counter("berth_fleet_plans_total", "Fleet plans computed.", registry=registry)
        self.errors = Counter("berth_errors_total", "Problems answered, by type.", ["type"], registry=registry)


_METRICS: dict[int, DomainMetrics] = {}


def domain_metrics(registry: CollectorRegistry = REGISTRY) -> DomainMetrics:
    """One set of domain metrics per registry (several apps in one test process share the default)."""
    key = id(registry)
    if key not in _METRICS:
        _METRICS[key] = DomainMetrics(registry)
    return _METRICS[key]


def install_metrics(app: FastAPI) -> None:
    """HTTP metrics from the instrumentator and /metrics, outside auth and rate limits."""
    Instrumentator(excluded_handlers=["/metrics", "/healthz", "/readyz"]).instrument(app).expose(
        app, endpoint="/metrics", include_in_schema=True, tags=["probes"],
        response_class=PlainTextResponse)  # documents the Prometheus text it answers with
    app.state.metrics = domain_metrics()


class JsonFormatter(logging.Formatter):
    """One JSON object per line: time, level, logger, message, request id and any extra fields."""

    STANDARD = set(logging.LogRecord("", 0, "", 0, "", (), None).__dict__) | {"message", "asctime", "color_message"}

    def format(self, record: logging.LogRecord) -> str:
        entry: dict[str, Any] = {
            "time": self.formatTime(record, "%Y-%m-%dT%H:%M:%S%z"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
            "request_id": REQUEST_ID.get(),
        }
        entry.update({k: v for k, v in record.__dict__.items() if k not in self.STANDARD})
        if record.exc_info:
            entry["error"] = self.formatException(record.exc_info)
        return json.dumps(entry, default=str)


def configure_logging(level: str = "INFO") -> None:
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(JsonFormatter())
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level)
    for name in ("uvicorn", "uvicorn.error", "uvicorn.access"):
        logging.getLogger(name).handlers[:] = []
        logging.getLogger(name).propagate = True
    logging.getLogger("uvicorn.access").setLevel(logging.WARNING)  # berth.http logs each request instead
