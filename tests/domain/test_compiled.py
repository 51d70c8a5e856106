"""The compiled pricing and choice (`compiled.py`) against the numpy path it stands in for, and when
a sweep loads it (`usecases/chunk_pool.sweep_kernel`).

The numpy path (each term's `Charges.cost` of every candidate, the cells that miss the deadline as
inf, np.argmin across the blocks) is the reference: the compiled scan must pick the same column in
every scenario, at the same cost to the bit, so every answer of a sweep is the same with numba or
without it. Grids, prices and catalogs here are demo data drawn at random; nothing is a published
check value.
"""

import dataclasses
import json
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np
import pytest

from service.contract.catalog import CatalogIn
from service.contract.sweep import SweepIn
from service.domain import compiled, layout
from service.domain.breakeven import breakeven_utilisation, within_reach
from service.domain.campaign import Campaign, DataPlan, FlopsWork, QuoteOptions, Recurrence
from service.domain.charges import (
    Charges,
    chargeback_charges,
    committed_charges,
    data_charges,
    hourly_charges,
    new_build_charges,
)
from service.domain.choice import _first_least, eligible
from service.domain.dominance import PRUNED_FROM
from service.domain.evaluate import evaluate_campaign
from service.domain.gathered import GatheredGrid
from service.domain.gravity import Transfer
from service.domain.layout import Candidates
from service.domain.owning import NodeMonth
from service.domain.step import FiguresWhenRead, LayoutGrid
from service.domain.sweep import scenario_chunks
from service.usecases import chunk_pool
from service.usecases.sweeps import SweepLimits, prepare_sweep
from tests.domain.test_reference_evaluation import assert_identical, random_campaign, random_catalog

ROWS = 256
KERNEL = compiled.kernel()
EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"


def test_numba_is_there_to_compile_the_kernel() -> None:
    """The comparisons below mean something only where the kernel runs: numba is a dependency."""
    assert KERNEL is not None and compiled.loaded()


def random_block(rng: np.random.Generator, width: int) -> LayoutGrid:
    """Candidates with the figures a cost reads, each one row or one per scenario; some wall clocks
    zero or infinite, some columns repeated (equal costs), and every cost positive or NaN."""
    def figure(low: float, high: float) -> np.ndarray:
        rows = ROWS if rng.random() < 0.6 else 1
        return rng.uniform(low, high, (rows, width))
    nodes = np.ceil(figure(1.0, 600.0))
    wall = figure(3600.0, 3.0e7)
    # Some wall clocks a hair off a whole number of months or of their fractions, where a count of
    # terms or of instances sharing a commitment turns on the tolerances of `terms.py` (the 1e-9s).
    whole = rng.random(wall.shape) < 0.3
    count = int(whole.sum())
    wall[whole] = (3600.0 * 730.0 * rng.choice([1.0, 12.0, 36.0, 48.0, 60.0, 120.0], count)
                   * rng.integers(1, 6, count) / rng.choice([1, 1, 1, 2, 3, 11, 39], count)
                   * (1.0 + rng.choice([-1.0, 0.0, 1.0], count) * rng.uniform(1e-13, 1e-10, count)))
    wall[rng.random(wall.shape) < 0.03] = 0.0
    wall[rng.random(wall.shape) < 0.03] = np.inf
    accelerators = nodes * 8.0
    hours = wall * (accelerators / 3600.0)
    if width > 2:  # a column equal to another: the first of equal costs is kept
        for figures in (nodes, wall, hours):
            figures[:, -1] = figures[:, 0]
    figures = {"nodes": nodes, "accelerator_hours": hours, "wall_seconds": wall,
               "fits": rng.random(nodes.shape) < 0.9}
    return FiguresWhenRead.of(lambda name: figures[name])


def by_scenario(rng: np.random.Generator, low: float, high: float) -> Any:
    """A price or rate: one for all scenarios, or one each with a few NaN (unknown)."""
    if rng.random() < 0.4:
        return float(rng.uniform(low, high))
    values = rng.uniform(low, high, ROWS)
    values[rng.random(ROWS) < 0.02] = np.nan
    return values


def random_charges(rng: np.random.Generator, kind: str) -> Charges:
    """A term's charges as `evaluate.py` builds them, with random prices, recurrence and storage."""
    return random_terms(rng, [kind])[0]


def random_terms(rng: np.random.Generator, kinds: list[str]) -> list[Charges]:
    """Terms of one venue (`kinds`), their charges as `evaluate.py` builds them on one campaign and one data
    plan, with random prices, recurrence and storage."""
    recurrence = None if rng.random() < 0.4 else Recurrence(
        # Whole months, and 1.1, whose multiples are not exact in binary (33 / 1.1 = 29.999…), so that
        # the count of instances sharing a 33- or 55-month commitment turns on instances_sharing's 1e-9.
        every_months=(float(rng.choice([1.0, 1.1, 3.0, 6.0])) if rng.random() < 0.7
                      else rng.choice([0.3, 1.1, 2.0], ROWS)),
        for_months=float(rng.choice([12.0, 36.0, 72.0])))
    campaign = Campaign(name="compiled", team="demo", work=FlopsWork(total_flops=1e21), recurrence=recurrence,
                        data=DataPlan(dataset_tb=by_scenario(rng, 0.0, 50.0), checkpoint_tb=float(rng.uniform(0, 9)),
                                      checkpoints_kept=int(rng.integers(1, 5))))
    storage = None if rng.random() < 0.3 else float(rng.uniform(0.005, 0.05))
    data = data_charges(campaign, Transfer(0.01, 0.0, None, False), storage_per_gb_month=storage,
                        results_egress_per_gb=0.05)
    node = NodeMonth(*(by_scenario(rng, 100.0, 4000.0) for _ in range(5)))
    variable = by_scenario(rng, 0.01, 0.4)
    economics = SimpleNamespace(site=SimpleNamespace(node_type=SimpleNamespace(accelerators_per_node=8),
                                                     depreciation_months=int(rng.choice([36, 55, 60]))),
                                utilisation_planned=by_scenario(rng, 0.2, 0.9))

    def charges(kind: str) -> Charges:
        if kind == "chargeback":
            return chargeback_charges(node, variable, economics, data)  # type: ignore[arg-type]
        if kind == "new_build":
            return new_build_charges(node, variable, economics, campaign, data)  # type: ignore[arg-type]
        if kind == "hourly":
            return hourly_charges(by_scenario(rng, 0.5, 12.0), data)
        return committed_charges(int(rng.choice([1, 12, 33, 36])), float(rng.choice([0.0, 0.25, 1.0])),
                                 by_scenario(rng, 0.5, 12.0), by_scenario(rng, 0.0, 0.15), 8, campaign, data)
    return [charges(kind) for kind in kinds]


def random_gathered(rng: np.random.Generator, width: int) -> GatheredGrid:
    """Candidates drawn from a one-row table by each scenario's row of distinct columns, as the
    deadline search gathers them (`gathered.gathered`), their wall clock made from each scenario's
    steps and staging; some columns do not fit, some steps are infinite."""
    columns = int(rng.integers(width, 3 * width + 1))
    nodes = np.ceil(rng.uniform(1.0, 600.0, (1, columns)))
    step = rng.uniform(0.05, 40.0, (1, columns))
    step[rng.random(step.shape) < 0.05] = np.inf
    table = {"nodes": nodes, "accelerators": nodes * 8.0, "fits": rng.random((1, columns)) < 0.85,
             "effective_step_seconds": step}
    distinct = rng.integers(0, columns, (int(rng.integers(1, 30)), width))
    # Some rows keep fewer columns than the block is wide, the rest of the row dominated: here, repeats of
    # its first column (an earlier equal is chosen before them), which the kernel does not read.
    kept = rng.integers(1, width + 1, distinct.shape[0]) if rng.random() < 0.5 else None
    for row, count in enumerate([] if kept is None else kept):
        distinct[row, count:] = distinct[row, 0]
    load = SimpleNamespace(tokens_per_run=rng.uniform(1e9, 2e11, ROWS), timed_flops_per_token=6e9,
                           global_batch_tokens=4e6, timed_flops_per_run=None, runs_multiplier=rng.choice([1.0, 2.5]),
                           rows=ROWS, kept={})
    hardware = SimpleNamespace(staging_seconds=rng.uniform(0.0, 3e5, ROWS) if rng.random() < 0.5 else 3600.0,
                               rows=ROWS)
    return GatheredGrid(load, hardware, table, distinct, rng.integers(0, distinct.shape[0], ROWS),  # type: ignore[arg-type]
                        kept)


@pytest.mark.parametrize("kind", ["chargeback", "new_build", "hourly", "committed"])
@pytest.mark.parametrize("seed", range(12))
def test_the_compiled_scan_picks_the_column_numpy_picks_from_the_terms_costs(seed: int, kind: str) -> None:
    """Each kind of term, its charges built as the evaluation builds them, over blocks of figures
    (one row or one per scenario) and gathered blocks (never spread when compiled): which candidates
    the term may take as `eligible` finds them, then the column of the least cost that meets the
    deadline, and that cost, to the bit; with equal costs, NaN prices and node limits, zero and
    infinite wall clocks, and rows where nothing meets the deadline (the fastest is then kept)."""
    rng = np.random.default_rng(seed)
    charges = random_charges(rng, kind)
    widths = [int(w) for w in rng.integers(1, 9, rng.integers(1, 4))]
    blocks = [random_gathered(rng, width) if rng.random() < 0.4 else random_block(rng, width) for width in widths]
    candidates = Candidates(tuple(blocks))
    limit = rng.uniform(50.0, 700.0, ROWS)
    limit[rng.random(ROWS) < 0.02] = np.nan
    deadline = rng.uniform(3e5, 5e7, ROWS)
    deadline[rng.random(ROWS) < 0.1] = np.inf
    with np.errstate(all="ignore"):  # as the use cases run the core: NaN and inf are answers here
        ours = eligible(candidates, node_limit=limit, deadline_seconds=deadline, kernel=KERNEL)
        reference = eligible(candidates, node_limit=limit, deadline_seconds=deadline)
        costs = [np.broadcast_to(np.where(m, charges.cost(b), np.inf), (ROWS, w))
                 for m, b, w in zip(reference.meets, blocks, widths, strict=True)]
    assert [m is None for m in ours.meets] == [isinstance(b, GatheredGrid) for b in blocks]
    for name in ("any_fits", "meets_deadline", "fastest"):
        np.testing.assert_array_equal(getattr(ours, name), getattr(reference, name), err_msg=name)
    expected = _first_least(costs, widths)
    least, picked = (row[0] for row in compiled.least_costs(ours.meets, ours.gathered, ours.widths, ours.limit,
                                                             ours.deadline, blocks, [charges.form], KERNEL))
    np.testing.assert_array_equal(picked, expected)
    # Every cost the same to the bit, not only the order: the least of each row is numpy's.
    np.testing.assert_array_equal(least, np.concatenate(costs, axis=1)[np.arange(ROWS), expected])


@pytest.mark.parametrize("seed", range(12))
def test_an_offers_terms_scanned_together_are_each_scanned_alone_to_the_bit(seed: int) -> None:
    """`compiled.least_costs` of an offer's on-demand and committed terms, which one scan of each block
    prices together, in any order of the terms: each term's least cost and column the same to the bit as
    its own scan gives and as numpy chooses, over blocks of figures and gathered blocks, with NaN prices,
    equal costs and rows where nothing meets the deadline; recurring or not, storing or not. Terms that
    store differently are scanned one by one, with the same answers."""
    rng = np.random.default_rng(500 + seed)
    terms = random_terms(rng, ["hourly", "committed", "committed"])
    order = rng.permutation(len(terms))[:int(rng.integers(2, len(terms) + 1))]
    charges = [terms[t] for t in order]
    forms = [each.form for each in charges]
    assert compiled.scanned_together(forms)
    widths = [int(w) for w in rng.integers(1, 9, rng.integers(1, 4))]
    blocks = [random_gathered(rng, width) if rng.random() < 0.5 else random_block(rng, width) for width in widths]
    limit = rng.uniform(50.0, 700.0, ROWS)
    deadline = rng.uniform(3e5, 5e7, ROWS)
    deadline[rng.random(ROWS) < 0.1] = 1.0  # nothing meets it
    with np.errstate(all="ignore"):
        ours = eligible(Candidates(tuple(blocks)), node_limit=limit, deadline_seconds=deadline, kernel=KERNEL)
        reference = eligible(Candidates(tuple(blocks)), node_limit=limit, deadline_seconds=deadline)
        together = compiled.least_costs(ours.meets, ours.gathered, ours.widths, ours.limit, ours.deadline, blocks,
                                        forms, KERNEL)
        for t, each in enumerate(charges):
            alone = compiled.least_costs(ours.meets, ours.gathered, ours.widths, ours.limit, ours.deadline, blocks,
                                         [each.form], KERNEL)
            np.testing.assert_array_equal(together[0][t], alone[0][0])
            np.testing.assert_array_equal(together[1][t], alone[1][0])
            costs = [np.broadcast_to(np.where(m, each.cost(b), np.inf), (ROWS, w))
                     for m, b, w in zip(reference.meets, blocks, widths, strict=True)]
            np.testing.assert_array_equal(together[1][t], _first_least(costs, widths))
    other = random_terms(rng, ["hourly"])[0].form
    if other.storage is not None or forms[0].storage is not None:  # another venue's storage: scanned apart
        mixed = [*forms, other]
        assert not compiled.scanned_together(mixed)
        apart = compiled.least_costs(ours.meets, ours.gathered, ours.widths, ours.limit, ours.deadline, blocks,
                                     mixed, KERNEL)
        np.testing.assert_array_equal(apart[1][:len(forms)], together[1])
        np.testing.assert_array_equal(apart[0][:len(forms)], together[0])


@pytest.mark.parametrize("seed", range(8))
def test_the_compiled_break_even_utilisations_are_numpys_to_the_bit(seed: int) -> None:
    """`compiled.reached_utilisations` against `breakeven_utilisation` and `within_reach` in numpy:
    every figure the same to the bit, with margins zero, negative, tiny and NaN, utilisations beyond
    full use, options ruled out, and a site's figures one for all or one per scenario."""
    rng = np.random.default_rng(seed)
    rows, scenarios = int(rng.integers(1, 12)), int(rng.integers(1, 300))
    fixed = rng.uniform(50.0, 5e3, scenarios) if rng.random() < 0.5 else np.asarray(rng.uniform(50.0, 5e3))
    variable = rng.uniform(0.05, 1.5, scenarios)
    listed = rng.uniform(0.0, 6.0, (rows, scenarios))
    conversion = np.broadcast_to(rng.uniform(0.5, 2.0, (rows, 1)), (rows, scenarios)).copy()
    listed[rng.random(listed.shape) < 0.05] = np.nan
    edges = rng.random(listed.shape) < 0.1  # a margin of exactly zero, or the least positive one
    listed[edges] = (variable[np.newaxis, :] / conversion)[edges]
    conversion[rng.random(conversion.shape) < 0.03] = np.nextafter(0.0, 1.0)
    ruled_out = rng.random((rows, scenarios)) < 0.2
    per_node = int(rng.choice([1, 4, 6, 12]))
    # Row by row, each row's figures one value or one per scenario: a conversion as its one value where it
    # has one (most rows), and some rows' listed price and screen too.
    same = rng.random(rows) < 0.3
    listed[same] = listed[same][:, :1]
    ruled_out[same] = ruled_out[same][:, :1]
    with np.errstate(all="ignore"):
        u = breakeven_utilisation(fixed_per_node_month=fixed, accelerators_per_node=per_node,
                                  variable_per_accelerator_hour=variable,
                                  rented_per_accelerator_hour=listed * conversion)
        expected = np.where(within_reach(u, ruled_out), u, np.nan)
    ours = compiled.reached_utilisations(
        fixed, per_node, variable, [row[:1] if one else row for row, one in zip(listed, same, strict=True)],
        [row[:1] if (row == row[0]).all() else row for row in conversion],
        [row[:1] if one else row for row, one in zip(ruled_out, same, strict=True)],
        KERNEL, out=np.empty((rows, scenarios)))
    np.testing.assert_array_equal(ours, expected)
    assert np.isfinite(ours).any() and np.isnan(ours).any()


def test_a_gathered_block_gives_the_chosen_cells_as_its_spread_figures_would() -> None:
    """`cells` reads a chosen layout's wall clock and accelerator-hours straight from the table, as
    `wall_figures` makes them for the whole block, so a sweep never spreads them; for any of the
    scenarios, in any order (those that chose this block)."""
    rng = np.random.default_rng(3)
    block, spread = random_gathered(rng, 6), None
    rows = rng.permutation(ROWS)[:ROWS // 3]
    columns = rng.integers(0, 6, rows.size)
    read = block.cells(rows, columns)
    picked = {name: read(name) for name in ("wall_seconds", "accelerator_hours", "nodes", "fits")}
    assert "wall_seconds" not in block.__dict__  # read without spreading
    for name, values in picked.items():
        spread = np.asarray(getattr(block, name))
        np.testing.assert_array_equal(values, spread[rows, columns], err_msg=name)


def test_with_the_kernel_a_sweep_lays_out_no_figure_over_every_scenario_and_candidate(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """A sweep's base candidates, where the step does not vary by scenario, are gathered from their one
    row as the deadline's are (`layout._base_block`), so with the kernel no figure of any block is
    spread over (scenarios × candidates): not for the blocks' widths, which layouts a term may take,
    the choice, nor the chosen layout's figures; and the answers are numpy's."""
    catalog = CatalogIn.model_validate_json((EXAMPLES / "catalog.json").read_text(encoding="utf-8"))
    sweep = json.loads((EXAMPLES / "sweep-electricity-and-utilisation.json").read_text(encoding="utf-8"))
    sweep["samples"] = 2 * PRUNED_FROM
    prepared = prepare_sweep(catalog, SweepIn.model_validate(sweep), SweepLimits())
    (_, chunk), = scenario_chunks(prepared.plan, sweep["samples"])
    reference = chunk_pool.evaluate(prepared.catalog, prepared.plan, chunk, None)
    gathered_base: list[bool] = []
    base_block = layout._base_block

    def recorded(*args: Any, **kwargs: Any) -> LayoutGrid:
        block = base_block(*args, **kwargs)
        gathered_base.append(isinstance(block, GatheredGrid))
        return block

    def refused(self: GatheredGrid, figure: Any) -> Any:
        raise AssertionError("a figure spread over every scenario and candidate")
    monkeypatch.setattr(layout, "_base_block", recorded)
    monkeypatch.setattr(GatheredGrid, "_spread", refused)
    ours = chunk_pool.evaluate(prepared.catalog, prepared.plan, chunk, KERNEL)
    assert gathered_base and all(gathered_base)  # every venue's base candidates
    assert_identical(ours, reference, "chunk")


def test_a_quote_and_a_small_sweep_never_import_numba_and_a_large_sweep_does() -> None:
    """A quote never pays numba's import (0.2 s) or compilation, so the first quote of a fresh CLI
    or server is as fast with numba installed; nor does a sweep too small for the kernel to pay
    for loading it. A process that will price COMPILED_PAYS_FROM scenarios loads it, and from then
    on every sweep of that process uses it, as it costs nothing more."""
    script = ("import sys, pathlib, json\n"
              "from service.contract.catalog import CatalogIn\n"
              "from service.contract.request import QuoteRequestIn\n"
              "from service.contract.sweep import SweepIn\n"
              "from service.usecases import chunk_pool\n"
              "from service.usecases.quoting import quote\n"
              "from service.usecases.sweeps import SweepLimits, prepare_sweep, run\n"
              "examples = pathlib.Path('pricing_examples')\n"
              "catalog = CatalogIn.model_validate_json((examples / 'catalog.json').read_text())\n"
              "for name in ('owned-wins', 'split'):\n"
              "    quote(catalog, QuoteRequestIn.model_validate_json("
              "(examples / f'campaign-{name}.json').read_text()))\n"
              "sweep = json.loads((examples / 'sweep-electricity-and-utilisation.json').read_text())\n"
              "sweep['samples'] = 3000\n"
              "run(prepare_sweep(catalog, SweepIn.model_validate(sweep), SweepLimits()))\n"
              "print('numba' in sys.modules)\n"
              "large = chunk_pool.sweep_kernel(chunk_pool.COMPILED_PAYS_FROM)\n"
              "print('numba' in sys.modules, large is not None, chunk_pool.sweep_kernel(10) is large)\n")
    result = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    assert result.stdout.split() == ["False", "True", "True", "True"]


def evaluate_twice(seed: int, *, recurring: bool, vary_step: bool,
                   kernel: compiled.Kernel | None = KERNEL) -> tuple[Any, Any]:
    """A random catalog and campaign over ROWS scenarios, evaluated with `kernel` and in numpy."""
    rng = np.random.default_rng(7000 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, ROWS, vary_step=vary_step)
    if recurring:
        campaign = dataclasses.replace(campaign, recurrence=Recurrence(every_months=rng.choice([1.0, 3.0, 6.0], ROWS),
                                                                       for_months=36.0))
    options = QuoteOptions(terms=("owned_chargeback", "owned_new_build", "on_demand", "committed", "interruptible"))
    with np.errstate(all="ignore"):
        return tuple(evaluate_campaign(catalog, campaign, options, overrides, kernel=scan)  # type: ignore[return-value]
                     for scan in (kernel, None))


@pytest.mark.parametrize("recurring", [False, True])
@pytest.mark.parametrize("seed", range(4))
def test_an_evaluation_is_identical_compiled_or_in_numpy_on_random_catalogs(
        seed: int, recurring: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """Every figure of every option (totals, lines, chosen layouts, screens) equal to the bit, on
    random catalogs and campaigns whose step is shared or varies by scenario; and the kernel really
    priced every term (a comparison of numpy with itself would prove nothing)."""
    assert KERNEL is not None
    calls: list[str] = []

    def counted(name: str, function: Any) -> Any:
        def call(*args: Any) -> None:
            calls.extend([name] * (args[-1].shape[0] if name == "scan" else 1))  # a scan: one per term priced
            function(*args)
        return call
    kernel = compiled.Kernel(counted("scan", KERNEL.scan), counted("reach", KERNEL.reach), KERNEL.breakeven)
    ours, reference = evaluate_twice(seed, recurring=recurring, vary_step=seed % 2 == 1, kernel=kernel)
    assert calls.count("scan") >= len(ours.options)  # a block or more per term
    assert "reach" in calls or seed % 2 == 1  # a deadline's gathered block, where the step is shared
    assert_identical(ours, reference, "evaluation")


def test_without_numba_a_large_sweep_runs_numpy_and_says_so(monkeypatch: pytest.MonkeyPatch,
                                                            caplog: pytest.LogCaptureFixture) -> None:
    """Where numba is missing (or cannot compile it), there is no kernel, a warning says so once, and
    a sweep large enough for the kernel runs numpy, with the same answers."""
    monkeypatch.setitem(sys.modules, "numba", None)  # `import numba` now raises ImportError
    monkeypatch.setattr(compiled, "_kernel", [])
    with caplog.at_level("WARNING", logger=compiled.__name__):
        assert chunk_pool.sweep_kernel(chunk_pool.COMPILED_PAYS_FROM) is None
        assert compiled.kernel() is None and not compiled.loaded()
    assert caplog.text.count("sweeps use numpy") == 1
    catalog = CatalogIn.model_validate_json((EXAMPLES / "catalog.json").read_text(encoding="utf-8"))
    sweep = json.loads((EXAMPLES / "sweep-electricity-and-utilisation.json").read_text(encoding="utf-8"))
    sweep["samples"] = 600
    prepared = prepare_sweep(catalog, SweepIn.model_validate(sweep), SweepLimits())
    chunks = list(scenario_chunks(prepared.plan, 300))
    without = list(chunk_pool.evaluated(prepared.catalog, prepared.plan, chunks, processes=1))
    monkeypatch.setattr(compiled, "_kernel", [KERNEL])
    for numpy_only, (_, chunk) in zip(without, chunks, strict=True):
        assert_identical(chunk_pool.evaluate(prepared.catalog, prepared.plan, chunk, KERNEL), numpy_only, "chunk")
