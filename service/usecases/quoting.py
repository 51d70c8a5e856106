"""Use cases: quote a campaign against a catalog. Storage-backed use cases take a repository
and own the transaction; the offline ones here take validated inputs and return the body."""

import functools
import hashlib
import json
from collections.abc import Callable
from datetime import datetime
from typing import Any

import pycountry

from service import __version__
from service.contract.catalog import CatalogIn
from service.contract.document import quote_document
from service.contract.request import MeasuredWorkIn, QuoteRequestIn
from service.domain.arrays import carrying_infinities
from service.domain.assumptions import DEFAULTS
from service.domain.evaluate import CampaignEvaluation
from service.domain.split import evaluate_with_splits
from service.errors import FieldProblem, InvalidInput


def catalog_hash(catalog: CatalogIn) -> str:
    """sha256 of the catalog's canonical JSON: equal content, equal hash, whatever the layout."""
    canonical = json.dumps(catalog.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canonical.encode("utf-8")).hexdigest()


def request_problems(catalog: CatalogIn, request: QuoteRequestIn) -> list[FieldProblem]:
    """What in a request the catalog cannot answer: unknown references, codes and groups."""
    problems = []
    work = request.campaign.work
    if isinstance(work, MeasuredWorkIn) and work.reference_node_type not in {n.id for n in catalog.node_types}:
        problems.append(FieldProblem("campaign.work.reference_node_type",
                                     f"unknown node type {work.reference_node_type!r} in catalog {catalog.name!r}"))
    data = request.campaign.data
    for k, entry in enumerate(data.allowed_jurisdictions or ()):
        if entry in catalog.jurisdiction_groups:
            continue
        if len(entry) == 2 and entry.isupper() and pycountry.countries.get(alpha_2=entry) is not None:
            continue
        groups = ", ".join(sorted(catalog.jurisdiction_groups)) or "none"
        problems.append(FieldProblem(
            f"campaign.data.allowed_jurisdictions.{k}",
            f"{entry!r} is neither an ISO 3166-1 alpha-2 code nor a group of this catalog (groups: {groups})"))
    venues = {s.id for s in catalog.sites} | {o.id for o in catalog.offers}
    if data.home is not None and data.home not in venues:
        problems.append(FieldProblem("campaign.data.home", f"unknown venue {data.home!r}"))
    for kind in ("sites", "offers"):
        for venue in getattr(request.overrides, kind):
            if (reason := unknown_venue(catalog, kind, venue)) is not None:
                problems.append(FieldProblem(f"overrides.{kind}.{venue}", reason))
    return problems


def unknown_venue(catalog: CatalogIn, kind: str, venue: str) -> str | None:
    """Why a per-venue override names no venue of the catalog (kind: "sites" or "offers"), or None."""
    ids = {s.id for s in catalog.sites} if kind == "sites" else {o.id for o in catalog.offers}
    if venue in ids:
        return None
    what = "owned site" if kind == "sites" else "rental offer"
    return f"no {what} {venue!r} in catalog {catalog.name!r} (its {kind}: {', '.join(sorted(ids)) or 'none'})"


def quote(catalog: CatalogIn, request: QuoteRequestIn, *,
          evaluate: Callable[..., CampaignEvaluation] = evaluate_with_splits) -> dict[str, Any]:
    """The quote body for a validated request against a validated catalog. `evaluate` makes the
    evaluation from the domain catalog, campaign, options and overrides (a benchmark's floor route
    passes one that keeps the first)."""
    problems = request_problems(catalog, request)
    if problems:
        raise InvalidInput("the request does not match the catalog", problems)
    domain_catalog = catalog.to_domain()
    campaign, options, overrides = request.to_domain()
    with carrying_infinities():
        evaluation = evaluate(domain_catalog, campaign, options, overrides)
        return quote_document(domain_catalog, request, evaluation)


@functools.cache
def model_version() -> str:
    """The package version plus a hash of the model's defaults: a quote computed under another
    version may differ, and recompute says how. Made once: both are fixed while the process runs."""
    defaults = json.dumps([[a.name, a.value, a.unit, a.source] for a in DEFAULTS.values()], sort_keys=True)
    return f"{__version__}+{hashlib.sha256(defaults.encode('utf-8')).hexdigest()[:12]}"


def envelope(body: dict[str, Any], *, catalog_hash: str, quote_id: str | None, catalog_id: str | None,
             created_at: datetime) -> dict[str, Any]:
    """The full response: identity and provenance first, then the body."""
    return {
        "id": quote_id,
        "created_at": created_at.isoformat().replace("+00:00", "Z"),
        "catalog_id": catalog_id,
        "catalog_hash": catalog_hash,
        "model_version": model_version(),
        **body,
    }
