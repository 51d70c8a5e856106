"""The fleet-plan chart: present cost of the whole horizon against the owned fleet size, the median
as a line and the 5th-95th percentile band (hatched, so it reads in black and white), the best
size marked."""

from typing import Any

from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from service.reports.cautions import cautions
from service.reports.formatting import money_whole
from service.reports.svg import chart_style, finish

Json = dict[str, Any]


def fleet_figure_svg(plan: Json, *, prefix: str = "chart-fleet") -> str:
    """The chart as an `<svg>` element; the best size is the group `fleet-best` with `data-nodes`."""
    currency = str(plan["currency"])
    rows = [c for c in plan["candidates"] if c["feasible"]]
    nodes = [c["nodes"] for c in rows]
    p5 = [c["present_cost_p5"] / 1e6 for c in rows]
    p50 = [c["present_cost_p50"] / 1e6 for c in rows]
    p95 = [c["present_cost_p95"] / 1e6 for c in rows]
    best = plan["best_nodes"]
    best_row = next(c for c in rows if c["nodes"] == best)
    title = f"Present cost over {plan['horizon_months']} months against the owned fleet size"
    description = (f"For each owned fleet size at {plan['site']}, the present cost of owning it and renting the "
                   f"overflow at {plan['offer']} ({plan['term']}): median line and 5th-95th percentile band over "
                   f"{plan['samples']:,} demand samples. The lowest expected cost is at {best} nodes, "
                   f"{money_whole(best_row['present_cost_mean'], currency)}.")
    with chart_style():
        figure = Figure(figsize=(9.8, 4.2))
        ax = figure.add_axes((0.09, 0.14, 0.88, 0.76))
        ax.fill_between(nodes, p5, p95, facecolor="#c9d6e2", edgecolor="#5f7a93", hatch="///", linewidth=0.6,
                        label="5th-95th percentile", zorder=2)
        ax.plot(nodes, p50, color="#1d2733", linewidth=1.8, label="median", zorder=3)
        ax.axvline(best, color="#7a5515", linestyle=(0, (4, 2)), linewidth=1.2, zorder=4)
        ax.plot([best], [best_row["present_cost_p50"] / 1e6], marker="*", markersize=13, color="#7a5515",
                linestyle="none", gid="fleet-best", zorder=5, label=f"best: {best} nodes")
        ax.set_xlabel("owned nodes")
        ax.set_ylabel(f"present cost (million {currency})")
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.1f}"))
        ax.set_xlim(min(nodes), max(nodes) if max(nodes) > min(nodes) else min(nodes) + 1)
        ax.legend(loc="upper left", ncols=3)
        return finish(figure, prefix=prefix, cautions=cautions(plan), title=title, description=description,
                      groups={"fleet-best": {"nodes": str(best),
                                             "present-cost-mean": f"{best_row['present_cost_mean']:.2f}"}})
