"""What the charts and tables show, read from a stored quote document and nothing else: cost lines
grouped into categories, the options worth charting, the rented prices drawn against each owned
site's cost curve, and each site's planned utilisation."""

from dataclasses import dataclass
from typing import Any

from service.reports.formatting import term_label

Json = dict[str, Any]

# Cost line items by category; a split's items carry a "venue: " prefix, which is dropped first.
CATEGORIES: tuple[tuple[str, str, frozenset[str]], ...] = (
    ("capital_facility", "capital & facility", frozenset({"capital", "facility"})),
    ("operations", "operations (maintenance, staff)", frozenset({"maintenance", "staff"})),
    ("energy", "energy", frozenset({"idle_energy", "busy_energy"})),
    ("rental", "rental", frozenset({"compute", "commitment"})),
    ("data", "data (storage, transfer)", frozenset({"storage", "ingress", "egress", "egress_at_home"})),
)
OTHER = ("other", "other")
# Each rented term's marker in the break-even chart (matplotlib's code) and the same shape as text,
# so the table can point at the chart without colour.
TERM_MARKERS = {"on_demand": ("o", "○"), "committed_12m": ("s", "□"), "committed_36m": ("D", "◇"),
                "interruptible": ("^", "△")}
OTHER_MARKER = ("v", "▽")
RESIDENCY_PREFIX = "residency:"
CHART_MAX_OPTIONS = 8
CHART_MAX_RATIO = 10.0  # options dearer than this multiple of the cheapest feasible one stay in the tables


def marker_of(term: str) -> tuple[str, str]:
    return TERM_MARKERS.get(term, OTHER_MARKER)


def category_of(item: str) -> str:
    bare = item.rsplit(": ", 1)[-1]
    for key, _label, items in CATEGORIES:
        if bare in items:
            return key
    return OTHER[0]


def category_labels() -> list[tuple[str, str]]:
    return [(key, label) for key, label, _items in CATEGORIES] + [OTHER]


def cost_by_category(option: Json) -> dict[str, float]:
    """The option's cost lines summed by category, in category order, zero categories dropped."""
    sums: dict[str, float] = {}
    for line in option["cost"]["lines"]:
        if line["amount"] is not None:
            key = category_of(line["item"])
            sums[key] = sums.get(key, 0.0) + float(line["amount"])
    return {key: sums[key] for key, _label in category_labels() if sums.get(key)}


def option_label(option: Json) -> str:
    return f"{option['venue']['id']} · {term_label(option['term'])}"


def charted_options(document: Json) -> tuple[list[Json], int]:
    """The feasible options the cost chart draws (the cheapest few, none more than CHART_MAX_RATIO
    times the cheapest, so every bar stays readable) and how many feasible options it leaves out."""
    feasible = [o for o in document["options"] if o["feasible"] and o["cost"]["total"] is not None]
    if not feasible:
        return [], 0
    cheapest = min(float(o["cost"]["total"]) for o in feasible)
    limit = cheapest * CHART_MAX_RATIO if cheapest > 0 else float("inf")
    shown = [o for o in feasible if float(o["cost"]["total"]) <= limit][:CHART_MAX_OPTIONS]
    return shown, len(feasible) - len(shown)


def residency_ruled_out(document: Json) -> dict[str, str]:
    """Venue id → the residency reason, for every venue the residency screen ruled out."""
    out: dict[str, str] = {}
    for option in document["options"]:
        for reason in option["reasons"]:
            if reason.startswith(RESIDENCY_PREFIX):
                out.setdefault(option["venue"]["id"], reason[len(RESIDENCY_PREFIX):].strip())
    return out


@dataclass(frozen=True)
class RentedLine:
    """One rented price drawn across a site's panel, and where owning breaks even against it."""

    site: str
    offer: str
    term: str
    price_per_accelerator_hour: float
    utilisation: float | None  # None: no break-even (reason says why)
    reason: str | None

    @property
    def key(self) -> str:
        return f"{self.site}-{self.offer}-{self.term}"


@dataclass(frozen=True)
class SitePanel:
    site: str
    jurisdiction: str | None
    curve: list[tuple[float, float]]  # (utilisation, owned cost per used accelerator-hour)
    planned_utilisation: float | None
    lines: list[RentedLine]
    offers_all_ruled_out: bool  # every rented option failed a screen: no rented line to draw


def site_panels(document: Json) -> list[SitePanel]:
    """One panel per owned site with a curve. For each rented term, the cheapest offer's price
    (per unit of work on the site's accelerator) among the rented options that passed every
    screen, the only ones the quote's break-even rows pair with a site."""
    panels = []
    for curve in document["curves"]:
        site = curve["site"]
        rows = [r for r in document["breakeven"]
                if r["site"] == site and r["rented_per_accelerator_hour"] is not None]
        cheapest: dict[str, Json] = {}
        for row in rows:
            best = cheapest.get(row["term"])
            if best is None or row["rented_per_accelerator_hour"] < best["rented_per_accelerator_hour"]:
                cheapest[row["term"]] = row
        lines = [RentedLine(site=site, offer=r["offer"], term=r["term"],
                            price_per_accelerator_hour=float(r["rented_per_accelerator_hour"]),
                            utilisation=None if r["utilisation"] is None else float(r["utilisation"]),
                            reason=r["reason"])
                 for r in sorted(cheapest.values(), key=lambda r: -float(r["rented_per_accelerator_hour"]))]
        points = [(float(p["utilisation"]), float(p["owned_per_accelerator_hour"]))
                  for p in curve["points"] if p["owned_per_accelerator_hour"] is not None]
        panels.append(SitePanel(site=site, jurisdiction=_site_jurisdiction(document, site), curve=points,
                                planned_utilisation=planned_utilisation(document, site), lines=lines,
                                offers_all_ruled_out=not rows and bool(document.get("breakeven_left_out"))))
    return panels


def planned_utilisation(document: Json, site: str) -> float | None:
    """The site's planned utilisation, as its chargeback option used it."""
    for option in document["options"]:
        if option["venue"]["id"] == site and option["term"] == "owned_chargeback":
            value = option.get("term_figures", {}).get("utilisation")
            return None if value is None else float(value)
    return None


def _site_jurisdiction(document: Json, site: str) -> str | None:
    for option in document["options"]:
        if option["venue"]["id"] == site:
            return str(option["venue"]["jurisdiction"])
    return None
