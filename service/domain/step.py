"""One training step of a candidate layout (model.md §2-§5): what a campaign asks of a venue and what
the venue offers, and for each candidate column its memory, step time (compute, pipeline bubble,
each collective on the link it crosses), failures and wall clock.

Scenarios run along axis 0 and candidate layouts along axis 1: for S scenarios and K candidates
every figure broadcasts to (S, K), and one that does not vary by scenario stays (1, K).
"""

from collections.abc import Callable
from dataclasses import dataclass, fields
from functools import cached_property
from typing import Any

import numpy as np

from service.domain.arrays import (
    ArrayLike,
    Bools,
    Floats,
    Ints,
    as_floats,
    broadcast,
    is_every_row,
    longest_axis,
    take_rows,
)
from service.domain.assumptions import default
from service.domain.campaign import LayoutPins, Parallelism, Recompute
from service.domain.memory import (
    activation_bytes_per_layer,
    micro_batches_in_flight,
    parameters_per_model_rank,
    usable_bytes,
    zero_model_state_bytes,
)
from service.domain.parallelism import Shapes
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

    @cached_property
    def rows(self) -> int:
        """The scenarios the load runs over (`arrays.longest_axis`), counted once."""
        return longest_axis(tuple(getattr(self, f.name) for f in fields(self)))

    @cached_property
    def kept(self) -> dict[Any, Any]:
        """What the venues' searches derive from the load alone, kept to share (`deadline.allowances`)."""
        return {}

    @property
    def zero_stages(self) -> tuple[int, ...]:
        """ZeRO stages allowed: replicated keeps every state on each replica, sharded all (3), auto tries each."""
        return {"replicated": (0,), "sharded": (3,)}.get(self.parallelism, (0, 1, 2, 3))


@dataclass(frozen=True)
class Hardware:
    """What a venue offers the campaign; arrays broadcast over scenarios. Where the steps of several
    venues are evaluated together (`lockstep.py`), every figure but the staging is a (1, K) array over
    their candidates side by side, which only `step_figures` reads."""

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

    @cached_property
    def rows(self) -> int:
        """The scenarios the hardware runs over (`arrays.longest_axis`), counted once."""
        return longest_axis(tuple(getattr(self, f.name) for f in fields(self)))

    @cached_property
    def step_values(self) -> tuple[float, ...]:
        """Each figure a step reads (STEP_HARDWARE), where each is one value (`lockstep.joinable`), as that
        value: made once, as a venue's hardware joins the step calls of several rounds (`lockstep.per_candidate`)."""
        values = (getattr(self, name) for name in STEP_HARDWARE)
        return tuple(float(value if isinstance(value, float | int) else np.asarray(value).reshape(-1)[0])
                     for value in values)


STEP_HARDWARE = tuple(f.name for f in fields(Hardware) if f.name != "staging_seconds")  # what a step reads


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
    effective_step_seconds: Floats  # the step times the expected wall-clock fraction of failures
    checkpoint_seconds: Floats
    checkpoint_interval_seconds: Floats
    wall_seconds: Floats
    accelerator_hours: Floats

    @cached_property
    def wall_hours(self) -> Floats:
        """Wall clock in hours, computed once: every term's cost lines use it."""
        return np.asarray(self.wall_seconds / SECONDS_PER_HOUR)

    def cells(self, rows: Ints, columns: Ints) -> Callable[[str], Any]:
        """A reader of any field at (rows[i], columns[i]) for each i, size-1 axes broadcast: the
        indices are settled once for all the fields read."""
        if rows.shape == columns.shape == (1,):  # one cell (a quote): read by plain indices, half the cost
            row, column = int(rows[0]), int(columns[0])

            def read_one(name: str) -> Any:
                values = np.asarray(getattr(self, name))
                return values[row if values.shape[0] > 1 else 0, column if values.shape[1] > 1 else 0,
                              np.newaxis].copy()
            return read_one
        first = np.zeros_like(rows)  # an index array keeps the result one value per row

        def read(name: str) -> Any:
            values = np.asarray(getattr(self, name))
            return values[rows if values.shape[0] > 1 else first, columns if values.shape[1] > 1 else first]
        return read


FIGURES = tuple(f.name for f in fields(LayoutGrid))  # every figure of a layout, in order
FIGURE_NAMES = frozenset(FIGURES)


class FiguresWhenRead(LayoutGrid):
    """A grid whose figures are each made when first read (`_made`), then kept: the chosen layouts,
    of which a sweep reads only the few its costs and summary need (`of`), and the candidate blocks of
    `own_step.FiguresOnRead`, whose figures beyond pricing only the chosen layout needs.
    `dataclasses.replace` builds one whole, as any LayoutGrid; `arrays.take_rows` keeps it made when read."""

    @classmethod
    def of(cls, make: Callable[[str], Any]) -> LayoutGrid:
        """A grid whose figure `name` is `make(name)`."""
        grid = cls.__new__(cls)
        object.__setattr__(grid, "_make", make)
        return grid

    def _made(self, name: str) -> Any:
        """Figure `name`, made now (AttributeError where this grid has no way to make it)."""
        make = self.__dict__.get("_make")
        if make is None:
            raise AttributeError(name)
        return make(name)

    def __getattr__(self, name: str) -> Any:
        if name not in FIGURE_NAMES:
            raise AttributeError(name)
        value = self._made(name)
        object.__setattr__(self, name, value)
        return value

    def at_rows(self, index: Any, scenarios: int) -> LayoutGrid:
        """This grid at some of its scenarios (`arrays.take_rows`), each figure made when read: this
        grid's, at those rows."""
        return FiguresWhenRead.of(lambda name: take_rows(getattr(self, name), index, scenarios))


@dataclass(frozen=True)
class Columns:
    """Candidate layouts before evaluation: arrays that broadcast to (S, K)."""

    tensor: Floats
    pipeline: Floats
    nodes: Floats
    accelerators: Floats
    origin: Ints


def side_by_side(*blocks: Columns) -> Columns:
    """Blocks of candidate columns as one, in order: each figure of a block broadcast to the block's
    width and to the most rows any block has of it (a row that stands for all spread to the others')."""
    def joined(name: str) -> Any:
        parts = [np.asarray(getattr(block, name)) for block in blocks]
        rows = max(part.shape[0] for part in parts)
        return np.concatenate([broadcast(part, (rows, np.shape(block.nodes)[1]))
                               for part, block in zip(parts, blocks, strict=True)], axis=1)
    return Columns(*(joined(f.name) for f in fields(Columns)))


def batch_sequences(load: Load) -> Floats | None:
    if load.architecture is None:
        return None
    return np.asarray(as_floats(load.global_batch_tokens).reshape(-1, 1) / load.architecture.sequence_length)


def rank_parameters(load: Load, tensor: Floats, pipeline: Floats) -> Floats:
    parameters = 0.0 if load.parameters is None else as_floats(load.parameters).reshape(-1, 1)
    return parameters_per_model_rank(parameters=parameters, tensor=tensor, pipeline=pipeline)


def _sequence_parallel(load: Load, tensor: Floats) -> Bools:
    """Sequence parallelism alongside tensor parallelism unless the request turns it off: it
    only saves memory (Korthikanti et al. 2022, §4.2.2: same communication volume)."""
    wanted = True if load.pins.sequence_parallel is None else load.pins.sequence_parallel
    return np.asarray((tensor > 1.0) & wanted)


def activations(load: Load, hardware: Hardware, tensor: Floats, pipeline: Floats, *, in_flight: ArrayLike) -> Floats:
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


def evaluate_columns(load: Load, hardware: Hardware, c: Columns, found: Shapes) -> LayoutGrid:
    """Memory, step time, failures and wall clock of each candidate column."""
    return with_wall(load, hardware, step_figures(load, hardware, c, found))


def step_figures(load: Load, hardware: Hardware, c: Columns, found: Shapes, *,
                 clock_only: bool = False) -> dict[str, Any]:
    """Every figure of each column but the wall clock: what one step and its failures cost, which
    varies by scenario only where the model's physics does (not with tokens, runs or staging). With
    `clock_only`, only what the wall clock needs (fits, accelerators, effective step), for a search
    that throws the rest away."""
    per_node = hardware.accelerators_per_node
    t, p, nodes, accelerators = c.tensor, c.pipeline, c.nodes, c.accelerators
    data = accelerators / (t * p)
    b = load.micro_batch
    sequences = batch_sequences(load)
    micro_batches = np.asarray(1.0) if sequences is None else np.asarray(sequences / (b * data))
    chunks = float(load.pins.pipeline_chunks or 1)

    # Memory: the lowest allowed ZeRO stage that holds the states beside the activations.
    psi = rank_parameters(load, t, p)
    activation = activations(load, hardware, t, p,
                              in_flight=micro_batches_in_flight(pipeline=p, micro_batches=micro_batches))
    room = usable_bytes(hardware.memory_bytes) - activation
    # Every allowed stage at once along a leading axis, in order; the first that holds, else the last.
    stages = np.asarray(found.zero_stages, dtype=np.int64).reshape(-1, 1, 1)
    holds = ((zero_model_state_bytes(parameters=psi, data_parallel=data, stage=stages) <= room)
             & ((p == 1.0) | (stages <= 1)))
    chosen = holds.any(axis=0)
    stage = np.where(chosen, stages[holds.argmax(axis=0), 0, 0], stages[-1, 0, 0])
    fits = chosen & (micro_batches >= 1.0 - 1e-9) & (data >= 1.0 - 1e-9)

    # Compute, bubble and each collective (model.md §3).
    flops_per_step, _ = _step_work(load)
    compute = flops_per_step / (accelerators * _by_row(hardware.sustained_flops_per_accelerator))
    bubble = compute * (p - 1.0) / (chunks * micro_batches)
    in_node = np.minimum(as_floats(per_node), accelerators)
    inside = gbps_to_bytes_per_second(hardware.intra_node_gbps)
    link = node_link_bytes_per_second(network_gbps=_by_row(hardware.network_gbps),
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

    # Failures and checkpoints (model.md §4), then the wall clock (§5).
    mtbi = job_mtbi_seconds(nodes=nodes, node_mtbf_hours=_by_row(hardware.node_mtbf_hours),
                            interruption_mean_hours=hardware.interruption_mean_hours)
    checkpoint_bytes = (default("bytes_per_parameter_model_states") * rank_parameters(load, np.ones(1), np.ones(1))
                        if load.checkpoint_bytes is None else as_floats(load.checkpoint_bytes).reshape(-1, 1))
    delta = checkpoint_write_seconds(checkpoint_bytes=checkpoint_bytes, nodes=nodes,
                                     write_gbps_per_node=hardware.checkpoint_write_gbps,
                                     storage_write_gbps=hardware.storage_write_gbps)
    interval = daly_interval(checkpoint_seconds=delta, mtbi_seconds=mtbi)
    wall_fraction = expected_wall_fraction(interval_seconds=interval, checkpoint_seconds=delta,
                                           restart_seconds=load.restart_seconds, mtbi_seconds=mtbi)
    if clock_only:
        return {"fits": fits, "accelerators": accelerators, "effective_step_seconds": step * wall_fraction}
    state = zero_model_state_bytes(parameters=psi, data_parallel=data, stage=stage)
    without_link = compute + bubble + tensor_seconds + pipeline_fixed + exposed(data_fixed, hidden)
    needed = network_gbps_for_efficiency(
        target_efficiency=default("target_scaling_efficiency"), step_without_link_seconds=without_link,
        exposed_only_bytes=pp.inter_bytes, overlapped_bytes=dp.inter_bytes, overlapped_other_seconds=data_fixed,
        hidden_behind_seconds=hidden, path_efficiency=hardware.path_efficiency)
    values: dict[str, Any] = dict(
        nodes=nodes, accelerators=accelerators, tensor=t, pipeline=p, data=data, zero_stage=stage,
        micro_batch=np.asarray(float(b)), micro_batches=micro_batches,
        sequence_parallel=_sequence_parallel(load, t), pipeline_chunks=np.asarray(chunks), origin=c.origin,
        state_bytes=state, activation_bytes=activation, fits=fits, compute_seconds=compute,
        bubble_seconds=bubble, tensor_seconds=tensor_seconds, pipeline_seconds=pipeline_seconds,
        data_seconds=data_seconds, data_exposed_seconds=data_exposed, step_seconds=step,
        scaling_efficiency=compute / step, exposed_fraction=(step - compute - bubble) / step,
        network_gbps_needed=np.where(nodes > 1.0, needed, np.nan), failure_overhead=wall_fraction - 1.0,
        effective_step_seconds=step * wall_fraction, checkpoint_seconds=delta,
        checkpoint_interval_seconds=np.where(np.isfinite(interval), interval, np.nan),
    )
    columns = np.shape(nodes)[1]
    return {name: two_d(value, columns) for name, value in values.items()}


def with_wall(load: Load, hardware: Hardware, figures: dict[str, Any]) -> LayoutGrid:
    """The grid of the figures and their wall clock."""
    wall = wall_figures(load, hardware, figures["effective_step_seconds"], figures["accelerators"])
    return LayoutGrid(**figures, wall_seconds=wall["wall_seconds"], accelerator_hours=wall["accelerator_hours"])


def wall_figures(load: Load, hardware: Hardware, effective_step_seconds: Floats, accelerators: Floats,
                 rows: Ints | None = None) -> dict[str, Floats]:
    """The wall clock of a run, steps × runs × the effective step plus staging (model.md §5), and
    its accelerator-hours; with `rows`, of those scenarios, one per row of the figures."""
    steps, staging = scenario_terms(load, hardware)
    if rows is not None and not is_every_row(rows):
        steps, staging = (terms[rows if terms.shape[0] > 1 else np.zeros_like(rows)] for terms in (steps, staging))
    wall = np.asarray(steps * effective_step_seconds)
    if wall.ndim == 2 and staging.shape[0] in (1, wall.shape[0]):  # staging: (S, 1)
        wall += staging  # in place where the shapes allow: this runs over every candidate of every scenario
    else:
        wall = wall + staging
    return {"wall_seconds": wall, "accelerator_hours": accelerator_hours(wall, accelerators)}


def accelerator_hours(wall_seconds: Floats, accelerators: Floats) -> Floats:
    """The accelerator-hours of a wall clock."""
    return np.asarray(wall_seconds * (accelerators / SECONDS_PER_HOUR))


def scenario_terms(load: Load, hardware: Hardware) -> tuple[Floats, Floats]:
    """(steps of all runs, staging seconds) per scenario, (S, 1); the steps made once per load."""
    if "steps" not in load.kept:
        load.kept["steps"] = np.asarray(_step_work(load)[1] * as_floats(load.runs_multiplier).reshape(-1, 1))
    return load.kept["steps"], as_floats(hardware.staging_seconds).reshape(-1, 1)


def _by_row(value: ArrayLike) -> Floats:
    """A hardware figure against the candidates: one value per scenario, as a column (S, 1); or, for
    venues whose steps are evaluated together (`lockstep.py`), one per candidate already, (1, K)."""
    array = as_floats(value)
    return array if array.ndim == 2 else array.reshape(-1, 1)


def two_d(value: Any, columns: int) -> Any:
    """A figure as an (R, K) array, R = 1 where it does not vary (a 1-D array: one value per scenario)."""
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


def scenario_rows(load: Load, hardware: Hardware, *arrays: Floats) -> int:
    """How many scenarios the step's inputs and `arrays` run over: their longest leading axis."""
    return max(load.rows, hardware.rows, longest_axis(arrays))
