"""Layout search: every node count a venue allows, evaluated as one array (model.md §5).

Scenarios run along axis 0 and candidate node counts along axis 1, so for S scenarios and K
counts every quantity is an (S, K) array; `choose` then keeps one column per scenario.
"""

from dataclasses import dataclass, fields
from functools import cached_property
from typing import Any

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, Ints, as_floats
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
    top = float(np.nanmax(np.maximum(as_floats(node_limit), 1.0)))
    return np.arange(1.0, top + 1.0)


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
    solve_seconds = steps_per_run * scenario(load.runs_multiplier) * timing.step_seconds
    wall = solve_seconds * wall_fraction + scenario(hardware.staging_seconds)
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
        accelerator_hours=accelerators * wall / SECONDS_PER_HOUR,
    )


@dataclass(frozen=True)
class Choice:
    """The column kept for each scenario and why."""

    index: Ints
    any_fits: Bools  # some layout within the limit holds the model
    meets_deadline: Bools


def choose(grid: LayoutGrid, cost: Floats, *, node_limit: ArrayLike, deadline_seconds: ArrayLike) -> Choice:
    """Per scenario, the cheapest layout within the limit that meets the deadline; when none
    meets it, the fastest layout that fits (reported as missing the deadline)."""
    limit = as_floats(node_limit).reshape(-1, 1)
    deadline = as_floats(deadline_seconds).reshape(-1, 1)
    # Every input may vary by scenario or not: settle on the full (S, K) shape once.
    shape = np.broadcast_shapes(np.shape(cost), grid.wall_seconds.shape, grid.fits.shape, grid.nodes.shape,
                                limit.shape, deadline.shape)
    allowed = np.broadcast_to(grid.fits & (grid.nodes <= limit), shape)
    wall = np.broadcast_to(grid.wall_seconds, shape)
    meets = allowed & (wall <= deadline)
    any_meets = meets.any(axis=1)
    cheapest = np.argmin(np.where(meets, cost, np.inf), axis=1)
    fastest = np.argmin(np.where(allowed, wall, np.inf), axis=1)
    return Choice(
        index=np.where(any_meets, cheapest, fastest).astype(np.int64),
        any_fits=np.asarray(allowed.any(axis=1)),
        meets_deadline=np.asarray(any_meets),
    )


def pick(values: ArrayLike, index: Ints) -> Any:
    """The chosen column per scenario of an array that broadcasts to (S, K), as an (S,) array of
    the same dtype (indexing, not broadcasting, so size-1 axes cost nothing)."""
    array = np.asarray(values)
    if array.ndim < 2:
        return np.broadcast_to(array, index.shape).copy()
    rows = np.arange(index.shape[0]) if array.shape[0] > 1 else np.zeros_like(index)
    columns = index if array.shape[1] > 1 else np.zeros_like(index)
    return array[rows, columns]


def pick_grid(grid: LayoutGrid, index: Ints) -> LayoutGrid:
    """Every field of the grid at the chosen column: (S,) arrays."""
    return LayoutGrid(**{f.name: pick(getattr(grid, f.name), index) for f in fields(grid)})


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
