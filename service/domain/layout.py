"""Layout search: a bounded set of (tensor, pipeline, data) layouts per venue, evaluated as one array
(model.md §2, §3, §5).

Scenarios run along axis 0 and candidate layouts along axis 1, so for S scenarios and K candidates
every quantity is an (S, K) array (a figure that does not vary by scenario is (1, K)); `choose` then
keeps one column per scenario. The candidates are, for each shape (t, p) of `parallelism.shapes`,
the fewest nodes that hold the model, the most each node limit allows, and the fewest that meet the
deadline (found by false position on wall = α/k + β): a handful per shape whatever the venue's size.
"""

from collections.abc import Sequence
from dataclasses import dataclass, fields
from functools import cached_property
from typing import Any

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, Ints, as_floats
from service.domain.assumptions import default
from service.domain.campaign import (
    LayoutPins,
    Parallelism,
    Recompute,
)
from service.domain.memory import (
    activation_bytes_per_layer,
    micro_batches_in_flight,
    minimum_data_parallel,
    parameters_per_model_rank,
    usable_bytes,
    zero_model_state_bytes,
)
from service.domain.parallelism import Shapes, shapes
from service.domain.reliability import (
    checkpoint_write_seconds,
    daly_interval,
    expected_wall_fraction,
    job_mtbi_seconds,
)
from service.domain.scaling import (
    exposed,
    hierarchical_allreduce,
    network_gbps_for_efficiency,
    node_link_bytes_per_second,
    pipeline_traffic,
    tensor_parallel_traffic,
)
from service.domain.units import SECONDS_PER_HOUR, gbps_to_bytes_per_second

# Why a candidate is in the set (`LayoutGrid.origin`): what decided the layout when it is chosen.
MEMORY, NODE_LIMIT, DEADLINE, PINNED = 0, 1, 2, 3
DEADLINE_ITERATIONS = 4  # false-position steps towards the fewest nodes that meet the deadline


@dataclass(frozen=True)
class Architecture:
    """The transformer's shape, when the request gives it."""

    layers: int
    d_model: float
    sequence_length: float
    attention_heads: float


@dataclass(frozen=True)
class Load:
    """What the campaign asks of any venue; arrays of one element per scenario."""

    timed_flops_per_run: Floats
    timed_flops_per_token: Floats | None
    runs_multiplier: Floats
    parameters: Floats | None
    tokens_per_run: Floats | None
    global_batch_tokens: Floats
    architecture: Architecture | None
    micro_batch: float
    checkpoint_bytes: Floats | None
    recompute: Recompute
    parallelism: Parallelism
    pins: LayoutPins
    deadline_seconds: Floats  # inf when there is no deadline
    restart_seconds: float

    @property
    def zero_stages(self) -> tuple[int, ...]:
        """ZeRO stages the shorthand allows: replicated keeps every state on each replica,
        sharded shards them all (stage 3), auto tries each."""
        return {"replicated": (0,), "sharded": (3,)}.get(self.parallelism, (0, 1, 2, 3))


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
    storage_write_gbps: float
    node_mtbf_hours: Floats  # inf when failures are not modelled
    interruption_mean_hours: float  # inf unless interruptible
    staging_seconds: Floats  # time to bring the data in before training starts


@dataclass(frozen=True)
class LayoutGrid:
    """Every figure of every candidate layout: arrays that broadcast to (S, K)."""

    nodes: Floats
    accelerators: Floats
    tensor: Floats
    pipeline: Floats
    data: Floats
    zero_stage: Ints
    micro_batch: Floats
    micro_batches: Floats
    sequence_parallel: Bools
    pipeline_chunks: Floats
    origin: Ints
    state_bytes: Floats
    activation_bytes: Floats
    fits: Bools
    compute_seconds: Floats  # the ideal step: FLOPs over sustained speed, no bubble, no communication
    bubble_seconds: Floats
    tensor_seconds: Floats
    pipeline_seconds: Floats
    data_seconds: Floats
    data_exposed_seconds: Floats
    step_seconds: Floats
    scaling_efficiency: Floats
    exposed_fraction: Floats
    network_gbps_needed: Floats
    failure_overhead: Floats
    checkpoint_seconds: Floats
    checkpoint_interval_seconds: Floats
    wall_seconds: Floats
    accelerator_hours: Floats

    @cached_property
    def wall_hours(self) -> Floats:
        """Wall clock in hours, computed once: every term's cost lines use it."""
        return np.asarray(self.wall_seconds / SECONDS_PER_HOUR)


@dataclass(frozen=True)
class Columns:
    """Candidate layouts before evaluation: arrays that broadcast to (S, K)."""

    tensor: Floats
    pipeline: Floats
    nodes: Floats
    accelerators: Floats
    origin: Ints


def evaluate_layouts(load: Load, hardware: Hardware, *, node_limits: Sequence[ArrayLike],
                     fixed_accelerators: int | None = None) -> tuple[LayoutGrid, Floats]:
    """Every candidate layout of the venue, and the fewest nodes any layout needs to hold the
    model (inf when none can): the memory minimum the screens report."""
    per_node = hardware.accelerators_per_node
    found = _shapes(load, per_node, fixed_accelerators=None)
    unit = found.node_unit(per_node)[np.newaxis, :]
    k_min = _minimum_units(load, hardware, found, unit)
    fewest = np.asarray(np.min(k_min * unit, axis=1))
    if fixed_accelerators is not None:
        found = _shapes(load, per_node, fixed_accelerators=fixed_accelerators)
        tensor = found.tensor[np.newaxis, :]
        count = float(fixed_accelerators)
        nodes = np.full_like(tensor, np.ceil(count / per_node))
        pinned = Columns(tensor, found.pipeline[np.newaxis, :], nodes, np.full_like(tensor, count),
                         np.full(tensor.shape, PINNED))
        return _physics(load, hardware, pinned, found), fewest
    tensor, pipeline = found.tensor[np.newaxis, :], found.pipeline[np.newaxis, :]
    k_min = np.where(np.isfinite(k_min), k_min, 1.0)  # evaluated all the same; it will not fit
    k_batch = _batch_units(load, hardware, found, unit)
    tops = [np.maximum(np.minimum(np.floor(as_floats(limit).reshape(-1, 1) / unit + 1e-9), k_batch), 1.0)
            for limit in node_limits]
    k_top = np.maximum.reduce(np.broadcast_arrays(*tops))
    k_top = np.where(np.isfinite(k_top), k_top, k_min)

    def columns(k: Floats, origin: int) -> Columns:
        nodes = k * unit
        return Columns(tensor, pipeline, nodes, nodes * per_node, np.full(np.shape(nodes), origin))

    grids = [_physics(load, hardware, columns(k_min, MEMORY), found)]
    grids += [_physics(load, hardware, columns(top, NODE_LIMIT), found) for top in tops]
    deadline = as_floats(load.deadline_seconds).reshape(-1, 1)
    if np.isfinite(deadline).any():
        top_grid = grids[1] if len(tops) == 1 else _physics(load, hardware, columns(k_top, NODE_LIMIT), found)
        k_met = _fewest_meeting(load, hardware, found, columns, deadline,
                                low=(k_min, grids[0].wall_seconds), high=(k_top, top_grid.wall_seconds))
        grids.append(_physics(load, hardware, columns(k_met, DEADLINE), found))
    return concatenate(grids), fewest


def _shapes(load: Load, accelerators_per_node: int, *, fixed_accelerators: int | None) -> Shapes:
    arch = load.architecture
    return shapes(accelerators_per_node=accelerators_per_node, layers=None if arch is None else arch.layers,
                  attention_heads=None if arch is None else arch.attention_heads, pins=load.pins,
                  zero_stages=load.zero_stages, fixed_accelerators=fixed_accelerators)


def _fewest_meeting(load: Load, hardware: Hardware, found: Shapes, columns: Any, deadline: Floats, *,
                    low: tuple[Floats, Floats], high: tuple[Floats, Floats]) -> Floats:
    """Per shape, the fewest node units that meet the deadline, by false position on
    wall(k) = α/k + β between a bracket that misses it and one that meets it; the count that
    meets it where the smallest already does, the largest where none does."""
    k_lo, w_lo = (np.asarray(v, dtype=np.float64) for v in np.broadcast_arrays(*low))
    k_hi, w_hi = (np.asarray(v, dtype=np.float64) for v in np.broadcast_arrays(*high))
    shape = np.broadcast_shapes(k_lo.shape, k_hi.shape, deadline.shape)
    k_lo, w_lo, k_hi, w_hi = (np.broadcast_to(v, shape).copy() for v in (k_lo, w_lo, k_hi, w_hi))
    met_at_low = w_lo <= deadline
    for _ in range(DEADLINE_ITERATIONS):
        open_bracket = (k_hi - k_lo > 1.0) & (w_lo > deadline) & (w_hi <= deadline)
        if not open_bracket.any():
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            alpha = (w_lo - w_hi) / (1.0 / k_lo - 1.0 / k_hi)
            beta = w_hi - alpha / k_hi
            guess = np.ceil(alpha / (deadline - beta) - 1e-9)
        guess = np.clip(np.where(np.isnan(guess), k_hi - 1.0, guess), k_lo + 1.0, k_hi - 1.0)
        guess = np.where(open_bracket, guess, k_hi)
        wall = np.broadcast_to(_physics(load, hardware, columns(guess, DEADLINE), found).wall_seconds, shape)
        meets = wall <= deadline
        k_hi, w_hi = np.where(open_bracket & meets, guess, k_hi), np.where(open_bracket & meets, wall, w_hi)
        k_lo, w_lo = np.where(open_bracket & ~meets, guess, k_lo), np.where(open_bracket & ~meets, wall, w_lo)
    return np.asarray(np.where(met_at_low, k_lo, k_hi))


def _minimum_units(load: Load, hardware: Hardware, found: Shapes, unit: Floats) -> Floats:
    """Per scenario and shape, the fewest node units whose replicas hold the model at the most
    sharded ZeRO stage allowed (stages 2 and 3 only without pipelining, as gradient accumulation
    across micro-batches needs whole gradients); inf when no count does. Activations are taken
    at p micro-batches in flight, an upper bound."""
    tensor, pipeline = found.tensor[np.newaxis, :], found.pipeline[np.newaxis, :]
    psi = _rank_parameters(load, tensor, pipeline)
    activation = _activations(load, hardware, tensor, pipeline, in_flight=pipeline)
    best = np.full(np.broadcast_shapes(psi.shape, np.shape(activation)), np.inf)
    for stage in found.zero_stages:
        needed = minimum_data_parallel(parameters_per_rank=psi, activation_bytes=activation,
                                       memory_bytes=hardware.memory_bytes, stage=stage)
        allowed = (pipeline == 1.0) | (stage <= 1)
        best = np.minimum(best, np.where(allowed, needed, np.inf))
    per_unit = unit * hardware.accelerators_per_node / (tensor * pipeline)  # replicas per node unit
    return np.asarray(np.maximum(1.0, np.ceil(best / per_unit - 1e-9)))


def _batch_units(load: Load, hardware: Hardware, found: Shapes, unit: Floats) -> Floats:
    """The most node units whose replicas each still get a whole micro-batch: d·b ≤ batch."""
    sequences = _batch_sequences(load)
    if sequences is None:
        return np.asarray(np.inf)
    per_unit = unit * hardware.accelerators_per_node / (found.tensor * found.pipeline)[np.newaxis, :]
    return np.asarray(np.maximum(1.0, np.floor(sequences / (load.micro_batch * per_unit) + 1e-9)))


def _batch_sequences(load: Load) -> Floats | None:
    if load.architecture is None:
        return None
    return np.asarray(as_floats(load.global_batch_tokens).reshape(-1, 1) / load.architecture.sequence_length)


def _rank_parameters(load: Load, tensor: Floats, pipeline: Floats) -> Floats:
    parameters = 0.0 if load.parameters is None else as_floats(load.parameters).reshape(-1, 1)
    return parameters_per_model_rank(parameters=parameters, tensor=tensor, pipeline=pipeline)


def _sequence_parallel(load: Load, tensor: Floats) -> Bools:
    """Sequence parallelism alongside tensor parallelism unless the request turns it off: it
    only saves memory (Korthikanti et al. 2022, §4.2.2: same communication volume)."""
    wanted = True if load.pins.sequence_parallel is None else load.pins.sequence_parallel
    return np.asarray((tensor > 1.0) & wanted)


def _activations(load: Load, hardware: Hardware, tensor: Floats, pipeline: Floats, *, in_flight: ArrayLike) -> Floats:
    """Activation bytes per accelerator: the stage's L/p layers for each micro-batch in flight;
    without an architecture, a reserved share of memory."""
    arch = load.architecture
    if arch is None:
        return np.asarray(default("activation_reserve_fraction") * hardware.memory_bytes)
    per_layer = activation_bytes_per_layer(
        sequence_length=arch.sequence_length, micro_batch=load.micro_batch, d_model=arch.d_model,
        attention_heads=arch.attention_heads, recompute=load.recompute, tensor=tensor,
        sequence_parallel=_sequence_parallel(load, tensor))
    return np.asarray(per_layer * (arch.layers / pipeline) * as_floats(in_flight))


def _physics(load: Load, hardware: Hardware, c: Columns, found: Shapes) -> LayoutGrid:
    """Memory, step time, failures and wall clock of each candidate column."""
    per_node = hardware.accelerators_per_node
    t, p, nodes, accelerators = c.tensor, c.pipeline, c.nodes, c.accelerators
    data = accelerators / (t * p)
    b = load.micro_batch
    sequences = _batch_sequences(load)
    micro_batches = np.asarray(1.0) if sequences is None else np.asarray(sequences / (b * data))
    chunks = float(load.pins.pipeline_chunks or 1)

    # Memory: the lowest allowed ZeRO stage that holds the states beside the activations.
    psi = _rank_parameters(load, t, p)
    activation = _activations(load, hardware, t, p,
                              in_flight=micro_batches_in_flight(pipeline=p, micro_batches=micro_batches))
    room = usable_bytes(hardware.memory_bytes) - activation
    stage = np.full(np.broadcast_shapes(psi.shape, data.shape, room.shape), found.zero_stages[-1], dtype=np.int64)
    chosen = np.zeros(stage.shape, dtype=bool)
    for z in found.zero_stages:
        holds = (zero_model_state_bytes(parameters=psi, data_parallel=data, stage=z) <= room) & ((p == 1.0) | (z <= 1))
        stage = np.where(~chosen & holds, z, stage)
        chosen |= holds
    state = zero_model_state_bytes(parameters=psi, data_parallel=data, stage=stage)
    fits = chosen & (micro_batches >= 1.0 - 1e-9) & (data >= 1.0 - 1e-9)

    # Compute, bubble and each collective (model.md §3).
    flops_per_step, steps_per_run = _step_work(load)
    compute = flops_per_step / (accelerators * as_floats(hardware.sustained_flops_per_accelerator).reshape(-1, 1))
    bubble = compute * (p - 1.0) / (chunks * micro_batches)
    in_node = np.minimum(float(per_node), accelerators)
    inside = gbps_to_bytes_per_second(hardware.intra_node_gbps)
    link = node_link_bytes_per_second(network_gbps=as_floats(hardware.network_gbps).reshape(-1, 1),
                                      path_efficiency=hardware.path_efficiency)
    alpha_in, alpha_out = default("latency_intra_node_us") * 1e-6, default("latency_inter_node_us") * 1e-6
    message = 0.0 if load.architecture is None else (
        2.0 * b * load.architecture.sequence_length * load.architecture.d_model)
    layers = 1.0 if load.architecture is None else load.architecture.layers
    tp = tensor_parallel_traffic(message_bytes=message, tensor=t, layers=layers / p, micro_batches=micro_batches,
                                 recompute=load.recompute)
    tensor_seconds = tp.intra_bytes / inside + tp.intra_steps * alpha_in
    across = np.where(nodes > 1.0, np.minimum(1.0, t * data / per_node), 0.0)
    pp = pipeline_traffic(message_bytes=message, tensor=t, stages=p, micro_batches=micro_batches, chunks=chunks,
                          ranks_per_node=in_node, crossing_fraction=across)
    pipeline_fixed = pp.intra_bytes / inside + pp.intra_steps * alpha_in + pp.inter_steps * alpha_out
    pipeline_seconds = pipeline_fixed + pp.inter_bytes / link
    members = np.minimum(data, np.maximum(in_node / t, 1.0))  # a data group's ranks in one node
    dp = hierarchical_allreduce(
        payload_bytes=default("gradient_bytes_per_parameter") * psi, ranks_per_node=members,
        nodes=np.maximum(data / members, 1.0), groups_per_node=in_node / members,
        volumes=np.where(stage == 3, 3.0 * micro_batches, 2.0), pieces=np.where(stage == 3, layers / p, 1.0))
    data_fixed = dp.intra_bytes / inside + dp.intra_steps * alpha_in + dp.inter_steps * alpha_out
    data_seconds = data_fixed + dp.inter_bytes / link
    # Overlap per collective: tensor-parallel and pipeline sends sit on the critical path; the
    # gradient reduction of stages 0-2 hides behind the last micro-batch's backward pass (2/3 of
    # its compute); ZeRO-3's gathers are prefetched behind every micro-batch.
    overlap = default("communication_overlap")
    hidden = overlap * np.where(stage == 3, compute, (2.0 / 3.0) * compute / micro_batches)
    data_exposed = exposed(data_seconds, hidden)
    step = compute + bubble + tensor_seconds + pipeline_seconds + data_exposed
    without_link = compute + bubble + tensor_seconds + pipeline_fixed + exposed(data_fixed, hidden)
    needed = network_gbps_for_efficiency(
        target_efficiency=default("target_scaling_efficiency"), step_without_link_seconds=without_link,
        exposed_only_bytes=pp.inter_bytes, overlapped_bytes=dp.inter_bytes, overlapped_other_seconds=data_fixed,
        hidden_behind_seconds=hidden, path_efficiency=hardware.path_efficiency)

    # Failures and checkpoints (model.md §4), then the wall clock (§5).
    mtbi = job_mtbi_seconds(nodes=nodes, node_mtbf_hours=as_floats(hardware.node_mtbf_hours).reshape(-1, 1),
                            interruption_mean_hours=hardware.interruption_mean_hours)
    checkpoint_bytes = (default("bytes_per_parameter_model_states") * _rank_parameters(load, np.ones(1), np.ones(1))
                        if load.checkpoint_bytes is None else as_floats(load.checkpoint_bytes).reshape(-1, 1))
    delta = checkpoint_write_seconds(checkpoint_bytes=checkpoint_bytes, nodes=nodes,
                                     write_gbps_per_node=hardware.checkpoint_write_gbps,
                                     storage_write_gbps=hardware.storage_write_gbps)
    interval = daly_interval(checkpoint_seconds=delta, mtbi_seconds=mtbi)
    wall_fraction = expected_wall_fraction(interval_seconds=interval, checkpoint_seconds=delta,
                                           restart_seconds=load.restart_seconds, mtbi_seconds=mtbi)
    scenario = (steps_per_run * as_floats(load.runs_multiplier).reshape(-1, 1))
    wall = scenario * (step * wall_fraction) + as_floats(hardware.staging_seconds).reshape(-1, 1)
    values: dict[str, Any] = dict(
        nodes=nodes, accelerators=accelerators, tensor=t, pipeline=p, data=data, zero_stage=stage,
        micro_batch=np.asarray(float(b)), micro_batches=micro_batches,
        sequence_parallel=_sequence_parallel(load, t), pipeline_chunks=np.asarray(chunks), origin=c.origin,
        state_bytes=state, activation_bytes=activation, fits=fits, compute_seconds=compute,
        bubble_seconds=bubble, tensor_seconds=tensor_seconds, pipeline_seconds=pipeline_seconds,
        data_seconds=data_seconds, data_exposed_seconds=data_exposed, step_seconds=step,
        scaling_efficiency=compute / step, exposed_fraction=(step - compute - bubble) / step,
        network_gbps_needed=np.where(nodes > 1.0, needed, np.nan), failure_overhead=wall_fraction - 1.0,
        checkpoint_seconds=delta, checkpoint_interval_seconds=np.where(np.isfinite(interval), interval, np.nan),
        wall_seconds=wall, accelerator_hours=wall * (accelerators / SECONDS_PER_HOUR),
    )
    columns = np.shape(nodes)[1]
    return LayoutGrid(**{name: _two_d(value, columns) for name, value in values.items()})


def _two_d(value: Any, columns: int) -> Any:
    """A figure as an (R, K) array, R = 1 when it does not vary by scenario: a scalar is one value
    for all, a 1-D array one value per scenario."""
    array = np.asarray(value)
    if array.ndim < 2:
        array = array.reshape(-1, 1)
    return array if array.shape[1] == columns else np.broadcast_to(array, (array.shape[0], columns))


def _step_work(load: Load) -> tuple[Floats, Floats]:
    """(timed FLOPs per optimiser step, steps per run): a step trains one global batch, and a run of
    fewer tokens counts as that fraction of a step; without tokens, one step."""
    if load.tokens_per_run is None or load.timed_flops_per_token is None:
        return as_floats(load.timed_flops_per_run).reshape(-1, 1), np.ones((1, 1))
    batch = as_floats(load.global_batch_tokens).reshape(-1, 1)
    return (as_floats(load.timed_flops_per_token).reshape(-1, 1) * batch,
            as_floats(load.tokens_per_run).reshape(-1, 1) / batch)


def concatenate(grids: Sequence[LayoutGrid]) -> LayoutGrid:
    """Grids side by side: their candidates along axis 1, scenario rows broadcast."""
    if len(grids) == 1:
        return grids[0]
    out = {}
    for f in fields(LayoutGrid):
        parts = [np.asarray(getattr(g, f.name)) for g in grids]
        rows = max(part.shape[0] for part in parts)
        out[f.name] = np.concatenate([np.broadcast_to(part, (rows, part.shape[1])) for part in parts], axis=1)
    return LayoutGrid(**out)
