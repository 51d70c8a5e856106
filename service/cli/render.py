"""The quote as rich tables for a terminal: ranked options, break-even, cautions."""

from typing import Any

from rich.console import Console
from rich.table import Table

from service.reports.formatting import layout_words


def _money(value: float | None) -> str:
    return "—" if value is None else f"{value:,.0f}"


def _fixed(value: float | None, digits: int = 1) -> str:
    return "—" if value is None else f"{value:,.{digits}f}"


def _pct(value: float | None) -> str:
    return "—" if value is None else f"{value * 100:.1f}%"


def _no_payback(row: dict[str, Any]) -> str:
    """"none" only where the rent saved never covers the running cost; otherwise beyond the life."""
    return "none" if "never covers" in (row.get("payback_reason") or "") else "> life"


def print_quote(console: Console, quote: dict[str, Any]) -> None:
    campaign = quote["request"]["campaign"]
    currency = quote["currency"]
    work = quote["work"]
    console.print(f"[bold]{campaign['name']}[/] (team {campaign['team']}): "
                  f"{work['runs_total_flops']:.3g} FLOPs in all", highlight=False)

    recurring = (work.get("instances") or 1) > 1
    view = quote["options"][0]["cost"].get("view", "full") if quote["options"] else "full"
    other = "incremental" if view == "full" else "full"
    over = f" over the programme of {work['instances']:,.0f} instances" if recurring else ""
    title = f"Placement options, ranked{over}"
    options = Table(title=f"{title} ({currency}; {view} view ranks)", title_justify="left")
    headers = ["#", "option", "acc.", "days", "acc.-hours", *(["programme"] if recurring else []),
               "per instance" if recurring else "total", other, "per acc.-h", "kgCO2e"]
    for header in headers:
        options.add_column(header, justify="left" if header == "option" else "right",
                           no_wrap=header == "option")
    ruled_out = []
    for option in quote["options"]:
        timing = option["timing"]
        label = f"{option['venue']['id']}/{option['term']}"
        cost = option["cost"]
        options.add_row(
            str(option["rank"] or "–"), label, str(option["layout"]["accelerators"]),
            _fixed(timing["wall_clock_days"]), _money(timing["accelerator_hours"]),
            *([_money(cost.get("programme_total"))] if recurring else []),
            _money(cost["total"]), _money(cost.get(f"{other}_total")), _fixed(cost["per_accelerator_hour"], 2),
            _money(option["energy"]["kgco2e"]), style=None if option["feasible"] else "dim")
        if option["reasons"]:
            ruled_out.append((label, option["reasons"]))
    console.print(options)
    for label, reasons in ruled_out:
        console.print(f"[dim]ruled out[/] {label}: " + "; ".join(reasons), highlight=False)
    layouts = Table(title="How each feasible option runs", title_justify="left")
    for header in ("option", "nodes", "layout", "decided by", "step s", "scaling", "link for 95% Gb/s"):
        layouts.add_column(header, justify="right" if header in ("nodes", "step s", "scaling", "link for 95% Gb/s")
                           else "left")
    for option in quote["options"]:
        if option["feasible"]:
            timing, layout = option["timing"], option["layout"]
            layouts.add_row(f"{option['venue']['id']}/{option['term']}", str(layout["nodes"]), layout_words(layout),
                            layout.get("decided_by", ""), _fixed(timing["step_seconds"], 2),
                            _pct(timing["scaling_efficiency"]), _fixed(timing["network_gbps_needed_for_95pct"], 0))
    if layouts.row_count:
        console.print(layouts)

    recommendation = quote["recommendation"]
    if recommendation:
        console.print(f"[bold green]Recommendation:[/] {recommendation['why']}", highlight=False)
    else:
        console.print("[bold red]No option is feasible.[/] Next steps:", highlight=False)
        for step in quote["next_steps"]:
            console.print(f"  • {step}", highlight=False)

    breakeven = Table(title="Break-even: owning against each rented option that passed every screen "
                      "(rented price per unit of work on the site's accelerator)", title_justify="left")
    for header in ("site", "rented option", "listed/acc.-h", "× work", "rent/acc.-h", "owned F/node-mo",
                   "owned v/acc.-h", "break-even", "acc.-h/year", "campaigns/yr", "payback mo"):
        breakeven.add_column(header, justify="left" if header in ("site", "rented option") else "right",
                             no_wrap=header in ("site", "rented option"))
    for row in quote["breakeven"]:
        breakeven.add_row(
            row["site"], f"{row['offer']}/{row['term']}", _fixed(row.get("rented_listed_per_accelerator_hour"), 2),
            _fixed(row.get("conversion"), 3), _fixed(row["rented_per_accelerator_hour"], 2),
            _money(row["owned_fixed_per_month"]), _fixed(row["owned_variable_per_accelerator_hour"], 3),
            _pct(row["utilisation"]) if row["utilisation"] is not None else "never",
            _money(row["accelerator_hours_per_year"]), _fixed(row["campaigns_per_year"]),
            _fixed(row["payback_months"], 1) if row["payback_months"] is not None else _no_payback(row),
        )
    if breakeven.row_count:
        console.print(breakeven)
    paybacks = dict.fromkeys(f"payback at {row['site']}: {row['payback_basis']}" for row in quote["breakeven"]
                             if row.get("payback_basis"))
    for words in paybacks:
        console.print(f"[dim]{words}[/]", highlight=False)
    for left in quote.get("breakeven_left_out", []):
        console.print(f"[dim]no break-even against[/] {left['offer']}/{left['term']}: " + "; ".join(left["reasons"]),
                      highlight=False)
    console.print("[bold]Cautions[/]")
    for caution in quote["cautions"]:
        console.print(f"  • {caution}", highlight=False)


def print_plan(console: Console, plan: dict[str, Any]) -> None:
    currency = plan["currency"]
    console.print(f"[bold]Fleet plan[/] at {plan['site']} against {plan['offer']}/{plan['term']}, "
                  f"{plan['horizon_months']} months, {plan['samples']:,} demand samples, owned hours usable to "
                  f"{_pct(plan['max_utilisation'])}", highlight=False)
    sizes = Table(title=f"Present cost by owned fleet size ({currency})", title_justify="left")
    for header in ("nodes", "p5", "p50", "p95", "owned util.", "rented acc.-h"):
        sizes.add_column(header, justify="right")
    feasible = [c for c in plan["candidates"] if c["feasible"]]
    shown = feasible[:: max(1, len(feasible) // 12)]
    best = next(c for c in feasible if c["nodes"] == plan["best_nodes"])
    for row in sorted({c["nodes"]: c for c in [*shown, best]}.values(), key=lambda c: c["nodes"]):
        sizes.add_row(str(row["nodes"]), _money(row["present_cost_p5"]), _money(row["present_cost_p50"]),
                      _money(row["present_cost_p95"]), _pct(row["owned_utilisation"]),
                      _money(row["rented_accelerator_hours"]),
                      style="bold green" if row["nodes"] == plan["best_nodes"] else None)
    console.print(sizes)
    probability = plan["probability_owning_beats_renting"]
    console.print(f"One purchase now: own {plan['best_nodes']} nodes"
                  + ("" if probability is None else f"; owning beats renting everything in {_pct(probability)} "
                     "of demand samples"), highlight=False)
    stages = Table(title=f"Staged plan from the {plan['nodes_owned']} nodes owned today, decisions every "
                         f"{plan['decision_every_months']} months ({currency})", title_justify="left")
    for header in ("from month", "to month", "nodes", "added", "retired", "purchase", "resale", "rented acc.-h",
                   "owned util."):
        stages.add_column(header, justify="right")
    for st in plan["stages"]:
        stages.add_row(str(st["month"]), str(st["until_month"]), str(st["nodes"]), str(st["added"]),
                       str(st["retired"]), _money(st["purchase"]), _money(st["resale"]),
                       _money(st["rented_accelerator_hours"]), _pct(st["owned_utilisation"]))
    console.print(stages)
    cash = Table(title=f"Cash flow by year, staged plan ({currency})", title_justify="left")
    for header in ("year", "capital", "operating", "rent", "total", "rented acc.-h"):
        cash.add_column(header, justify="right")
    for y in plan["cash_flow"]:
        cash.add_row(str(y["year"]), _money(y["capital"]), _money(y["operating"]), _money(y["rent"]),
                     _money(y["total"]), _money(y["rented_accelerator_hours"]))
    console.print(cash)
    staged, single = plan["staged"], plan["single_purchase"]
    console.print(f"[bold green]Staged:[/] expected present cost {_money(staged['present_cost_mean'])} "
                  f"against {_money(single['present_cost_mean'])} for one purchase now "
                  f"(saving {_money(staged['saving_vs_single_purchase'])})", highlight=False)
    for caution in plan["cautions"]:
        console.print(f"  • {caution}", highlight=False)


def _signed(value: float | None, digits: int = 0) -> str:
    return "—" if value is None else f"{value:+,.{digits}f}"


def print_comparison(console: Console, comparison: dict[str, Any]) -> None:
    """What changed from quote A to quote B: inputs, the recommendation, each option, break-even."""
    a, b = comparison["a"], comparison["b"]
    console.print(f"[bold]A[/] {a['id'] or '(not stored)'} ({a['created_at']}, catalog {a['catalog_id']})\n"
                  f"[bold]B[/] {b['id'] or '(not stored)'} ({b['created_at']}, catalog {b['catalog_id']})",
                  highlight=False)
    if not comparison["changed"]:
        console.print("No differences.")
        return
    inputs = comparison["inputs_changed"]
    if inputs:
        table = Table(title="Inputs that differ", title_justify="left")
        for header in ("input", "A", "B"):
            table.add_column(header, overflow="fold")
        for change in inputs:
            table.add_row(change["path"], str(change["a"]), str(change["b"]))
        console.print(table)
    recommendation = comparison["recommendation"]
    names = [(r or {}).get("option") or "none" for r in (recommendation["a"], recommendation["b"])]
    verb = "changed" if recommendation["changed"] else "unchanged"
    console.print(f"Recommendation {verb}: {names[0]} → {names[1]} "
                  f"(programme total {_signed(recommendation['programme_total_change'])})", highlight=False)
    unit = "" if comparison["currency_changed"] else f" ({a['currency']})"
    options = Table(title=f"Options{unit}", title_justify="left")
    for header in ("option", "total A", "total B", "change", "days A", "days B", "layout"):
        options.add_column(header, justify="left" if header in ("option", "layout") else "right")
    for row in comparison["options"]:
        fa, fb = row["a"] or {}, row["b"] or {}
        layout = ", ".join(f"{c['field']} {c['a']}→{c['b']}" for c in row.get("layout_changes", []))
        options.add_row(row["option"], _money(fa.get("total")), _money(fb.get("total")),
                        _signed(row.get("total_change")), _fixed(fa.get("wall_clock_days")),
                        _fixed(fb.get("wall_clock_days")), layout or ("only in " + ("B" if not fa else "A")
                                                                        if not (fa and fb) else ""),
                        style=None if row["changed"] else "dim")
    console.print(options)
    if comparison["breakeven_changed"]:
        table = Table(title="Break-even that moved", title_justify="left")
        for header in ("site", "rented option", "A", "B", "payback mo A", "payback mo B"):
            table.add_column(header, justify="left" if header in ("site", "rented option") else "right")
        for row in comparison["breakeven_changed"]:
            ra, rb = row["a"] or {}, row["b"] or {}
            table.add_row(row["site"], f"{row['offer']}/{row['term']}", _pct(ra.get("utilisation")),
                          _pct(rb.get("utilisation")), _fixed(ra.get("payback_months")),
                          _fixed(rb.get("payback_months")))
        console.print(table)
