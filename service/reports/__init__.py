"""Reports for people and spreadsheets, rendered from a stored quote document alone (so a report
is reproducible and needs no recomputation): the HTML page (`html`), the break-even chart as SVG
(`breakeven_chart`), and the options as CSV (`csv_export`). Formatting (babel) happens here and
nowhere else. Import the module you need: the chart pulls in matplotlib, which a command that only
formats numbers must not pay for."""
