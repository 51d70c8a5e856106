"""The deadline candidate against brute force: for each shape, every node count from the memory
minimum to the node limit evaluated, and the first that meets each scenario's deadline found by a
plain scan. The search (a table of 16 counts, the bracket around the first that meets, closed by
false position and halving) must land on that count, also where failures make the step grow again
with the node count. Demo figures (random campaigns and hardware); no published check value.
"""

import numpy as np
import pytest

from service.domain import deadline
from service.domain.layout import DEADLINE, Architecture, evaluate_layouts
from service.domain.parallelism import shapes
from service.domain.step import Columns, evaluate_columns
from tests.domain.builders import hardware, load

SCENARIOS = 30
DAY = 86400.0


@pytest.mark.parametrize("seed", range(8))
def test_the_deadline_candidate_is_the_first_count_that_meets_the_deadline(seed: int) -> None:
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


@pytest.mark.parametrize("counted_cells", [0, 10**9])
def test_the_first_rung_meeting_each_allowance_is_the_same_counted_or_bisected(
        counted_cells: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """`_first_meeting` counts the rungs above an allowance in one comparison when there are few
    (a single quote) and bisects each shape's running minima when there are many (a sweep): both
    must give the first rung at or below the allowance, found here by a plain scan, including
    layouts that do not fit (inf), allowances equal to a rung, and allowances of inf, -inf and NaN
    (a scenario whose deadline leaves no time)."""
    monkeypatch.setattr(deadline, "COUNTED_CELLS", counted_cells)
    rng = np.random.default_rng(7)
    g = rng.uniform(1.0, 100.0, (6, deadline.TABLE_RUNGS))
    g[rng.random(g.shape) < 0.25] = np.inf
    g[5] = np.inf  # a shape that never fits
    prefix = np.minimum.accumulate(g, axis=1)
    afforded = np.unique(np.concatenate([rng.uniform(0.0, 120.0, 40), prefix[np.isfinite(prefix)][:12],
                                         [np.inf, -np.inf, np.nan]]))
    expected = [[next((j for j in range(deadline.TABLE_RUNGS) if prefix[i, j] <= a), deadline.TABLE_RUNGS)
                 for a in afforded] for i in range(prefix.shape[0])]
    assert deadline._first_meeting(prefix, afforded).tolist() == expected
