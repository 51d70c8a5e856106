"""Reports for people and spreadsheets, rendered from a stored quote document alone (so a report
is reproducible and needs no recomputation): the HTML page, the break-even chart as SVG, and the
options as CSV. Formatting (babel) happens here and nowhere else."""

from service.reports.breakeven_chart import breakeven_svg
from service.reports.csv_export import OPTIONS_CSV_HEADER, options_csv
from service.reports.html import render_plan, render_report

__all__ = ["OPTIONS_CSV_HEADER", "breakeven_svg", "options_csv", "render_plan", "render_report"]
