"""The cost-breakdown chart: one stacked horizontal bar per charted feasible option, its cost lines
grouped into a few categories. Each category has its own fill pattern as well as its own tone, so
the chart reads in black and white; each bar carries its total as a direct label."""

from typing import Any

from matplotlib.figure import Figure
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter

from service.reports.cautions import cautions
from service.reports.figures import category_labels, charted_options, cost_by_category, option_label
from service.reports.formatting import money_whole, number, term_label
from service.reports.svg import chart_style, finish

Json = dict[str, Any]
FILLS: dict[str, tuple[str, str, str]] = {  # face, hatch, edge
    "capital_facility": ("#2f4a63", "", "#1d2733"),
    "operations": ("#9fb4c7", "///", "#3e556b"),
    "energy": ("#e3b25c", "...", "#7a5515"),
    "rental": ("#7fa88a", "", "#2f5a3b"),
    "data": ("#d7dce1", "\\\\\\", "#4d5864"),
    "other": ("#ffffff", "xx", "#4d5864"),
}
BAR_IN = 0.5
WIDTH_IN = 9.8


def cost_figure_svg(document: Json, *, prefix: str = "chart-costs") -> str:
    """The chart as an `<svg>` element; each bar segment is a group `cost-<rank>-<category>` with
    `data-amount`, and each bar's total a group `cost-<rank>-total` with `data-total`."""
    currency = str(document["currency"])
    options, left_out = charted_options(document)
    groups: dict[str, dict[str, str]] = {}
    title = "Cost of each feasible option, by category"
    with chart_style():
        if not options:
            figure = Figure(figsize=(WIDTH_IN, 1.0))
            figure.text(0.02, 0.5, "No feasible option: nothing to break down.", va="center", fontsize=10)
            return finish(figure, prefix=prefix, cautions=cautions(document), title=title, groups=groups,
                          description="No option passed every screen, so no cost breakdown is drawn.")
        height = 1.3 + BAR_IN * len(options)
        figure = Figure(figsize=(WIDTH_IN, height))
        label_in = 0.25 + 0.068 * max(len(str(o["venue"]["id"])) + 4 for o in options)
        left = min(max(label_in / WIDTH_IN, 0.16), 0.4)
        ax = figure.add_axes((left, 0.62 / height, 0.9 - left, 1 - 1.1 / height))
        ax.grid(axis="y", visible=False)
        widest = max(float(o["cost"]["total"]) for o in options)
        # Where every option rounds to nothing (a smoke test of milliseconds), the bars have no width: the axis
        # spans one currency unit, not the empty span matplotlib would widen with a warning.
        span = widest if widest > 0 else 1.0
        present: list[str] = []
        for row, option in enumerate(options):
            y = len(options) - 1 - row
            rank = option["rank"]
            left_pos, left_neg = 0.0, 0.0
            for key, amount in cost_by_category(option).items():
                face, hatch, edge = FILLS.get(key, FILLS["other"])
                start = left_pos if amount >= 0 else left_neg
                gid = f"cost-{rank}-{key}"
                ax.barh(y, amount, left=start, height=0.62, color=face, hatch=hatch, edgecolor=edge,
                        linewidth=0.6, gid=gid, zorder=3)
                groups[gid] = {"rank": str(rank), "category": key, "amount": f"{amount:.2f}"}
                if amount >= 0:
                    left_pos += amount
                else:
                    left_neg += amount
                if key not in present:
                    present.append(key)
            total = float(option["cost"]["total"])
            gid = f"cost-{rank}-total"
            ax.text(max(left_pos, 0.0) + span * 0.012, y, money_whole(total, currency), va="center",
                    ha="left", fontsize=8.5, fontweight="bold" if row == 0 else "normal", gid=gid)
            groups[gid] = {"rank": str(rank), "total": f"{total:.2f}"}
        ax.set_yticks(range(len(options)),
                      [f"{o['rank']}. {o['venue']['id']}\n{term_label(o['term'])}" for o in reversed(options)],
                      fontsize=8.5, linespacing=1.3)
        ax.set_xlim(0.0, span * 1.16)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: number(v)))
        ax.set_xlabel(f"total cost of the campaign ({currency})")
        labels = dict(category_labels())
        figure.legend(handles=[Patch(facecolor=FILLS[k][0], hatch=FILLS[k][1], edgecolor=FILLS[k][2], linewidth=0.6,
                                     label=labels[k]) for k in labels if k in present],
                  loc="upper left", bbox_to_anchor=(0.01, 0.995), ncols=min(len(present), 6), fontsize=8,
                  handlelength=2.2, handleheight=1.3, columnspacing=1.2)
        description = "; ".join(
            f"{o['rank']}. {option_label(o)}: {money_whole(o['cost']['total'], currency)} ("
            + ", ".join(f"{labels[k]} {money_whole(v, currency)}" for k, v in cost_by_category(o).items()) + ")"
            for o in options)
        if left_out:
            description += (f". {left_out} further feasible option(s) cost over ten times the cheapest "
                            "and are not drawn.")
        return finish(figure, prefix=prefix, cautions=cautions(document), title=title, description=description,
                      groups=groups)
