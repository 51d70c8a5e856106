"""The break-even chart: for each owned site, the owned cost per used accelerator-hour against
utilisation (the quote's `curves`), the cheapest rented price of each term as a horizontal line, the
break-even points where they cross (the `utilisation` of the quote's `breakeven` rows), and the
site's planned utilisation. Readable in black and white: line styles, marker shapes and direct
labels carry the meaning, colour only repeats it."""

from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, PercentFormatter

from service.reports.cautions import cautions
from service.reports.figures import RentedLine, SitePanel, marker_of, site_panels
from service.reports.formatting import fixed, jurisdiction_label, percent, term_label
from service.reports.svg import chart_style, finish, standalone

Json = dict[str, Any]
INK = "#1d2733"
MUTED = "#5f6b77"
TERM_STYLES: dict[str, tuple[Any, str]] = {  # line style, colour
    "on_demand": ((0, (6, 3)), "#a3461a"),
    "committed_12m": ((0, (8, 2, 2, 2)), "#4a7526"),
    "committed_36m": ((0, (1.5, 1.5)), "#6a3d8c"),
    "interruptible": ((0, (5, 2, 1, 2, 1, 2)), "#1d6a86"),
}
OTHER_STYLE: tuple[Any, str] = ((0, (10, 3)), "#7a5c00")
PANEL_HEIGHT_IN = 3.3
WIDTH_IN = 9.8
LABEL_GAP = 0.13  # axes fraction between the right-margin labels (two lines of 8 pt)


def style_of(term: str) -> tuple[Any, str, str]:
    """Line style, marker and colour of a rented term."""
    dash, colour = TERM_STYLES.get(term, OTHER_STYLE)
    return dash, marker_of(term)[0], colour


def _owned_cost(curve: list[tuple[float, float]], utilisation: np.ndarray) -> np.ndarray:
    """Owned cost between the stored points, interpolated linearly in 1/utilisation: exact for a
    fixed cost spread over used hours plus a variable cost per hour (F/u + v)."""
    u = np.array([p[0] for p in curve])
    cost = np.array([p[1] for p in curve])
    order = np.argsort(1.0 / u)
    owned: np.ndarray = np.interp(1.0 / utilisation, (1.0 / u)[order], cost[order])
    return owned


def _spread(wanted: list[float]) -> list[float]:
    """Label heights (axes fraction, ascending input order kept) at least LABEL_GAP apart, inside [0, 1]."""
    placed = list(wanted)
    for k in range(1, len(placed)):
        placed[k] = max(placed[k], placed[k - 1] + LABEL_GAP)
    top = 1.0
    for k in range(len(placed) - 1, -1, -1):
        placed[k] = min(placed[k], top)
        top = placed[k] - LABEL_GAP
    return placed


def _panel(ax: Axes, panel: SitePanel, currency: str, groups: dict[str, dict[str, str]]) -> None:
    lowest_u = min(p[0] for p in panel.curve)
    grid = np.linspace(lowest_u, 1.0, 240)
    owned = _owned_cost(panel.curve, grid)
    prices = [line.price_per_accelerator_hour for line in panel.lines]
    anchor = [float(_owned_cost(panel.curve, np.array([panel.planned_utilisation]))[0])
              if panel.planned_utilisation else float(owned[-1])]
    top = max([*prices, *anchor, float(owned[-1])]) * 1.45
    ax.set_xlim(0.0, 1.0)
    ax.set_ylim(0.0, top)

    gid = f"curve-{panel.site}"
    ax.plot(grid, owned, color=INK, linewidth=2.2, solid_capstyle="round", gid=gid, zorder=4)
    groups[gid] = {"site": panel.site}
    # Name the curve where it comes down through the upper part of the panel, to its right: rented
    # lines stay below 1/1.45 of the height, so that corner is clear.
    k = int(np.argmin(np.abs(owned - top * 0.84)))
    ax.annotate(f"owned cost at {panel.site}", (float(grid[k]), float(owned[k])), xytext=(10, 0),
                textcoords="offset points", fontsize=8.5, fontweight="bold", color=INK, va="center", ha="left",
                bbox={"boxstyle": "square,pad=0.15", "facecolor": "white", "edgecolor": "none", "alpha": 0.85})

    if panel.planned_utilisation is not None:
        u = panel.planned_utilisation
        gid = f"planned-{panel.site}"
        ax.plot([u], [anchor[0]], marker="*", markersize=15, color=INK, markeredgecolor="white",
                markeredgewidth=0.8, linestyle="none", gid=gid, zorder=8)
        groups[gid] = {"site": panel.site, "utilisation": f"{u:.6g}"}
        ax.axvline(u, color=MUTED, linewidth=0.9, linestyle=(0, (1, 2)), zorder=2)
        ax.text(u, top * 0.985, f" planned {percent(u, 0)} ★", fontsize=8, color=INK, va="top", ha="left")

    heights = []
    for line in panel.lines:
        dash, marker, colour = style_of(line.term)
        gid = f"rented-{line.key}"
        ax.axhline(line.price_per_accelerator_hour, color=colour, linestyle=dash, linewidth=1.4, gid=gid, zorder=3)
        groups[gid] = {"site": line.site, "offer": line.offer, "term": line.term,
                       "price-per-accelerator-hour": f"{line.price_per_accelerator_hour:.6g}"}
        heights.append(line.price_per_accelerator_hour / top)
        if line.utilisation is not None and 0.0 < line.utilisation <= 1.0:
            _breakeven_marker(ax, line, marker, colour, groups)

    order = sorted(range(len(panel.lines)), key=lambda k: heights[k])
    placed = _spread([heights[k] for k in order])
    for k, y_label in zip(order, placed, strict=True):
        _margin_label(ax, panel.lines[k], heights[k], y_label, currency)

    ax.xaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=0))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: fixed(v, 0 if top > 20 else 1)))
    ax.set_xlabel("utilisation of the site's accelerators (share of hours doing work)")
    ax.set_ylabel(f"{currency} per used accelerator-hour")
    where = f" · {jurisdiction_label(panel.jurisdiction)}" if panel.jurisdiction else ""
    note = " — every rented option failed a screen: no break-even" if panel.offers_all_ruled_out else ""
    ax.set_title(f"{panel.site}{where}{note}")


def _breakeven_marker(ax: Axes, line: RentedLine, marker: str, colour: str,
                      groups: dict[str, dict[str, str]]) -> None:
    assert line.utilisation is not None
    gid = f"breakeven-{line.key}"
    ax.plot([line.utilisation], [line.price_per_accelerator_hour], marker=marker, markersize=8,
            markerfacecolor="white", markeredgecolor=colour, markeredgewidth=1.8, linestyle="none",
            gid=gid, zorder=7)
    groups[gid] = {"site": line.site, "offer": line.offer, "term": line.term,
                   "utilisation": f"{line.utilisation:.6g}"}


def _margin_label(ax: Axes, line: RentedLine, y_line: float, y_label: float, currency: str) -> None:
    """The rented line's name and price in the right margin, joined to its line by a short stroke."""
    _dash, marker, colour = style_of(line.term)
    ax.plot([1.0, 1.025, 1.04], [y_line, y_label, y_label], transform=ax.transAxes, clip_on=False,
            color=colour, linewidth=0.9)
    ax.plot([1.055], [y_label], transform=ax.transAxes, clip_on=False, marker=marker, markersize=6,
            markerfacecolor="white", markeredgecolor=colour, markeredgewidth=1.4, linestyle="none")
    crossing = "no break-even" if line.utilisation is None else f"break-even {percent(line.utilisation)}"
    ax.text(1.075, y_label, f"{term_label(line.term)}: {fixed(line.price_per_accelerator_hour, 2)} {currency}"
            f"\n{line.offer} · {crossing}", transform=ax.transAxes, fontsize=8, va="center", ha="left",
            color=INK, linespacing=1.25)


def _description(panels: list[SitePanel], currency: str) -> str:
    parts = []
    for panel in panels:
        planned = (f", planned utilisation {percent(panel.planned_utilisation)}"
                   if panel.planned_utilisation is not None else "")
        crossings = "; ".join(
            f"{term_label(line.term)} at {line.offer} ({fixed(line.price_per_accelerator_hour, 2)} {currency}): "
            + ("no break-even" if line.utilisation is None else f"break-even at {percent(line.utilisation)}")
            for line in panel.lines)
        parts.append(f"{panel.site}{planned}. {crossings or 'No rented price to compare.'}")
    return ("Owned cost per used accelerator-hour against utilisation, with the cheapest rented price of "
            "each term. " + " ".join(parts))


def breakeven_figure_svg(document: Json, *, prefix: str = "chart-breakeven") -> str:
    """The chart as an `<svg>` element; every break-even point is a group
    `breakeven-<site>-<offer>-<term>` with `data-utilisation`."""
    currency = str(document["currency"])
    panels = [p for p in site_panels(document) if p.curve]
    groups: dict[str, dict[str, str]] = {}
    title = "Break-even: owning against renting, by utilisation"
    with chart_style():
        if not panels:
            figure = Figure(figsize=(WIDTH_IN, 1.2))
            figure.text(0.02, 0.5, "This quote has no owned site, so there is no break-even to draw.",
                        va="center", fontsize=10)
            return finish(figure, prefix=prefix, cautions=cautions(document), title=title, groups=groups,
                          description="No owned site in this quote; nothing to compare with renting.")
        figure = Figure(figsize=(WIDTH_IN, 0.5 + PANEL_HEIGHT_IN * len(panels)))
        axes = figure.subplots(len(panels), 1, squeeze=False)[:, 0]
        figure.subplots_adjust(left=0.085, right=0.66, top=1 - 0.32 / figure.get_figheight(),
                               bottom=0.55 / figure.get_figheight(), hspace=0.55)
        for ax, panel in zip(axes, panels, strict=True):
            _panel(ax, panel, currency, groups)
        return finish(figure, prefix=prefix, cautions=cautions(document), title=title,
                      description=_description(panels, currency), groups=groups)


def breakeven_svg(document: Json) -> str:
    """The break-even chart as an SVG file (GET /v1/quotes/{id}/breakeven.svg)."""
    return standalone(breakeven_figure_svg(document))
