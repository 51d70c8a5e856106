"""Layout search: every node count a venue allows, evaluated as one array (model.md §5).

Scenarios run along axis 0 and candidate node counts along axis 1, so for S scenarios and K
counts every quantity is an (S, K) array; `choose` then keeps one column per scenario.
"""

from dataclasses import dataclass, fields
from functools import cached_property
from typing import Any

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, Ints, as_floats, broadcast, largest_count
from service.domain.assumptions import default
from service.domain.campaign import Parallelism, Recompute
from service.domain.memory import activation_bytes_per_layer, model_state_bytes, usable_bytes
from service.domain.reliability import (
    checkpoint_write_seconds,
    daly_interval,
    expected_wall_fraction,
    job_mtbi_seconds,
)
from service.domain.scaling import (
    bandwidth_per_accelerator,
    network_gbps_for_efficiency,
    ring_allreduce_bytes,
    sharded_step_bytes,
    step_timing,
)
from service.domain.units import SECONDS_PER_HOUR


@dataclass(frozen=True)
class Load:
    """What the campaign asks of any venue; arrays of one element per scenario."""

    timed_flops_per_run: Floats
    timed_flops_per_token: Floats | None
    runs_multiplier: Floats
    parameters: Floats | None
    tokens_per_run: Floats | None
    global_batch_tokens: Floats
    architecture_activation_bytes: Floats | None  # per accelerator, when the architecture is known
    checkpoint_bytes: Floats | None
    recompute: Recompute
    parallelism: Parallelism
    deadline_seconds: Floats  # inf when there is no deadline
    restart_seconds: float


@dataclass(frozen=True)
class Hardware:
    """What a venue offers the campaign; arrays broadcast over scenarios."""

    accelerators_per_node: int
    memory_bytes: float
    sustained_flops_per_accelerator: Floats
    intra_node_gbps: float
    network_gbps: Floats
    path_efficiency: float
    checkpoint_write_gbps: float
    node_mtbf_hours: Floats  # inf when failures are not modelled
    interruption_mean_hours: float  # inf unless interruptible
    staging_seconds: Floats  # time to bring the data in before training starts


@dataclass(frozen=True)
class LayoutGrid:
    """Every figure of every candidate layout: arrays that broadcast to (S, K) (a figure that does
    not vary by scenario is (1, K), one that does not vary by layout (S, 1))."""

    nodes: Floats
    accelerators: Floats
    sharded: Bools
    shards: Floats
    state_bytes: Floats
    activation_bytes: Floats
    fits: Bools
    step_seconds: Floats
    scaling_efficiency: Floats
    exposed_fraction: Floats
    network_gbps_needed: Floats
    failure_overhead: Floats
    checkpoint_interval_seconds: Floats
    wall_seconds: Floats
    accelerator_hours: Floats

    @cached_property
    def wall_hours(self) -> Floats:
        """Wall clock in hours, computed once: every term's cost lines use it."""
        return np.asarray(self.wall_seconds / SECONDS_PER_HOUR)


def candidate_nodes(*, node_limit: ArrayLike, fixed_accelerators: int | None,
                    accelerators_per_node: int) -> Floats:
    """Node counts to evaluate: 1 to the largest limit of any scenario, or the pinned count."""
    if fixed_accelerators is not None:
        return np.array([float(np.ceil(fixed_accelerators / accelerators_per_node))])
    return np.arange(1.0, largest_count(node_limit) + 1.0)


def evaluate_layouts(
    load: Load, hardware: Hardware, nodes: Floats, *, fixed_accelerators: int | None = None
) -> LayoutGrid:
    """Memory, step time, failures and wall clock of each candidate node count."""
    column = np.asarray(nodes, dtype=np.float64)[np.newaxis, :]
    per_node = hardware.accelerators_per_node
    accelerators = column * per_node
    if fixed_accelerators is not None:
        accelerators = np.minimum(accelerators, float(fixed_accelerators))

    def scenario(value: ArrayLike) -> Floats:
        return as_floats(value).reshape(-1, 1)

    memory = float(hardware.memory_bytes)
    if load.architecture_activation_bytes is None:
        activation = scenario(default("activation_reserve_fraction") * memory)
    else:
        activation = scenario(load.architecture_activation_bytes)
    params = scenario(0.0) if load.parameters is None else scenario(load.parameters)
    replicated_state = model_state_bytes(parameters=params, shards=1.0)
    replicated_fits = replicated_state + activation <= usable_bytes(memory)
    if load.parallelism == "replicated":
        sharded = np.zeros(np.broadcast_shapes(replicated_fits.shape, accelerators.shape), bool)
    elif load.parallelism == "sharded":
        sharded = np.ones(np.broadcast_shapes(replicated_fits.shape, accelerators.shape), bool)
    else:
        sharded = np.broadcast_to(~replicated_fits, np.broadcast_shapes(
            replicated_fits.shape, accelerators.shape))
    shards = np.where(sharded, accelerators, 1.0)
    state = model_state_bytes(parameters=params, shards=shards)
    fits = state + activation <= usable_bytes(memory)

    gradient_payload = default("gradient_bytes_per_parameter") * params
    communication = np.where(
        sharded,
        sharded_step_bytes(payload_bytes=gradient_payload, ranks=accelerators),
        ring_allreduce_bytes(payload_bytes=gradient_payload, ranks=accelerators),
    )
    if load.tokens_per_run is None or load.timed_flops_per_token is None:
        steps_per_run = scenario(1.0)  # no batch structure known: one step, no communication
        flops_per_step = scenario(load.timed_flops_per_run)
    else:
        # A step trains one global batch; a run of fewer tokens counts as that fraction of a step.
        steps_per_run = scenario(load.tokens_per_run) / scenario(load.global_batch_tokens)
        flops_per_step = scenario(load.timed_flops_per_token) * scenario(load.global_batch_tokens)
    path = hardware.path_efficiency
    bandwidth = bandwidth_per_accelerator(
        nodes=column,
        accelerators_per_node=accelerators / column,
        intra_node_gbps=hardware.intra_node_gbps,
        network_gbps=scenario(hardware.network_gbps),
        path_efficiency=path,
    )
    overlap = default("communication_overlap")
    timing = step_timing(
        flops_per_step=flops_per_step,
        accelerators=accelerators,
        sustained_flops_per_accelerator=scenario(hardware.sustained_flops_per_accelerator),
        communication_bytes=communication,
        bandwidth_bytes_per_second=bandwidth,
        overlap=overlap,
    )
    needed = network_gbps_for_efficiency(
        target_efficiency=default("target_scaling_efficiency"),
        compute_seconds=timing.compute_seconds,
        communication_bytes=communication,
        overlap=overlap,
        accelerators_per_node=accelerators / column,
        path_efficiency=path,
    )
    needed = np.where(column > 1.0, needed, np.nan)

    mtbi = job_mtbi_seconds(
        nodes=column,
        node_mtbf_hours=scenario(hardware.node_mtbf_hours),
        interruption_mean_hours=hardware.interruption_mean_hours,
    )
    checkpoint_bytes = (
        default("bytes_per_parameter_model_states") * params
        if load.checkpoint_bytes is None
        else scenario(load.checkpoint_bytes)
    )
    delta = checkpoint_write_seconds(
        checkpoint_bytes=checkpoint_bytes, nodes=column, write_gbps_per_node=hardware.checkpoint_write_gbps
    )
    interval = daly_interval(checkpoint_seconds=delta, mtbi_seconds=mtbi)
    wall_fraction = expected_wall_fraction(
        interval_seconds=interval,
        checkpoint_seconds=delta,
        restart_seconds=load.restart_seconds,
        mtbi_seconds=mtbi,
    )
    # Scenario factors times layout factors: one pass over the (S, K) grid instead of three.
    wall = ((steps_per_run * scenario(load.runs_multiplier)) * (timing.step_seconds * wall_fraction)
            + scenario(hardware.staging_seconds))
    return LayoutGrid(
        nodes=column,
        accelerators=accelerators,
        sharded=sharded,
        shards=shards,
        state_bytes=state,
        activation_bytes=activation,
        fits=fits,
        step_seconds=timing.step_seconds,
        scaling_efficiency=timing.scaling_efficiency,
        exposed_fraction=timing.exposed_fraction,
        network_gbps_needed=needed,
        failure_overhead=wall_fraction - 1.0,
        checkpoint_interval_seconds=np.where(np.isfinite(interval), interval, np.nan),
        wall_seconds=wall,
        accelerator_hours=wall * (accelerators / SECONDS_PER_HOUR),
    )


@dataclass(frozen=True)
class Eligible:
    """Which candidate layouts a term may take: those that hold the model within its node limit,
    and of them those that meet the deadline. Terms of a venue with one limit share it."""

    allowed: Bools  # (R, K), R = 1 or S
    meets: Bools  # (R, K)
    any_fits: Bools  # (R,): some layout within the limit holds the model
    meets_deadline: Bools  # (R,)
    fastest: Ints | None  # (R,): the fastest allowed layout; None when every row meets the deadline


def eligible(grid: LayoutGrid, *, node_limit: ArrayLike, deadline_seconds: ArrayLike) -> Eligible:
    limit = as_floats(node_limit).reshape(-1, 1)
    deadline = as_floats(deadline_seconds).reshape(-1, 1)
    # Every input may vary by scenario or not: settle on one shape for all of them.
    shape = np.broadcast_shapes(grid.wall_seconds.shape, grid.fits.shape, grid.nodes.shape, limit.shape,
                                deadline.shape)
    allowed = np.broadcast_to(grid.fits & (grid.nodes <= limit), shape)
    meets = allowed & (grid.wall_seconds <= deadline)
    meets_deadline = np.asarray(meets.any(axis=1))
    # The fallback layout is needed only where nothing meets the deadline, which is rare.
    fastest = None if meets_deadline.all() else np.argmin(np.where(allowed, grid.wall_seconds, np.inf), axis=1)
    return Eligible(allowed, meets, np.asarray(allowed.any(axis=1)), meets_deadline, fastest)


@dataclass(frozen=True)
class Choice:
    """The column kept for each scenario and why: (S,) arrays."""

    index: Ints
    any_fits: Bools
    meets_deadline: Bools


def choose(layouts: Eligible, cost: Floats) -> Choice:
    """Per scenario, the cheapest layout that meets the deadline; when none meets it, the fastest
    layout that fits (reported as missing the deadline)."""
    cheapest = np.argmin(np.where(layouts.meets, cost, np.inf), axis=1)
    index = cheapest if layouts.fastest is None else np.where(layouts.meets_deadline, cheapest, layouts.fastest)
    scenarios = (max(index.shape[0], np.shape(cost)[0]),)
    return Choice(
        index=broadcast(index, scenarios).astype(np.int64, copy=False),
        any_fits=broadcast(layouts.any_fits, scenarios),
        meets_deadline=broadcast(layouts.meets_deadline, scenarios),
    )


class Picker:
    """The chosen column per scenario of arrays that broadcast to (S, K), as (S,) arrays of the
    same dtype (indexing, not broadcasting, so size-1 axes cost nothing)."""

    def __init__(self, index: Ints) -> None:
        self.index = index
        self._every_row = np.arange(index.shape[0])
        self._first = np.zeros_like(index)

    def __call__(self, values: ArrayLike) -> Any:
        array = np.asarray(values)
        if array.ndim < 2:
            return np.broadcast_to(array, self.index.shape).copy()
        rows = self._every_row if array.shape[0] > 1 else self._first
        columns = self.index if array.shape[1] > 1 else self._first
        return array[rows, columns]

    def grid(self, grid: LayoutGrid) -> LayoutGrid:
        """Every field of the grid at the chosen column: (S,) arrays."""
        return LayoutGrid(**{f.name: self(getattr(grid, f.name)) for f in fields(grid)})


def first_columns(grid: LayoutGrid, count: int) -> LayoutGrid:
    """The grid's first `count` candidate node counts (views, no copies)."""
    if count >= grid.nodes.shape[-1]:
        return grid

    def head(values: Any) -> Any:
        return values[:, :count] if np.ndim(values) == 2 and np.shape(values)[1] > count else values
    return LayoutGrid(**{f.name: head(getattr(grid, f.name)) for f in fields(grid)})


def as_column(grid: LayoutGrid) -> LayoutGrid:
    """A chosen layout ((S,) arrays) as a grid of one candidate per scenario, (S, 1), so the
    grid formulas apply to it unchanged."""
    return LayoutGrid(**{f.name: np.asarray(getattr(grid, f.name))[:, np.newaxis] for f in fields(grid)})


def architecture_activation_bytes(
    *, layers: ArrayLike, sequence_length: ArrayLike, d_model: ArrayLike,
    attention_heads: ArrayLike, micro_batch: ArrayLike, recompute: Recompute,
) -> Floats:
    """Activation bytes per accelerator with no model parallelism: every layer's activations
    (Korthikanti et al. 2022, Eq. 1) for one micro-batch."""
    return as_floats(layers) * activation_bytes_per_layer(
        sequence_length=sequence_length,
        micro_batch=micro_batch,
        d_model=d_model,
        attention_heads=attention_heads,
        recompute=recompute,
    )
