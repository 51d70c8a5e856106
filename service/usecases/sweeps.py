"""Use cases for sweeps: check a sweep request against a catalog and the limits, plan it, run it
in chunks with progress, and shape its summary, tornado and rows (JSON and streamed CSV). Nothing here
touches the storage, so `berth sweep` never imports it; stored sweeps are `usecases/stored_sweeps.py`."""

import csv
import io
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any, overload

import numpy as np

from service.contract.catalog import CatalogIn
from service.contract.document import Money
from service.contract.sweep import DistributionIn, SweepIn
from service.domain.arrays import carrying_infinities
from service.domain.catalog import Catalog
from service.domain.explain import CAUTIONS
from service.domain.sweep import (
    ChunkResult,
    ChunkTally,
    SweepPlan,
    SweepSummary,
    Tallying,
    chunk_size,
    scenario_chunks,
    tornado,
)
from service.domain.whatif import InputPath, UnknownPath, apply, base_value, input_path, venue_of
from service.errors import FieldProblem, InvalidInput
from service.usecases.chunk_pool import evaluated
from service.usecases.quoting import request_problems, unknown_venue

ROWS_IN_JSON = 10_000


@dataclass(frozen=True)
class SweepLimits:
    max_scenarios: int = 10_000_000
    max_grid_values: int = 10_000  # per path
    max_paths: int = 20


@dataclass(frozen=True)
class PreparedSweep:
    catalog: Catalog
    plan: SweepPlan
    request: SweepIn
    currency: str
    units: dict[str, str]


def prepare_sweep(catalog_in: CatalogIn, sweep: SweepIn, limits: SweepLimits) -> PreparedSweep:
    """Check everything a sweep needs before a scenario runs; every problem names its field."""
    problems = [FieldProblem(f"base.{p.field}", p.reason) for p in request_problems(catalog_in, sweep.base)]
    campaign, options, overrides = sweep.base.to_domain()
    varied: dict[str, Any] = dict(sweep.grid or sweep.distributions or {})
    where = "grid" if sweep.grid is not None else "distributions"
    if len(varied) > limits.max_paths:
        problems.append(FieldProblem(where, f"at most {limits.max_paths} inputs may vary in one sweep"))
    for path, spec in varied.items():
        field = f"{where}.{path}"
        try:
            rule, _ = input_path(path)
        except UnknownPath as error:
            problems.append(FieldProblem(field, str(error)))
            continue
        venue = venue_of(path)
        if venue is not None and (reason := unknown_venue(catalog_in, *venue[:2])) is not None:
            problems.append(FieldProblem(field, reason))
            continue
        try:
            apply(campaign, overrides, {path: np.ones(1)})
        except LookupError as error:
            problems.append(FieldProblem(field, str(error)))
            continue
        if isinstance(spec, DistributionIn):
            reason = _support_problem(rule, spec)
        else:
            if len(spec) > limits.max_grid_values:
                problems.append(FieldProblem(field, f"at most {limits.max_grid_values:,} values per path"))
            reason = rule.problems(np.asarray(spec, dtype=np.float64))
        if reason:
            problems.append(FieldProblem(field, reason))
    plan = SweepPlan(
        campaign=campaign, options=options, overrides=overrides,
        grid={p: np.asarray(v, dtype=np.float64) for p, v in (sweep.grid or {}).items()},
        distributions={p: d.to_domain() for p, d in (sweep.distributions or {}).items()},
        samples=sweep.samples or 0, seed=sweep.seed)
    if not problems and plan.scenarios > limits.max_scenarios:
        problems.append(FieldProblem("samples" if sweep.samples else "grid",
                                     f"{plan.scenarios:,} scenarios exceed the limit of {limits.max_scenarios:,} "
                                     "per sweep"))
    if problems:
        raise InvalidInput("the sweep cannot run as asked", problems)
    units = {path: input_path(path)[0].unit.replace("currency", catalog_in.currency) for path in plan.paths}
    return PreparedSweep(catalog_in.to_domain(), plan, sweep, catalog_in.currency, units)


def _support_problem(rule: InputPath, spec: DistributionIn) -> str | None:
    """Whether every value the distribution can draw is valid for the path."""
    if rule.integer and spec.kind != "choice":
        return f"takes whole numbers; a {spec.kind} distribution draws fractions (use a choice distribution)"
    if spec.kind == "choice":
        return rule.problems(np.asarray(spec.values, dtype=np.float64))
    # An unbounded tail is judged by where it reaches with any chance that matters: 12 standard
    # deviations (a chance below 1e-32 per draw) stand in for infinity against a finite ceiling.
    if spec.kind == "lognormal":
        lowest, highest = 0.0, float(np.exp(min((spec.mean or 0.0) + TAIL_SIGMAS * (spec.sigma or 0.0), 709.0)))
        open_low = True
    elif spec.kind == "normal":
        reach = TAIL_SIGMAS * (spec.sd or 0.0)
        lowest = -np.inf if spec.low is None else spec.low
        highest = (spec.mean or 0.0) + reach if spec.high is None else spec.high
        open_low = False
    else:
        lowest, highest, open_low = float(spec.low or 0.0), float(spec.high or 0.0), False
    below = lowest < rule.low or (lowest == rule.low and rule.low_open and not open_low)
    if below or highest > rule.high:
        bound = f"{'>' if rule.low_open else '≥'} {rule.low:g}" + (
            f" and ≤ {rule.high:g}" if np.isfinite(rule.high) else "")
        hint = " (give low/high bounds to a normal distribution)" if spec.kind == "normal" else ""
        return f"this {spec.kind} distribution can draw values outside the valid range ({bound}){hint}"
    return None


TAIL_SIGMAS = 12.0

Progress = Callable[[int, int], None]


def run(prepared: PreparedSweep, *, keep_rows: int = ROWS_IN_JSON, progress: Progress | None = None,
        processes: int = 1) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """Evaluate every scenario in chunks: the summary, and every row as JSON when there are at most
    `keep_rows`. Without rows, each chunk is reduced to its tally where it was evaluated."""
    summary = SweepSummary(prepared.plan.scenarios, seed=prepared.plan.seed)
    rows: list[dict[str, Any]] = []
    money = Money(prepared.currency)
    total = prepared.plan.scenarios
    whole = total <= keep_rows  # every row is in the answer: chunks come back whole
    for part in _chunks(prepared, processes) if whole else _chunks(prepared, processes, tallying=summary.tallying):
        if isinstance(part, ChunkResult):
            summary.add(part)
            rows.extend(_json_rows(part, money))
        else:
            summary.add_tally(part)
        if progress is not None:
            progress(summary.scenarios, total)
    result = summary.result()
    result["currency"] = prepared.currency
    for option in result["options"]:  # type: ignore[attr-defined]
        for key in ("total_p5", "total_p50", "total_p95"):
            option[key] = None if option[key] is None else money(option[key])
    for row in result["breakeven_utilisation"]:  # type: ignore[attr-defined]
        for key in ("utilisation_p5", "utilisation_p50", "utilisation_p95"):
            row[key] = None if row[key] is None else round(row[key], 4)  # as a quote gives utilisation
    return result, rows


@overload
def _chunks(prepared: PreparedSweep, processes: int, *, breakeven: bool = True,
            tallying: None = None) -> Iterator[ChunkResult]: ...


@overload
def _chunks(prepared: PreparedSweep, processes: int, *, breakeven: bool = True,
            tallying: Tallying) -> Iterator[ChunkTally]: ...


def _chunks(prepared: PreparedSweep, processes: int, *, breakeven: bool = True,
            tallying: Tallying | None = None) -> Iterator[ChunkResult] | Iterator[ChunkTally]:
    plan = prepared.plan
    size = chunk_size(prepared.catalog, plan.paths)
    # A sweep of one chunk gains nothing from starting worker processes.
    return evaluated(prepared.catalog, plan, scenario_chunks(plan, size),
                     processes=processes if plan.scenarios > size else 1, breakeven=breakeven, tallying=tallying)


def _json_rows(chunk: Any, money: Money) -> list[dict[str, Any]]:
    paths = list(chunk.inputs)
    rows = []
    for s in range(chunk.size):
        pick = int(chunk.cheapest[s])
        rows.append({
            "inputs": {p: float(chunk.inputs[p][s]) for p in paths},
            "cheapest": None if pick < 0 else chunk.labels[pick],
            "totals": {label: money(chunk.totals[k, s]) for k, label in enumerate(chunk.labels)},
            "currency": money.currency,
        })
    return rows


def tornado_bars(prepared: PreparedSweep) -> list[dict[str, Any]] | None:
    """Tornado over every varied input, centred on the base request's value where it has one,
    else on the grid's middle value or the distribution's median."""
    if prepared.request.tornado is None:
        return None
    plan = prepared.plan
    centres: dict[str, float] = {}
    for path in plan.paths:
        value = base_value(plan.campaign, plan.overrides, path)
        if value is None:
            value = float(np.median(plan.grid[path])) if plan.grid else plan.distributions[path].centre()
        centres[path] = value
    ranges = {path: _closed_range(input_path(path)[0]) for path in plan.paths}
    money = Money(prepared.currency)
    with carrying_infinities():  # as a chunk's evaluation is (chunk_pool.evaluate)
        bars = tornado(prepared.catalog, plan, centres, ranges, prepared.request.tornado.swing)
    return [{"input": bar.path, "centre": bar.centre, "low": bar.low, "high": bar.high,
             "gap_at_low": money(bar.gap_low), "gap_at_high": money(bar.gap_high),
             "gap_at_centre": money(bar.gap_centre), "effect": money(bar.effect), "currency": prepared.currency}
            for bar in bars]


def _closed_range(rule: InputPath) -> tuple[float, float]:
    low = np.nextafter(rule.low, np.inf) if rule.low_open else rule.low
    return float(low), float(rule.high)


def sweep_document(prepared: PreparedSweep, summary: dict[str, Any], rows: list[dict[str, Any]],
                   bars: list[dict[str, Any]] | None) -> dict[str, Any]:
    """The sweep's answer (api.md): scenarios, summary, tornado, and the rows when there are few."""
    scenarios = prepared.plan.scenarios
    included = scenarios <= ROWS_IN_JSON
    return {
        "scenarios": scenarios,
        "currency": prepared.currency,
        "varied": [{"path": p, "unit": prepared.units[p]} for p in prepared.plan.paths],
        "summary": summary,
        "tornado": bars,
        "rows_included": included,
        "rows": rows if included else None,
        "cautions": list(CAUTIONS),
    }


def csv_header(prepared: PreparedSweep, labels: list[str]) -> list[str]:
    return (["scenario"] + [f"{p} [{prepared.units[p]}]" for p in prepared.plan.paths] + ["cheapest", "currency"]
            + [f"{label} total" for label in labels] + ["cautions"])


def _quoted(text: str) -> str:
    return '"' + text.replace('"', '""') + '"'


CSV_CAUTIONS = _quoted(" ".join(CAUTIONS))
CSV_ROWS = 5_000  # rows formatted at once: numpy's text arrays of a whole chunk took the writer 100 MB more


def csv_chunks(prepared: PreparedSweep, progress: Progress | None = None, processes: int = 1) -> Iterator[str]:
    """Every scenario as CSV (RFC 4180), CSV_ROWS at a time: bounded memory at any size. Columns are
    formatted by numpy as whole arrays; no Python loop runs per scenario. The cautions are the last
    column of the first row (empty below it, which keeps millions of rows small): a spreadsheet shows
    them at the top, and a reader that takes the first row as the header reads every row."""
    first = 0
    for chunk in _chunks(prepared, processes, breakeven=False):  # rows have no break-even column
        for start in range(0, chunk.size, CSV_ROWS):
            part = slice(start, min(start + CSV_ROWS, chunk.size))
            yield _csv_rows(prepared, chunk, part, first)
            first += part.stop - part.start
        if progress is not None:
            progress(first, prepared.plan.scenarios)


def _csv_rows(prepared: PreparedSweep, chunk: ChunkResult, part: slice, first: int) -> str:
    """The rows `part` of a chunk as CSV, numbered from `first`; the header and the cautions with row 0."""
    head = ""
    if first == 0:
        buffer = io.StringIO()
        csv.writer(buffer, lineterminator="\r\n").writerow(csv_header(prepared, chunk.labels))
        head = buffer.getvalue()
    picked = chunk.cheapest[part]
    labels = np.asarray([*chunk.labels, ""], dtype=object)
    columns = [np.arange(first, first + picked.size).astype(str)]
    columns += [_decimals(chunk.inputs[p][part]) for p in prepared.plan.paths]
    columns += [labels[np.where(picked >= 0, picked, len(chunk.labels))].astype(str),
                np.full(picked.size, prepared.currency)]
    digits = Money(prepared.currency).digits
    columns += [_decimals(np.round(totals[part], digits)) for totals in chunk.totals]
    lines = columns[0]
    for column in columns[1:]:
        lines = np.char.add(np.char.add(lines, ","), column)
    # The cautions column: empty, and the cautions written onto the first row alone (an array as wide as
    # them for every row cost a chunk of 25,000 rows over 100 MB).
    rows = np.char.add(lines, ",").tolist()
    if first == 0:
        rows[0] += CSV_CAUTIONS
    return head + "\r\n".join(rows) + "\r\n"


def _decimals(values: np.ndarray) -> np.ndarray:
    """Plain decimals for spreadsheets (no exponent), empty where a value is missing."""
    values = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(values)
    text = np.char.mod("%.15g", np.where(finite, values, 0.0))
    # %g switches to an exponent for large or tiny numbers; write those in full.
    exponent = np.char.find(text, "e") >= 0
    if exponent.any():
        text = np.where(exponent, np.char.mod("%.6f", np.where(finite, values, 0.0)), text)
    return np.where(finite, text, "")
