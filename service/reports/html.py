"""The HTML report: one self-contained page (inline CSS and SVG, no script, no external asset),
rendered by Jinja2 with autoescape from the stored quote document alone."""

from functools import cache
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape
from markupsafe import Markup

from service.reports.breakeven_chart import breakeven_figure_svg
from service.reports.cautions import cautions
from service.reports.context import moment, report_context
from service.reports.cost_chart import cost_figure_svg
from service.reports.fleet_chart import fleet_figure_svg
from service.reports.formatting import money, money_precise, number, percent, term_label

Json = dict[str, Any]

@cache
def environment() -> Environment:
    return Environment(
        loader=PackageLoader("service.reports", "templates"),
        autoescape=select_autoescape(enabled_extensions=("html",), default_for_string=True, default=True),
        undefined=StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )


def render_report(document: Json) -> str:
    """The report page for a stored quote document (the JSON body of GET /v1/quotes/{id})."""
    context = report_context(document)
    context["cautions"] = cautions(document)
    # Our own SVG, built by matplotlib from the quote's numbers; its text is escaped by the SVG writer.
    context["cost_svg"] = Markup(cost_figure_svg(document))
    context["breakeven_svg"] = Markup(breakeven_figure_svg(document))
    return environment().get_template("report.html").render(context)


def render_plan(plan: Json) -> str:
    """The report page of a fleet plan (the JSON body of GET /v1/fleet-plans/{id})."""
    currency = str(plan["currency"])
    best = next(c for c in plan["candidates"] if c["nodes"] == plan["best_nodes"])
    probability = plan.get("probability_owning_beats_renting")
    return environment().get_template("plan.html").render(
        plan=plan, best=best, term=term_label(str(plan["term"])), cautions=cautions(plan),
        created_at=moment(plan.get("created_at")) if plan.get("created_at") else "not stored",
        chart=Markup(fleet_figure_svg(plan)),
        probability="not compared (0 nodes is not a candidate)" if probability is None else percent(probability),
        money=lambda v: money(v, currency), money_precise=lambda v: money_precise(v, currency),
        percent=percent, number=number)
