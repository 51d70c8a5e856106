"""The deadline candidate against brute force: for each shape, every node count from the memory
minimum to the node limit evaluated, and the first that meets each scenario's deadline found by a
plain scan. The search (a table of 16 counts, the bracket around the first that meets, closed by
false position and halving) must land on that count, also where failures make the step grow again
with the node count. Demo figures (random campaigns and hardware); no published check value.
"""

from dataclasses import fields
from typing import Any

import numpy as np
import pytest

from service.domain import deadline, dominance, guesses, layout, own_step, step
from service.domain.layout import DEADLINE, Architecture, evaluate_layouts
from service.domain.own_step import FiguresOnRead
from service.domain.parallelism import shapes
from service.domain.step import Columns, LayoutGrid, evaluate_columns
from tests.domain.builders import hardware, load

SCENARIOS = 30
DAY = 86400.0


@pytest.mark.parametrize("seed", range(8))
def test_the_deadline_candidate_is_the_first_count_that_meets_the_deadline(
        seed: int, monkeypatch: pytest.MonkeyPatch) -> None:
    # The columns are read by position below, so every base candidate is kept.
    monkeypatch.setattr(dominance, "PRUNED_FROM", 10**12)
    rng = np.random.default_rng(2000 + seed)
    arch = Architecture(layers=int(rng.choice([24, 32, 48])), d_model=float(rng.choice([2048, 4096, 5120])),
                        sequence_length=4096.0, attention_heads=32.0)
    parameters = float(rng.choice([1.3e9, 7e9, 13e9, 30e9]))
    tokens = rng.lognormal(np.log(20.0 * parameters), 0.5, SCENARIOS)
    deadline = rng.uniform(1.0, 90.0, SCENARIOS) * DAY
    campaign = load(parameters=np.asarray(parameters), tokens=tokens, timed_flops_per_run=6.0 * parameters * tokens,
                    timed_flops_per_token=np.asarray(6.0 * parameters), tokens_per_run=tokens, architecture=arch,
                    deadline_seconds=deadline, recompute=str(rng.choice(["none", "selective", "full"])),
                    global_batch_tokens=np.full(1, float(rng.choice([2e6, 4e6, 8e6]))))
    venue = hardware(node_mtbf_hours=np.full(1, rng.uniform(3000.0, 60000.0)),
                     network_gbps=np.full(1, rng.uniform(100.0, 1600.0)),
                     memory_bytes=float(rng.choice([48, 80, 160])) * 2.0**30)
    limit = float(rng.choice([rng.integers(8, 160), rng.integers(400, 3000)]))
    grid = evaluate_layouts(campaign, venue, node_limits=[np.asarray(limit)])[0].whole()
    found = shapes(accelerators_per_node=8, layers=arch.layers, attention_heads=arch.attention_heads,
                   pins=campaign.pins, zero_stages=campaign.zero_stages)
    h, unit = found.count, found.node_unit(8)
    # Columns: each shape at the memory minimum, at the node limit, then its deadline candidate.
    assert (np.broadcast_to(grid.origin, grid.nodes.shape)[:, 2 * h:] == DEADLINE).all()
    searched = np.broadcast_to(grid.nodes, (SCENARIOS, grid.nodes.shape[1]))[:, 2 * h:]
    compared = 0
    for shape in range(h):
        counts = np.arange(grid.nodes[0, shape] / unit[shape], grid.nodes[0, h + shape] / unit[shape] + 1.0)
        nodes = (counts * unit[shape])[np.newaxis, :]
        every = evaluate_columns(campaign, venue, Columns(np.full(nodes.shape, found.tensor[shape]),
                                                          np.full(nodes.shape, found.pipeline[shape]), nodes,
                                                          nodes * 8, np.full(nodes.shape, DEADLINE)), found)
        meets = every.fits & (every.wall_seconds <= deadline[:, np.newaxis])
        for s in np.flatnonzero(meets.any(axis=1)):
            assert searched[s, shape] == nodes[0, np.argmax(meets[s])], (shape, s)
            compared += 1
    assert compared > 100


@pytest.mark.parametrize("splits", [2, guesses.GUESS_SPLITS])
def test_each_allowance_gets_the_rung_and_guess_a_plain_scan_gives_it(splits: int,
                                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    """`guess_runs` cuts each shape's allowances into runs of one state (the first rung whose
    running minimum meets the allowance) and one guessed count, evaluating the guess only where
    runs may change. Laid out cell by cell, the runs must give every allowance the state a plain
    scan gives it and the guess `reaching` gives it alone, including layouts that do not fit
    (inf), allowances equal to a rung, thousands of allowances within one rung's range (the
    guess changing many times), and allowances of inf, -inf and NaN (a scenario whose deadline
    leaves no time). Two splits per step makes the search go many levels deep."""
    monkeypatch.setattr(guesses, "GUESS_SPLITS", splits)
    rng = np.random.default_rng(7)
    shapes_, rungs_ = 6, guesses.TABLE_RUNGS
    k_min = rng.integers(1, 8, (1, shapes_)).astype(float)
    rungs = deadline.table_rungs(k_min, k_min * rng.uniform(5.0, 4000.0, (1, shapes_)))[0]
    g = 3600.0 / rungs + rng.uniform(0.0, 1.0, (shapes_, 1))  # falls with the count, as a step does
    g[rng.random(g.shape) < 0.2] = np.inf
    g[:, 5] *= 1.5  # a step that grows again: the running minimum stays
    g[5] = np.inf  # a shape that never fits
    prefix = np.minimum.accumulate(g, axis=1)
    afforded = np.unique(np.concatenate([rng.uniform(0.0, 1000.0, 4000), prefix[np.isfinite(prefix)][:12],
                                         g[np.isfinite(g)][:12], [np.inf, -np.inf, np.nan]]))
    valid = int(np.count_nonzero(~np.isnan(afforded)))
    runs = guesses.guess_runs(g, rungs, afforded, valid)

    state = np.full((shapes_, afforded.size), -1)
    guess = np.full((shapes_, afforded.size), np.nan)
    assert (runs.end > runs.start).all()
    for shape, s, start, end, count in zip(runs.shape, runs.state, runs.start, runs.end, runs.count, strict=True):
        assert (state[shape, start:end] == -1).all()  # no cell in two runs
        state[shape, start:end], guess[shape, start:end] = s, count
    expected_state = np.array([[next((j for j in range(rungs_) if prefix[i, j] <= a), rungs_) for a in afforded]
                               for i in range(shapes_)])
    assert (state == expected_state).all()
    for i in range(shapes_):
        for u, a in enumerate(afforded):
            s = expected_state[i, u]
            if s in (0, rungs_):
                assert guess[i, u] == rungs[i, 0 if s == 0 else -1]
                continue
            alpha, beta = guesses.line(rungs[i, s - 1], g[i, s - 1], rungs[i, s], g[i, s])
            assert guess[i, u] == guesses.reaching(alpha, beta, rungs[i, s - 1], rungs[i, s], a), (i, u)
    # The runs are few where the allowances are many: the guess was not evaluated at every one.
    assert runs.start.size < afforded.size


def _laid_out(pieces: "deadline._Pieces", lengths: list[int], shapes_: int, allowances: int) -> np.ndarray:
    """Every shape's column at every allowance, (H, U): the pieces of `lengths` laid out cell by
    cell, then the cells set apart in order."""
    column = np.full((shapes_, allowances), -1)
    for shape, start, length, value in zip(pieces.shape, pieces.start, lengths, pieces.column, strict=True):
        column[shape, start:start + length] = value
    for shape, position, value in pieces.cells:
        for h, u, v in zip(shape, position, value, strict=True):
            column[h, u] = v
    return column


@pytest.mark.parametrize("one_allowance", [False, True])
@pytest.mark.parametrize("seed", range(8))
def test_the_distinct_rows_are_those_of_the_columns_laid_out_for_every_allowance(seed: int,
                                                                                one_allowance: bool) -> None:
    """`_Pieces.distinct_rows` reads the shapes' columns only where a piece or a cell starts. It
    must give what laying out every shape's column at every allowance gives: the distinct rows of
    neighbouring allowances, in order, and each allowance's row. Pieces of length 0, neighbouring
    pieces of one column, cells set twice (the later wins), cells at the first and last allowance,
    a single allowance and a single shape are all drawn; `one_allowance` draws a single allowance (a
    quote's), which `distinct_rows` reads at position 0 without looking for where columns change."""
    rng = np.random.default_rng(seed)
    shapes_, allowances = int(rng.integers(1, 6)), 1 if one_allowance else int(rng.choice([1, 2, 7, 40, 500]))
    shape, start, length = [], [], []
    for h in range(shapes_):  # each shape's allowances cut at random, some cuts repeated (empty pieces)
        cuts = np.sort(rng.integers(0, allowances + 1, int(rng.integers(0, 6))))
        edges = np.concatenate([[0], cuts, [allowances]])
        shape += [h] * (edges.size - 1)
        start += list(edges[:-1])
        length += list(np.diff(edges))
    # Few columns, so that neighbouring pieces often have the same.
    pieces = deadline._Pieces(np.array(shape), np.array(start), rng.integers(0, 3, len(shape)))
    for _ in range(int(rng.integers(0, 3))):
        count = int(rng.integers(1, 6))
        pieces = pieces.with_cells(rng.integers(0, shapes_, count), rng.integers(0, allowances, count),
                                   rng.integers(0, 4, count))
    column = _laid_out(pieces, length, shapes_, allowances)
    assert (column >= 0).all()  # the pieces covered every cell
    rows, row_of = pieces.distinct_rows(shapes_, allowances)
    new_row = np.concatenate([[True], (column[:, 1:] != column[:, :-1]).any(axis=0)])
    np.testing.assert_array_equal(rows, column[:, new_row].T)
    np.testing.assert_array_equal(row_of, np.cumsum(new_row) - 1)
    np.testing.assert_array_equal(rows[row_of], column.T)


def test_venues_of_one_staging_share_the_sorted_allowances_and_others_get_their_own() -> None:
    """`deadline.allowances`: each scenario's allowance (deadline − staging) / steps, distinct and
    ascending (NaN last) as np.unique gives them; sorted once for the venues whose staging is the
    same, and apart for a venue that stages longer (demo figures)."""
    rng = np.random.default_rng(3)
    scenarios = 50
    the_load = load(tokens=rng.uniform(1e11, 1e12, scenarios),
                    deadline_seconds=rng.uniform(5.0, 30.0, scenarios) * 86400.0)
    near, also_near, far = (hardware(staging_seconds=seconds) for seconds in (3600.0, 3600.0, 86400.0))
    deadline_seconds = np.asarray(the_load.deadline_seconds).reshape(-1, 1)
    first, again, other = (deadline.allowances(the_load, venue, deadline_seconds) for venue in (near, also_near, far))
    assert first[0] is again[0] and first[1] is again[1]
    assert first[0] is not other[0]
    for venue, (afforded, scenario_of) in ((near, first), (far, other)):
        steps, staging = step.scenario_terms(the_load, venue)
        expected = np.unique(((deadline_seconds - staging) / steps).reshape(-1), return_inverse=True)
        np.testing.assert_array_equal(afforded, expected[0])
        np.testing.assert_array_equal(scenario_of, expected[1])
        assert not afforded.flags.writeable and not scenario_of.flags.writeable  # shared: never written


@pytest.mark.parametrize("in_passes", [False, True])
@pytest.mark.parametrize("seed", range(6))
def test_where_each_scenario_has_its_own_step_the_figures_made_later_equal_a_full_evaluation(
        seed: int, in_passes: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """Where the step varies by scenario, a candidate's figures for pricing and choosing (fits, wall
    clock, accelerator-hours) are made for every candidate, for the deadline candidates straight from
    the search's own measurements, and every other figure only when read (`FiguresOnRead`): for the
    cells read, as the chosen layouts are, or for the whole block. Each must equal a full evaluation
    of the same columns (`evaluate_columns`), exactly, including deadlines no count meets, no
    deadline at all (inf) and layouts that do not fit. `in_passes`: the step evaluated a few
    scenarios a pass (`own_step.STEP_ROWS`, which bounds a chunk's memory), as a large chunk is. A cells'
    reader does not keep its block alive (a sweep keeps every chosen layout to the end of its chunk)."""
    if in_passes:
        monkeypatch.setattr(own_step, "STEP_ROWS", 7)
    rng = np.random.default_rng(3000 + seed)
    arch = Architecture(layers=32, d_model=4096.0, sequence_length=4096.0, attention_heads=32.0)
    parameters = float(rng.choice([7e9, 13e9, 30e9]))
    tokens = rng.lognormal(np.log(20.0 * parameters), 0.3, SCENARIOS)
    deadline_days = rng.uniform(0.5, 60.0, SCENARIOS)
    deadline_days[:3] = [np.inf, 1e-3, 0.0]  # no deadline; deadlines no count meets
    campaign = load(parameters=np.asarray(parameters), tokens=tokens, timed_flops_per_run=6.0 * parameters * tokens,
                    timed_flops_per_token=np.asarray(6.0 * parameters), tokens_per_run=tokens, architecture=arch,
                    deadline_seconds=deadline_days * DAY, global_batch_tokens=np.full(1, 4e6))
    # Each scenario its own speed: the step varies by scenario, over too many values for a table each.
    venue = hardware(sustained_flops_per_accelerator=rng.uniform(2e13, 9e13, SCENARIOS),
                     node_mtbf_hours=np.full(1, rng.uniform(2000.0, 20000.0)),
                     memory_bytes=float(rng.choice([40, 80])) * 2.0**30)
    limit = float(rng.integers(16, 600))
    candidates = evaluate_layouts(campaign, venue, node_limits=[np.asarray(limit)])[0]
    assert len(candidates.blocks) == 2 and all(isinstance(b, FiguresOnRead) for b in candidates.blocks)
    found = shapes(accelerators_per_node=8, layers=arch.layers, attention_heads=arch.attention_heads,
                   pins=campaign.pins, zero_stages=campaign.zero_stages)
    names = [f.name for f in fields(LayoutGrid)]
    for block in candidates.blocks:
        full = evaluate_columns(campaign, venue, Columns(block.tensor, block.pipeline, block.nodes,
                                                         block.accelerators, block.origin), found)
        for name in ("fits", "wall_seconds", "accelerator_hours"):  # made for every candidate
            assert np.array_equal(_whole(block, name), _whole(full, name), equal_nan=True), name
        rows, columns = np.arange(SCENARIOS), rng.integers(0, np.shape(block.nodes)[1], SCENARIOS)
        read = block.cells(rows, columns)
        assert not any(cell is block for cell in _closed_over(read))  # the reader holds the cells, not the block
        for name in names:  # made for the cells read
            expected = _whole(full, name)[rows, columns]
            assert np.array_equal(np.broadcast_to(read(name), expected.shape), expected, equal_nan=True), name
        for name in names:  # made for the whole block when read whole
            assert np.array_equal(_whole(block, name), _whole(full, name), equal_nan=True), name
    # The deadline candidates include counts that meet the deadline and counts that do not.
    met = _whole(candidates.blocks[1], "wall_seconds") <= (deadline_days * DAY)[:, np.newaxis]
    assert met.any() and not met.all()


def _closed_over(function: Any) -> list[Any]:
    """Every object a function's closure holds, through the closures of the functions it holds."""
    held, found = [function], []
    while held:
        cells = getattr(held.pop(), "__closure__", None) or ()
        for cell in cells:
            found.append(cell.cell_contents)
            if callable(cell.cell_contents):
                held.append(cell.cell_contents)
    return found


def _whole(grid: LayoutGrid, name: str) -> np.ndarray:
    """A figure of every scenario (SCENARIOS rows) and candidate."""
    return np.broadcast_to(getattr(grid, name), (SCENARIOS, np.shape(grid.nodes)[1]))


@pytest.mark.parametrize("in_passes", [False, True])
@pytest.mark.parametrize("seed", range(8))
def test_the_per_scenario_search_finds_what_a_plain_scan_of_every_rung_finds(
        seed: int, in_passes: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """`own_step.fewest_meeting` measures only what is still open: the scenarios still scanning, the
    shapes some of them have still to meet, and the brackets still open cell by cell. A plain scan
    measures every (scenario, shape) at every rung, and closes every bracket on the whole grid. Both
    must give the same counts, fits and wall clocks, exactly: with each scenario its own speed, with
    the model's size too (each scenario its own rungs), and with deadlines no rung meets; and with the
    search's steps evaluated a few scenarios a pass (`in_passes`, `own_step.STEP_ROWS`)."""
    if in_passes:
        monkeypatch.setattr(own_step, "STEP_ROWS", 4)
    rng = np.random.default_rng(4000 + seed)
    # A model small enough that every shape holds it, so that scenarios with room to spare settle early.
    arch = Architecture(layers=16, d_model=1024.0, sequence_length=1024.0, attention_heads=16.0)
    sizes = np.full(1, float(rng.choice([0.35e9, 1.3e9])))
    if seed % 2:
        sizes = rng.uniform(0.3e9, 2e9, SCENARIOS)
    tokens = rng.lognormal(np.log(20.0 * 13e9), 0.3, SCENARIOS)
    deadline_days = rng.uniform(0.5, 60.0, SCENARIOS)
    deadline_days[:2] = [1e-3, 0.0]  # no rung meets these
    deadline_days[2:12] = 1e5  # every shape that fits meets these at its first rung: they settle early
    campaign = load(parameters=sizes, tokens=tokens, timed_flops_per_run=6.0 * sizes * tokens,
                    timed_flops_per_token=6.0 * sizes, tokens_per_run=tokens, architecture=arch,
                    deadline_seconds=deadline_days * DAY, global_batch_tokens=np.full(1, 4e6))
    venue = hardware(sustained_flops_per_accelerator=rng.uniform(2e13, 9e13, SCENARIOS),
                     node_mtbf_hours=np.full(1, rng.uniform(2000.0, 20000.0)),
                     memory_bytes=float(rng.choice([80, 160])) * 2.0**30)
    calls: list[tuple[Any, ...]] = []

    def kept(*args: Any) -> Any:
        calls.append(args)
        return own_step.fewest_meeting(*args)
    monkeypatch.setattr(layout, "fewest_meeting", kept)
    layout.evaluate_layouts(campaign, venue, node_limits=[np.asarray(float(rng.integers(16, 600)))])
    (args,) = calls
    assert (np.shape(args[4])[0] > 1) == bool(seed % 2)  # rungs per scenario where the model's size varies
    scan, plain_scan = own_step._first_meeting(*args, SCENARIOS), _plain_scan(*args)
    # Some scenarios settle (every shape met) while others still scan: the working rows are compacted.
    last = plain_scan[0].max(axis=1)
    assert (last < last.max()).any()
    for ours, theirs, name in zip(scan, plain_scan, ("first", "w_lo", "w_hi", "kept wall", "kept fits"), strict=True):
        assert np.array_equal(ours, theirs, equal_nan=True), name
    searched, plain = own_step.fewest_meeting(*args), _plain_fewest_meeting(*args)
    for ours, theirs, name in zip(searched, plain, ("counts", "fits", "wall"), strict=True):
        assert np.array_equal(ours, theirs, equal_nan=True), name
    first_rungs = np.asarray(args[4])[..., 0]
    assert (searched[0] > first_rungs).any() and (searched[0] == np.asarray(args[4])[..., -1]).any()


def _plain_scan(campaign: Any, venue: Any, found: Any, deadline_s: np.ndarray, rungs: np.ndarray) -> tuple[Any, ...]:
    """Every (scenario, shape) measured at every rung: the first rung that meets (TABLE_RUNGS where none
    does), the wall clock below it and at it, and at it (else the top) the wall clock and the fit."""
    rows, g = SCENARIOS, guesses.TABLE_RUNGS
    counts = np.broadcast_to(rungs, (rows, found.count, g))
    raw, fits = zip(*(_measured(campaign, venue, found, counts[..., j]) for j in range(g)), strict=True)
    raw, fits = np.stack(raw, axis=-1), np.stack(fits, axis=-1)
    wall = np.where(fits, raw, np.inf)
    meets = wall <= np.reshape(deadline_s, (-1, 1, 1))
    reached = meets.any(axis=-1)
    first = np.where(reached, np.argmax(meets, axis=-1), g)
    at = np.minimum(first, g - 1)[..., np.newaxis]
    w_hi = np.where(reached, _pick(wall, at), np.inf)
    w_lo = np.where(reached & (at[..., 0] > 0), _pick(wall, np.maximum(at - 1, 0)), np.inf)
    return first, w_lo, w_hi, _pick(raw, at), _pick(fits, at)


def _plain_fewest_meeting(campaign: Any, venue: Any, found: Any, deadline_s: np.ndarray,
                          rungs: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The plain scan's bracket closed by `deadline.close_brackets`, measuring every cell at each step."""
    first, w_lo, w_hi, kept_wall, kept_fits = _plain_scan(campaign, venue, found, deadline_s, rungs)
    counts = np.broadcast_to(rungs, (SCENARIOS, found.count, guesses.TABLE_RUNGS))
    at = np.minimum(first, guesses.TABLE_RUNGS - 1)[..., np.newaxis]
    k_lo, k_hi = _pick(counts, np.maximum(at - 1, 0)), _pick(counts, at)

    def every_cell(k: np.ndarray, _: np.ndarray) -> np.ndarray:
        walls, fit = _measured(campaign, venue, found, k)
        return np.where(fit, walls, np.inf)
    target = np.broadcast_to(deadline_s.reshape(-1, 1), k_hi.shape)
    fewest, wall_there = deadline.close_brackets(every_cell, target, k_lo, w_lo, k_hi, w_hi)
    moved = fewest != k_hi
    return (np.where(first < guesses.TABLE_RUNGS, fewest, counts[..., -1]), moved | kept_fits,
            np.where(moved, wall_there, kept_wall))


def _measured(campaign: Any, venue: Any, found: Any, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The wall clock and fit of every (scenario, shape) at k node units ((rows or 1, H))."""
    nodes = k * found.node_unit(8)
    grid = evaluate_columns(campaign, venue, Columns(found.tensor[np.newaxis, :], found.pipeline[np.newaxis, :],
                                                     nodes, nodes * 8, np.full(nodes.shape, DEADLINE)), found)
    shape = (SCENARIOS, found.count)
    return np.broadcast_to(grid.wall_seconds, shape), np.broadcast_to(grid.fits, shape)


def _pick(values: np.ndarray, at: np.ndarray) -> np.ndarray:
    """values[..., at] along the last axis, one entry per (scenario, shape)."""
    return np.take_along_axis(values, at, axis=-1)[..., 0]
