"""The vectorised engine against a reference evaluation: on random catalogs and campaigns, one call
over many scenarios equals one call per scenario, option by option, in its total (to 1e-9 relative),
its screens and the layout it chose (shape, ZeRO stage, node count and wall clock).

Every speed-up of the layout search works across scenarios (distinct allowances solved once, runs of
equal answers, gathered blocks); a scenario evaluated alone takes none of those paths, so it is the
reference they must reproduce. Catalogs and campaigns are demo data drawn at random around the demo
catalog (invented ids and prices); nothing here is a published check value.
"""

import copy
import dataclasses
import gc
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.contract.catalog import CatalogIn
from service.domain import deadline, dominance, evaluate
from service.domain.arrays import (
    Bools,
    Ints,
    any_by_row,
    broadcast,
    every_row,
    is_every_row,
    scenario_value,
    take_rows,
)
from service.domain.campaign import (
    Campaign,
    DataPlan,
    FlopsWork,
    MeasuredWork,
    Overrides,
    QuoteOptions,
    Recurrence,
    Training,
    TransformerWork,
    Work,
)
from service.domain.choice import _first_least
from service.domain.evaluate import CampaignEvaluation, evaluate_campaign
from service.domain.gathered import gathered
from service.domain.layout import CELLS_FROM_CANDIDATES_UP_TO, node_fit
from service.domain.own_step import FiguresOnRead
from service.domain.step import FIGURES, FiguresWhenRead, LayoutGrid, wall_figures
from service.domain.terms import campaign_energy
from tests.domain import builders

DEMO = json.loads((Path(__file__).resolve().parents[2] / "pricing_examples" / "catalog.json").read_text("utf-8"))
SCENARIOS = 24
RELATIVE = 1e-9
CHOSEN = ("tensor", "pipeline", "data", "zero_stage", "nodes", "micro_batches", "origin")


def random_catalog(rng: np.random.Generator) -> Any:
    catalog = copy.deepcopy(DEMO)
    for accelerator in catalog["accelerators"]:
        accelerator["memory_gb"] = int(rng.integers(48, 240))
        accelerator["utilisation"] = float(rng.uniform(0.25, 0.55))
    for node in catalog["node_types"]:
        node["accelerators_per_node"] = int(rng.choice([4, 8, 16]))
        node["network_gbps"] = float(rng.uniform(100.0, 3200.0))
        node["intra_node_gbps"] = float(rng.uniform(900.0, 9000.0))
        node["mtbf_hours"] = float(rng.uniform(2000.0, 60000.0))
    for site in catalog["sites"]:
        site["nodes_max"] = max(site["nodes_owned"], int(rng.choice([16, 96, 700, 5000])))
        site["capex"]["node_price"] *= float(rng.uniform(0.5, 1.5))
    for offer in catalog["offers"]:
        offer["nodes_max"] = int(rng.choice([8, 64, 512, 20000, 100000]))
        offer["on_demand_per_accelerator_hour"] *= float(rng.uniform(0.5, 1.5))
    return CatalogIn.model_validate(catalog).to_domain()


def random_campaign(rng: np.random.Generator, scenarios: int, *, vary_step: bool, kind: str = "transformer",
                    distinct_steps: int | None = None, with_parameters: bool = True,
                    with_deadline: bool = True) -> tuple[Campaign, Overrides]:
    """A random campaign over `scenarios` scenarios. With `vary_step`, an input of the step itself
    varies by scenario (the network; and the model's size, or the FLOPs or samples of a run of work
    given without its parameter count, which has no tokens), drawn from `distinct_steps` values when
    that is given."""
    def step_values(low: float, high: float) -> np.ndarray:
        if distinct_steps is None:
            return rng.uniform(low, high, scenarios)
        return rng.choice(rng.uniform(low, high, distinct_steps), scenarios)

    layers = int(rng.choice([24, 32, 40, 64, 80, 96]))
    heads = int(rng.choice([16, 32, 64]))
    parameters = float(rng.choice([1.3e9, 7e9, 30e9, 70e9, 180e9]))
    tokens = rng.lognormal(np.log(20.0 * parameters), 0.4, scenarios)
    deadline = rng.uniform(2.0, 150.0, scenarios)
    if rng.random() < 0.5:
        deadline = np.round(deadline / 20.0) * 20.0 + 5.0  # scenarios sharing an allowance
    work: Work
    if kind == "flops":  # a run is one step: its FLOPs are an input of the step
        flops = 6.0 * parameters * float(np.median(tokens))
        work = FlopsWork(total_flops=step_values(0.3 * flops, 3.0 * flops) if vary_step else flops * tokens / tokens[0],
                         parameters=parameters if with_parameters else None)
    elif kind == "measured":
        samples = 1e9 * step_values(0.2, 5.0) if vary_step else rng.uniform(2e8, 5e9, scenarios)
        work = MeasuredWork(reference_node_type=DEMO["node_types"][0]["id"], samples=samples,
                            samples_per_second_per_accelerator=float(rng.uniform(20.0, 200.0)),
                            parameters=parameters if with_parameters else None)
    else:
        if vary_step and distinct_steps is not None:
            parameters = step_values(0.3 * parameters, 3.0 * parameters)  # type: ignore[assignment]
        work = TransformerWork(parameters=parameters, tokens=tokens, layers=layers, d_model=float(heads * 128),
                               sequence_length=float(rng.choice([2048, 4096, 8192])), attention_heads=heads)
    training = Training(activation_recompute=str(rng.choice(["none", "selective", "full"])),  # type: ignore[arg-type]
                        global_batch_tokens=float(rng.choice([1e6, 4e6, 16e6])))
    campaign = Campaign(name="reference", team="demo", work=work, training=training,
                        deadline_days=deadline if with_deadline else None,
                        data=DataPlan(dataset_tb=float(rng.uniform(0.0, 40.0))))
    # Varying an input of the step itself solves the deadline per scenario (or per distinct step)
    # instead of on one table of node counts.
    network = step_values(200.0, 2000.0) if vary_step else None
    overrides = Overrides(electricity_price_per_kwh=rng.uniform(0.04, 0.3, scenarios), network_gbps=network)
    return campaign, overrides


def one(value: Any, s: int) -> Any:
    """Scenario s of a campaign or overrides: every per-scenario array as that scenario's number."""
    if isinstance(value, np.ndarray):
        return float(value[s]) if value.ndim == 1 and value.shape[0] == SCENARIOS else value
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return dataclasses.replace(value, **{f.name: one(getattr(value, f.name), s)
                                             for f in dataclasses.fields(value) if f.init})
    return value


def per_scenario(value: Any, scenarios: int) -> np.ndarray:
    return np.broadcast_to(np.asarray(value, dtype=np.float64).reshape(-1), (scenarios,))


def assert_same(vector: CampaignEvaluation, singles: list[CampaignEvaluation]) -> int:
    """Every option's total, screens and chosen layout equal scenario by scenario; the count of
    priced (option, scenario) pairs compared."""
    priced = 0
    for k, option in enumerate(vector.options):
        total = per_scenario(option.total, len(singles))
        screens = per_scenario(option.screens, len(singles))
        for s, alone in enumerate(singles):
            reference = alone.options[k]
            where = f"{option.label}, scenario {s}"
            assert reference.label == option.label
            assert screens[s] == per_scenario(reference.screens, 1)[0], where
            expected = per_scenario(reference.total, 1)[0]
            if np.isfinite(expected):
                assert total[s] == pytest.approx(expected, rel=RELATIVE, abs=0.0), where
            for name in CHOSEN:
                assert per_scenario(getattr(option.layout, name), len(singles))[s] == \
                    per_scenario(getattr(reference.layout, name), 1)[0], f"{where}: {name}"
            assert per_scenario(option.layout.wall_seconds, len(singles))[s] == pytest.approx(
                per_scenario(reference.layout.wall_seconds, 1)[0], rel=RELATIVE, abs=0.0), where
            priced += bool(np.isfinite(expected))
    return priced


def evaluate_both(seed: int, *, vary_step: bool, kind: str = "transformer", distinct_steps: int | None = None,
                  with_parameters: bool = True, with_deadline: bool = True) -> int:
    rng = np.random.default_rng(1000 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, SCENARIOS, vary_step=vary_step, kind=kind,
                                          distinct_steps=distinct_steps, with_parameters=with_parameters,
                                          with_deadline=with_deadline)
    options = QuoteOptions()
    vector = evaluate_campaign(catalog, campaign, options, overrides)
    singles = [evaluate_campaign(catalog, one(campaign, s), options, one(overrides, s)) for s in range(SCENARIOS)]
    return assert_same(vector, singles)


@pytest.mark.parametrize("seed", range(10))
def test_many_scenarios_in_one_call_equal_each_scenario_alone_on_random_catalogs(seed: int) -> None:
    priced = evaluate_both(seed, vary_step=False)
    assert priced > 0  # the comparison means something only where some option has a price


def test_a_quotes_terms_that_choose_one_layout_share_it_and_none_can_change_it() -> None:
    """A quote (one scenario) reads every figure of each option's chosen layout, so the terms of a venue
    that choose the same candidate share one (`Candidates.pick`, kept by column); its arrays are
    read-only, so that no option can change another's figures. The tests above check that the shared
    layouts are each scenario's own (many scenarios in one call, where nothing is shared, equal each
    alone)."""
    shared = 0
    for seed in range(6):
        rng = np.random.default_rng(1000 + seed)
        catalog = random_catalog(rng)
        campaign, overrides = random_campaign(rng, 1, vary_step=False)
        evaluation = evaluate_campaign(catalog, one(campaign, 0), QuoteOptions(), one(overrides, 0))
        by_venue: dict[str, list[Any]] = {}
        for option in evaluation.options:
            for f in dataclasses.fields(LayoutGrid):
                figure = getattr(option.layout, f.name)
                assert not figure.flags.writeable, (option.label, f.name)
                with pytest.raises(ValueError):
                    figure[...] = figure
            by_venue.setdefault(option.venue_id, []).append(option.layout)
        shared += sum(len(layouts) - len({id(layout) for layout in layouts}) for layouts in by_venue.values())
    assert shared > 0  # some terms chose the same candidate as another term of their venue


@pytest.mark.parametrize("seed", range(6))
def test_where_the_step_varies_by_scenario_many_in_one_call_equal_each_alone(seed: int) -> None:
    """The step varies (the network by scenario): the deadline is searched per scenario from its own
    table of node counts, and must find what the scenario alone finds, also where the effective step
    is not monotone in the node count (seed 3: failures grow with it, and the top count misses a
    deadline that a middle one meets)."""
    assert evaluate_both(seed, vary_step=True) > 0


@pytest.mark.parametrize("seed", range(6))
def test_scenarios_sharing_a_step_are_solved_on_its_table_as_each_alone(
        seed: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """A grid over the model's size and the network: few distinct steps, each group of scenarios
    solved on one table (deadline.blocks_by_step; made to apply to these 24 scenarios), and each
    scenario's answer what it gets alone, as on the per-scenario search."""
    monkeypatch.setattr(deadline, "SCENARIOS_PER_STEP", 2)
    grouped = evaluate_both(seed, vary_step=True, distinct_steps=3)
    assert evaluate_both(seed, vary_step=True, distinct_steps=3, with_deadline=False) > 0  # base candidates only
    monkeypatch.setattr(deadline, "SCENARIOS_PER_STEP", SCENARIOS + 1)
    assert evaluate_both(seed, vary_step=True, distinct_steps=3) == grouped > 0


def assert_identical(ours: Any, reference: Any, where: str) -> None:
    """Every figure of two evaluations equal, exactly (NaN equal to NaN)."""
    if dataclasses.is_dataclass(ours) and not isinstance(ours, type):
        for f in dataclasses.fields(ours):
            assert_identical(getattr(ours, f.name), getattr(reference, f.name), f"{where}.{f.name}")
    elif isinstance(ours, dict):
        assert ours.keys() == reference.keys(), where
        for key in ours:
            assert_identical(ours[key], reference[key], f"{where}[{key}]")
    elif isinstance(ours, list | tuple):
        assert len(ours) == len(reference), where
        for k, (a, b) in enumerate(zip(ours, reference, strict=True)):
            assert_identical(a, b, f"{where}[{k}]")
    elif isinstance(ours, np.ndarray | float | int | np.number):
        np.testing.assert_array_equal(ours, reference, err_msg=where, strict=True)
    else:
        assert ours == reference, where


@pytest.mark.parametrize("grouped", [False, True])
@pytest.mark.parametrize("recurring", [False, True])
@pytest.mark.parametrize("seed", range(16))
def test_dropping_the_dominated_candidates_changes_nothing_chosen_or_priced(
        seed: int, recurring: bool, grouped: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """A base candidate that an earlier one dominates (fits wherever it does, on no more nodes and
    accelerators, no longer a step) is dropped before pricing (dominance.py), and in each row of
    deadline candidates those that a base candidate or an earlier shape's candidate dominates move
    last, the columns holding only those dropped. Against the
    evaluation that prices every candidate, every option's every figure must be the same: totals,
    lines, screens and the chosen layout, on every term (committed terms price whole terms, so
    layouts of one cost are common there and the first of them must still be the one kept), with
    recurring instances sharing the nodes, with and without a deadline, for many scenarios and one,
    on one table for all scenarios and on a table per group of scenarios sharing a step."""
    rng = np.random.default_rng(3000 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, SCENARIOS, vary_step=grouped, distinct_steps=3 if grouped else None,
                                          with_deadline=seed % 4 != 3)
    monkeypatch.setattr(deadline, "SCENARIOS_PER_STEP", 2)
    if recurring:
        campaign = dataclasses.replace(campaign, recurrence=Recurrence(
            every_months=float(rng.choice([0.5, 1.0, 3.0, 7.0])), for_months=float(rng.choice([6.0, 24.0, 60.0]))))
    options = QuoteOptions()
    monkeypatch.setattr(dominance, "PRUNED_FROM", 1)  # also for these 24 scenarios, and for one
    cases = [(campaign, overrides), (one(campaign, 0), one(overrides, 0))]
    dropped = [evaluate_campaign(catalog, c, options, o) for c, o in cases]
    monkeypatch.setattr(dominance, "PRUNED_FROM", 10**12)  # every candidate priced
    kept = [evaluate_campaign(catalog, c, options, o) for c, o in cases]
    for ours, reference in zip(dropped, kept, strict=True):
        assert_identical(ours, reference, "evaluation")
    assert any(np.isfinite(option.total).any() for option in kept[0].options)


def test_a_column_is_dropped_only_where_an_earlier_one_dominates_it() -> None:
    """dominance.undominated on one row of five columns (demo figures)."""
    row = {"effective_step_seconds": np.array([[2.0, 3.0, 1.0, 3.0, np.inf]]),
           "nodes": np.array([[4.0, 4.0, 8.0, 2.0, 8.0]]),
           "accelerators": np.array([[32.0, 32.0, 64.0, 16.0, 64.0]]),
           "fits": np.array([[False, True, True, True, True]]),
           "origin": np.array([[0, 0, 1, 1, 1]])}
    # Column 1 fits where column 0 does not: kept. Column 3 dominates column 1 but comes later: kept.
    # Column 2 (faster, larger) is dominated by none. Column 4 equals column 2 but is not finite: kept.
    assert_identical(dominance.undominated(row), row, "row")
    row["effective_step_seconds"][0, 4] = 1.0  # now column 2 dominates column 4, ties included
    assert_identical(dominance.undominated(row), {name: value[:, :4] for name, value in row.items()}, "dropped")
    row["fits"][0, 0] = True  # column 0 fits and dominates column 1 (same size, shorter step)
    assert_identical(dominance.undominated(row), {name: value[:, [0, 2, 3]] for name, value in row.items()},
                     "dropped")
    # Per row of several (a group of scenarios each): the dominated move last, in order.
    rows = {name: np.concatenate([value, value[:, ::-1]]) for name, value in row.items()}
    order, kept = dominance.in_order(rows)
    np.testing.assert_array_equal(order, [[0, 2, 3, 1, 4], [0, 1, 4, 2, 3]])  # reversed: 2 equals 0, 1 beats 3
    assert kept == 3


def test_in_each_scenario_the_dominated_deadline_candidates_move_last_and_columns_of_only_those_go() -> None:
    """dominance.deadline_rows: rows of three shapes' deadline candidates (one per run of allowances),
    drawn from a table of five (demo figures)."""
    base = {"effective_step_seconds": np.array([[2.0, 1.0]]), "nodes": np.array([[4.0, 16.0]]),
            "accelerators": np.array([[32.0, 128.0]]), "fits": np.array([[True, True]])}
    table = {"effective_step_seconds": np.array([[2.5, 1.5, 0.5, 1.0, 1.6]]),
             "nodes": np.array([[4.0, 8.0, 16.0, 16.0, 8.0]]),
             "accelerators": np.array([[32.0, 128.0, 128.0, 128.0, 64.0]]), "fits": np.ones((1, 5), dtype=bool)}
    # Entries 0 and 3 are dominated by base candidates (3 by a tie); entry 4 by entry 1 only where
    # entry 1 comes first: entry 1 has more accelerators, so entry 4 does not dominate it either.
    column = np.array([[0, 1, 3], [0, 1, 3], [1, 4, 2], [0, 4, 2], [0, 4, 2]])
    def kept(first: Any, table: Any, column: np.ndarray) -> np.ndarray:
        ordered, each = dominance.deadline_rows(first, table, column)
        assert ordered.shape == column.shape and each.shape == (column.shape[0],)
        return ordered[:, :int(np.max(each, initial=0))]

    np.testing.assert_array_equal(kept(base, table, column),
                                  [[1, 0, 3], [1, 0, 3], [1, 4, 2], [4, 2, 0], [4, 2, 0]])
    # How many columns each row keeps, before the dominated (the compiled scan reads no further).
    np.testing.assert_array_equal(dominance.deadline_rows(base, table, column)[1], [1, 1, 3, 2, 2])
    table["accelerators"][0, 1] = 64.0  # now entry 1 dominates entry 4 where it comes first
    np.testing.assert_array_equal(kept(base, table, column),
                                  [[1, 0], [1, 0], [1, 2], [4, 2], [4, 2]])
    # A candidate dominated only by a later one stays where it is.
    np.testing.assert_array_equal(kept(base, table, np.array([[4, 1, 2]])), [[4, 1, 2]])
    table["effective_step_seconds"][0, 3] = np.inf  # a step that is not finite is never dominated
    np.testing.assert_array_equal(kept(base, table, column[:2]), [[1, 3], [1, 3]])
    assert kept(base, table, np.array([[0, 0], [0, 0]])).shape == (2, 0)


@pytest.mark.parametrize("with_parameters", [False, True])
@pytest.mark.parametrize("kind", ["flops", "measured"])
@pytest.mark.parametrize("seed", range(2))
def test_work_as_flops_or_samples_many_in_one_call_equal_each_alone(
        seed: int, kind: str, with_parameters: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """Work given as total FLOPs or measured samples. Without its parameter count it has no tokens,
    so a run is one step and its amount an input of the step: varied by scenario it is searched per
    scenario, or per distinct value (a sweep over it under a deadline crashed on the one-table search
    before). With the parameter count, tokens follow from it and one table serves every scenario."""
    assert evaluate_both(seed, vary_step=False, kind=kind, with_parameters=with_parameters) > 0
    assert evaluate_both(seed, vary_step=True, kind=kind, with_parameters=with_parameters) > 0
    monkeypatch.setattr(deadline, "SCENARIOS_PER_STEP", 2)
    assert evaluate_both(seed, vary_step=True, kind=kind, distinct_steps=3, with_parameters=with_parameters) > 0


@pytest.mark.parametrize("seed", range(20))
def test_the_least_across_blocks_is_numpys_argmin_of_the_blocks_side_by_side(seed: int) -> None:
    """Choosing across blocks (choice._first_least, which writes them into one array, a block of one
    row spread over every row) against np.argmin of their concatenation, with ties, infinities, NaN
    and blocks of one row beside blocks of many."""
    rng = np.random.default_rng(seed)
    rows = 7
    widths = [int(w) for w in rng.integers(1, 5, rng.integers(1, 4))]
    blocks = []
    for width in widths:
        block = rng.choice([1.0, 2.0, 3.0, np.inf, np.nan], size=(rows if rng.random() < 0.6 else 1, width),
                           p=[0.3, 0.3, 0.2, 0.15, 0.05])
        blocks.append(block)
    side_by_side = np.concatenate([np.broadcast_to(b, (rows, w)) for b, w in zip(blocks, widths, strict=True)],
                                  axis=1)
    picked = _first_least(blocks, widths)
    np.testing.assert_array_equal(np.broadcast_to(picked, (rows,)), np.argmin(side_by_side, axis=1))


@pytest.mark.parametrize("seed", range(10))
def test_any_by_row_is_numpys_any_along_the_columns(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for rows, columns in [(0, 3), (1, 5), (7, 0), (50, 1), (200, 9), (300, 32), (40, 33), (1000, 70)]:
        values = rng.random((rows, columns)) < rng.choice([0.01, 0.2, 0.9])
        np.testing.assert_array_equal(any_by_row(values), values.any(axis=1), strict=True)
        wide = np.broadcast_to(values[:1], (5, columns)) if rows else values
        np.testing.assert_array_equal(any_by_row(wide), wide.any(axis=1), strict=True)


def test_broadcast_gives_numpys_read_only_broadcast_and_a_scenario_value_its_item() -> None:
    """`arrays.broadcast` makes one value's repetition as a view of its own (zero strides); it must
    equal np.broadcast_to in shape, dtype and values, be read-only, and follow the value it repeats,
    for floats, integers, booleans, strings and objects (which take numpy's path), from a scalar, a
    0-d array or any array of one element. `scenario_value` reads scenario i, or the one value."""
    for value in (2.5, np.float64(-0.0), np.array(7), np.array([[True]]), np.array(["kept"]),
                  np.array([3], dtype=object), np.array([[1.5]])[:, :1]):
        for shape in ((), (1,), (4,), (3, 1), (2, 5), (0, 3)):
            if np.ndim(value) > len(shape):  # numpy broadcasts no array to fewer axes, nor does berth
                with pytest.raises(ValueError):
                    np.broadcast_to(value, shape)
                with pytest.raises(ValueError):
                    broadcast(value, shape)
                continue
            made, numpys = broadcast(value, shape), np.broadcast_to(value, shape)
            assert made.shape == numpys.shape and made.dtype == numpys.dtype, (value, shape)
            np.testing.assert_array_equal(made, numpys, strict=True)
            assert made.shape == np.shape(value) or not made.flags.writeable
    source = np.array([4.0])
    view = broadcast(source, (3,))
    source[0] = 9.0  # a view, as numpy's is: it shows the value it repeats
    np.testing.assert_array_equal(view, [9.0, 9.0, 9.0])
    wide = np.arange(6.0).reshape(2, 3)
    assert broadcast(wide, (2, 3)) is wide and broadcast(wide[:1], (4, 3)).shape == (4, 3)
    assert scenario_value(np.array([1.0, 2.0, 3.0]), 2) == 3.0 and scenario_value(np.array(5.0), 2) == 5.0
    assert scenario_value(np.array([[8]]), 1) == 8 and type(scenario_value(np.array([2.0]), 0)) is float


@pytest.mark.parametrize("seed", range(4))
def test_one_cell_of_a_grid_reads_as_the_same_cell_among_several(seed: int) -> None:
    """`LayoutGrid.cells` reads a single cell (a quote's chosen layout) by plain indices: each figure,
    whether one row for every scenario, one column for every candidate or a full grid, of each dtype,
    must equal that cell read by index arrays among others, as a fresh (1,) array of its own."""
    rng = np.random.default_rng(seed)
    rows, width = 6, 9
    forms = [(rows, width), (1, width), (rows, 1), (1, 1)]
    values = {}
    for k, f in enumerate(dataclasses.fields(LayoutGrid)):
        form = forms[(k + seed) % len(forms)]
        values[f.name] = (rng.random(form) < 0.5 if f.type == Bools else
                          rng.integers(0, 5, form) if f.type == Ints else rng.random(form))
    grid = LayoutGrid(**values)
    for r, c in [(0, 0), (rows - 1, width - 1), (int(rng.integers(rows)), int(rng.integers(width)))]:
        one = grid.cells(np.array([r]), np.array([c]))
        among = grid.cells(np.array([r, rows - 1 - r]), np.array([c, width - 1 - c]))
        for name, value in values.items():
            read = one(name)
            assert read.dtype == value.dtype
            np.testing.assert_array_equal(read, among(name)[:1], strict=True)
            assert read.flags.owndata and not np.shares_memory(read, value)


@pytest.mark.parametrize("distinct", [False, True])
@pytest.mark.parametrize("seed", range(3))
def test_one_cell_of_a_gathered_block_reads_as_the_same_cell_among_several(seed: int, distinct: bool) -> None:
    """A gathered block reads a single cell (a quote's chosen layout) at once, every figure a slice of its
    table's row (`GatheredGrid.figures_at`): each must equal that cell read by index arrays among others,
    in value, dtype and shape, whether the block's columns are one row per scenario or, with `row_of`,
    distinct rows, and whether some figures were spread over the block first (eligibility spreads the wall
    clock, the node counts and the fit)."""
    rng = np.random.default_rng(seed)
    scenarios, width, columns = 5, 4, 7
    campaign = builders.load(tokens=rng.uniform(1e10, 5e10, scenarios))  # steps, so wall clocks, differ
    venue = builders.hardware(staging_seconds=rng.uniform(0.0, 3600.0, scenarios))
    table = {f.name: (rng.random((1, columns)) < 0.5 if f.type == Bools else
                      rng.integers(0, 5, (1, columns)) if f.type == Ints else rng.random((1, columns)))
             for f in dataclasses.fields(LayoutGrid) if f.name not in ("wall_seconds", "accelerator_hours")}
    if distinct:
        rows, row_of = rng.integers(0, columns, (3, width)), rng.integers(0, 3, scenarios)
    else:
        rows, row_of = rng.integers(0, columns, (scenarios, width)), None
    block = gathered(campaign, venue, table, rows, row_of)
    for spread_first in (False, True):
        if spread_first:
            assert block.wall_seconds.shape == block.nodes.shape == block.fits.shape == (scenarios, width)
        for r in range(scenarios):
            for c in range(width):
                one = block.cells(np.array([r]), np.array([c]))
                among = block.cells(np.array([r, scenarios - 1 - r]), np.array([c, width - 1 - c]))
                assert set(block.figures_at(r, c)) == set(FIGURES)
                for name in FIGURES:
                    np.testing.assert_array_equal(one(name), among(name)[:1], strict=True)


@pytest.mark.parametrize("same_memory", [False, True])
@pytest.mark.parametrize("seed", range(4))
def test_venues_of_one_node_size_share_what_it_makes_of_the_model_as_if_each_made_its_own(
        seed: int, same_memory: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """The shapes, memory minimum and batch bound depend on the campaign and the node's size alone
    (accelerators per node, memory per accelerator), so the venues of one size and their terms share
    them (`evaluate._node_fit`). Both demo node types are given the same accelerators per node, with
    the same or different memory: every option must equal an evaluation in which each venue makes
    its own, exactly, and it must be made once per size."""
    rng = np.random.default_rng(3000 + seed)
    source = copy.deepcopy(DEMO)
    per_node = int(rng.choice([4, 8, 16]))
    for node in source["node_types"]:
        node["accelerators_per_node"] = per_node
    memory = [int(m) for m in rng.integers(48, 240, len(source["accelerators"]))]
    for accelerator, gb in zip(source["accelerators"], memory, strict=True):
        accelerator["memory_gb"] = memory[0] if same_memory else gb
    catalog = CatalogIn.model_validate(source).to_domain()
    campaign, overrides = random_campaign(rng, SCENARIOS, vary_step=False)
    made: list[tuple[int, float]] = []
    shared_fit = evaluate._node_fit

    def counted(context: Any, hardware: Any) -> Any:
        made.append((hardware.accelerators_per_node, float(hardware.memory_bytes)))
        return shared_fit(context, hardware)

    monkeypatch.setattr(evaluate, "_node_fit", counted)
    shared = evaluate_campaign(catalog, campaign, QuoteOptions(), overrides)
    monkeypatch.setattr(evaluate, "_node_fit", lambda context, hardware: node_fit(context.load, hardware))
    alone = evaluate_campaign(catalog, campaign, QuoteOptions(), overrides)
    assert len(set(made)) == (1 if same_memory or memory[0] == memory[1] else 2) < len(made)
    for ours, theirs in zip(shared.options, alone.options, strict=True):
        assert ours.label == theirs.label
        np.testing.assert_array_equal(ours.total, theirs.total)
        np.testing.assert_array_equal(ours.screens, theirs.screens)
        np.testing.assert_array_equal(ours.min_nodes, theirs.min_nodes)
        for name in (*CHOSEN, "wall_seconds"):
            np.testing.assert_array_equal(getattr(ours.layout, name), getattr(theirs.layout, name))


def test_the_chosen_layouts_figures_are_made_once_when_read_and_taking_rows_keeps_them_so() -> None:
    """step.FiguresWhenRead, as `Candidates.pick` and `choice.as_column` return it (demo figures)."""
    made: list[str] = []

    def make(name: str) -> np.ndarray:
        made.append(name)
        return np.arange(3.0) + len(made)
    grid = FiguresWhenRead.of(make)
    first = grid.nodes
    assert grid.nodes is first and made == ["nodes"]  # made once
    np.testing.assert_array_equal(grid.wall_hours, grid.wall_seconds / 3600.0)
    assert made == ["nodes", "wall_seconds"]
    with pytest.raises(AttributeError):
        _ = grid.not_a_figure
    taken = take_rows(grid, slice(1, 2), 3)  # nothing made by taking rows
    assert made == ["nodes", "wall_seconds"]
    np.testing.assert_array_equal(taken.tensor, grid.tensor[1:2])  # made when read, from the grid's own
    assert made == ["nodes", "wall_seconds", "tensor"] and taken.tensor is taken.tensor
    for f in dataclasses.fields(LayoutGrid):
        np.testing.assert_array_equal(getattr(taken, f.name), getattr(grid, f.name)[1:2])
    assert sorted(made) == sorted(f.name for f in dataclasses.fields(LayoutGrid))  # each once
    with pytest.raises(AttributeError):
        _ = taken.not_a_figure


def test_taking_rows_keeps_an_options_energy_made_when_read_and_what_its_options_share_shared() -> None:
    """`arrays.take_rows` on options: the energy figures are made, from the whole's, only when one is
    read, and a dataclass that several options share (their node type) is taken once and stays one
    (demo figures)."""
    grid = FiguresWhenRead.of(lambda name: np.linspace(1.0, 3.0, 3) * (8.0 if name == "nodes" else 3600.0))
    energy = campaign_energy(grid, idle_kw=1.5, peak_kw=9.5, load=0.8, pue=1.25, grid_kgco2e_per_kwh=0.3)
    assert "it_kwh" not in energy.__dict__
    taken = take_rows({"a": energy, "b": (energy, grid)}, np.array([2, 0]), 3)
    assert "it_kwh" not in energy.__dict__ and "it_kwh" not in taken["a"].__dict__
    assert taken["a"] is taken["b"][0]  # met twice, taken once
    for name in ("it_kwh", "facility_kwh", "peak_it_kw", "cooling_kw_thermal", "kgco2e"):
        np.testing.assert_array_equal(getattr(taken["a"], name), getattr(energy, name)[[2, 0]])
    np.testing.assert_array_equal(taken["b"][1].nodes, [24.0, 8.0])


def test_taking_rows_leaves_a_dataclass_with_nothing_to_take_as_it_is_and_copies_one_with_rows() -> None:
    """`arrays.take_rows` through dataclasses: one none of whose fields runs over the scenarios (a venue's
    hardware of one value per figure, as a catalog's node type or site) is the same object, nothing built
    again; one with a figure per scenario is a copy with those rows, its other figures shared (demo figures)."""
    same = builders.hardware()
    varied = builders.hardware(staging_seconds=np.linspace(0.0, 900.0, 5))
    taken = take_rows({"same": same, "varied": (varied, "a name", 2.5, None)}, np.array([4, 1]), 5)
    assert taken["same"] is same
    copy_of, *leaves = taken["varied"]
    assert copy_of is not varied and leaves == ["a name", 2.5, None]
    np.testing.assert_array_equal(copy_of.staging_seconds, [900.0, 225.0])
    assert all(getattr(copy_of, f.name) is getattr(varied, f.name)
               for f in dataclasses.fields(varied) if f.name != "staging_seconds")


def test_every_row_is_told_apart_without_reading_it_and_taking_it_takes_everything() -> None:
    """`arrays.every_row`: the index a chunk's chosen layouts are read at where every scenario chose from one
    block. It is known by identity, so an equal index made elsewhere is still read as an index; where it is
    known, what is taken at it is the whole, unchanged: the load and hardware as they are, and the wall clock
    of those rows the same to the bit as read through an ordinary index (demo figures)."""
    rows = every_row(5)
    assert rows is every_row(5) and not rows.flags.writeable
    np.testing.assert_array_equal(rows, np.arange(5))
    assert is_every_row(rows) and not is_every_row(np.arange(5)) and not is_every_row(rows[:4])
    the_load = builders.load(tokens=np.linspace(1e10, 5e10, 5))
    assert take_rows(the_load, rows, 5) is the_load
    np.testing.assert_array_equal(take_rows(the_load, np.arange(5), 5).tokens_per_run, the_load.tokens_per_run)
    step = np.linspace(1.0, 2.0, 5)[:, np.newaxis]
    used = np.full((5, 1), 64.0)
    for venue in (builders.hardware(), builders.hardware(staging_seconds=np.linspace(0.0, 900.0, 5))):
        for load in (the_load, builders.load()):  # steps one per scenario, then one for all
            known, read = (wall_figures(load, venue, step, used, index) for index in (rows, np.arange(5)))
            for name in ("wall_seconds", "accelerator_hours"):
                np.testing.assert_array_equal(np.broadcast_to(known[name], (5, 1)), read[name], strict=True)


@pytest.mark.parametrize("vary_step", [False, True])
@pytest.mark.parametrize("seed", range(4))
def test_one_scenario_taken_from_the_chosen_layouts_is_its_cell_as_the_whole_has_it(seed: int, vary_step: bool) -> None:
    """An evaluation of several scenarios, then one of them taken (`arrays.take_rows`, as a split quote
    takes its campaign's from the evaluation it shares with the split points): the layouts chosen from
    candidates (`Candidates.pick`) give that scenario's cell, read at once, every figure the same to the
    bit and of the same dtype as the whole's at that row; several scenarios taken stay made when read
    (random catalogs and campaigns)."""
    rng = np.random.default_rng(900 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, 9, vary_step=vary_step)
    whole = evaluate_campaign(catalog, campaign, QuoteOptions(), overrides)
    picked = 0
    for row in (0, 4, 8):
        for option, taken in zip(whole.options, take_rows(whole, slice(row, row + 1), 9).options, strict=True):
            if type(option.layout).__name__ == "_Picked":
                assert type(taken.layout) is LayoutGrid  # its cell, every figure read
                picked += 1
            for f in dataclasses.fields(LayoutGrid):
                np.testing.assert_array_equal(getattr(taken.layout, f.name),
                                              getattr(option.layout, f.name)[row:row + 1],
                                              err_msg=f"{option.label} {f.name}", strict=True)
            assert_identical(taken.total, option.total[row:row + 1], option.label)
    assert picked
    for option in whole.options:
        several = take_rows(option.layout, np.array([7, 2]), 9)
        assert isinstance(several, FiguresWhenRead) and "nodes" not in several.__dict__
        np.testing.assert_array_equal(several.nodes, option.layout.nodes[[7, 2]], strict=True)


@pytest.mark.parametrize("seed", range(3))
def test_the_layouts_chosen_over_many_scenarios_hold_no_candidate_block_alive(seed: int) -> None:
    """A sweep keeps every option's chosen layout to the end of its chunk: those of more scenarios than
    CELLS_FROM_CANDIDATES_UP_TO must not hold the candidate blocks whose figures run over every scenario and
    candidate (`own_step.FiguresOnRead`), or the chunk holds them all. Over fewer (a split quote) they do,
    which shows that the count below sees such blocks when they are held. Each scenario its own step
    (random catalogs and campaigns)."""
    rng = np.random.default_rng(950 + seed)
    catalog = random_catalog(rng)
    for scenarios, held in ((CELLS_FROM_CANDIDATES_UP_TO + 1, False), (9, True)):
        campaign, overrides = random_campaign(rng, scenarios, vary_step=True)
        evaluation = evaluate_campaign(catalog, campaign, QuoteOptions(), overrides)
        gc.collect()
        alive = sum(isinstance(o, FiguresOnRead) for o in gc.get_objects())
        assert any(type(o.layout).__name__ == "_Picked" for o in evaluation.options)
        assert (alive > 0) is held, (scenarios, alive)
        del evaluation
