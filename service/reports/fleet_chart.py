"""The fleet-plan chart. Above: present cost of the whole horizon against the owned fleet size when
bought now, the median as a line and the 5th-95th percentile band (hatched, so it reads in black
and white), the best single purchase marked. Below: the staged plan month by month, the owned
fleet's usable hours as steps against the expected demand, the rented overflow hatched, and each
stage labelled with the nodes it adds or retires."""

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
    stages = plan.get("stages") or []
    if stages:
        description += (" Below, the staged plan: " + "; ".join(
            f"from month {st['month']}, {st['nodes']} nodes" for st in stages) + ", against expected demand.")
    with chart_style():
        figure = Figure(figsize=(9.8, 7.6 if stages else 4.2))
        ax = figure.add_axes((0.09, 0.58, 0.88, 0.37) if stages else (0.09, 0.14, 0.88, 0.76))
        ax.fill_between(nodes, p5, p95, facecolor="#c9d6e2", edgecolor="#5f7a93", hatch="///", linewidth=0.6,
                        label="5th-95th percentile", zorder=2)
        ax.plot(nodes, p50, color="#1d2733", linewidth=1.8, label="median", zorder=3)
        ax.axvline(best, color="#7a5515", linestyle=(0, (4, 2)), linewidth=1.2, zorder=4)
        ax.plot([best], [best_row["present_cost_p50"] / 1e6], marker="*", markersize=13, color="#7a5515",
                linestyle="none", gid="fleet-best", zorder=5, label=f"one purchase now: {best} nodes")
        ax.set_xlabel("owned nodes, bought (or retired to) now and held")
        ax.set_ylabel(f"present cost (million {currency})")
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.1f}"))
        ax.set_xlim(min(nodes), max(nodes) if max(nodes) > min(nodes) else min(nodes) + 1)
        ax.legend(loc="upper left", ncols=3)
        groups = {"fleet-best": {"nodes": str(best), "present-cost-mean": f"{best_row['present_cost_mean']:.2f}"}}
        if stages:
            _stages_panel(figure.add_axes((0.09, 0.08, 0.88, 0.37)), plan)
            groups["fleet-stages"] = {"months": " ".join(str(st["month"]) for st in stages),
                                      "nodes": " ".join(str(st["nodes"]) for st in stages)}
        return finish(figure, prefix=prefix, cautions=cautions(plan), title=title, description=description,
                      groups=groups)


def _stages_panel(ax: Any, plan: Json) -> None:
    months = plan["months"]
    t = [m["month"] for m in months]
    demand = [m["demand_accelerator_hours"] / 1e3 for m in months]
    owned = [m["owned_accelerator_hours"] / 1e3 for m in months]
    per_node = plan["usable_accelerator_hours_per_node_month"] / 1e3
    usable = [m["nodes"] * per_node for m in months]
    ax.fill_between(t, owned, demand, step="mid", facecolor="#f1e3c8", edgecolor="#7a5515", hatch="\\\\",
                    linewidth=0.6, label="rented overflow (expected)", zorder=2)
    ax.step(t, usable, where="mid", color="#1d2733", linewidth=1.8, label="owned usable hours", zorder=3)
    ax.plot(t, demand, color="#5f7a93", linewidth=1.2, linestyle=(0, (3, 2)), label="expected demand", zorder=3)
    ax.plot([st["month"] for st in plan["stages"]], [st["nodes"] * per_node for st in plan["stages"]],
            marker="o", markersize=6, color="#1d2733", linestyle="none", gid="fleet-stages", zorder=4)
    for st in plan["stages"]:
        change = f"+{st['added']}" if st["added"] else (f"−{st['retired']}" if st["retired"] else "keep")
        ax.annotate(f"{st['nodes']} nodes ({change})", (st["month"], st["nodes"] * per_node),
                    textcoords="offset points", xytext=(4, 6), fontsize=8)
    ax.set_xlabel(f"month of the staged plan (decisions every {plan['decision_every_months']} months)")
    ax.set_ylabel("thousand accelerator-hours a month")
    ax.set_xlim(0.5, len(months) + 0.5)
    ax.set_ylim(bottom=0)
    ax.legend(loc="upper left", ncols=3)
