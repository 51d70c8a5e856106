"""Step time and scaling across accelerators and nodes (model.md §3)."""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.assumptions import default
from service.domain.catalog import NetworkPath
from service.domain.units import bytes_per_second_to_gbps, gbps_to_bytes_per_second


def ring_allreduce_bytes(*, payload_bytes: ArrayLike, ranks: ArrayLike) -> Floats:
    """Bytes each rank sends in a ring all-reduce: 2·(n−1)/n of the payload.

    Patarasuk and Yuan 2009, J. Parallel Distrib. Comput. 69(2); ZeRO §7 (2Ψ per step).
    """
    n = as_floats(ranks)
    return 2.0 * (n - 1.0) / n * as_floats(payload_bytes)


def sharded_step_bytes(*, payload_bytes: ArrayLike, ranks: ArrayLike) -> Floats:
    """Bytes each rank moves per step when states are fully sharded: 3·(n−1)/n of the payload.

    Parameter all-gathers in the forward and backward passes plus a gradient reduce-scatter:
    1.5 times the replicated volume (Rajbhandari et al. 2020, ZeRO, §7).
    """
    n = as_floats(ranks)
    return 3.0 * (n - 1.0) / n * as_floats(payload_bytes)


def path_efficiency(path: NetworkPath, override: float | None = None) -> float:
    """Share of the node link a job sees through its network path (model.md §3)."""
    if override is not None:
        return override
    return default(f"path_efficiency_{path}")


def bandwidth_per_accelerator(
    *,
    nodes: ArrayLike,
    accelerators_per_node: ArrayLike,
    intra_node_gbps: ArrayLike,
    network_gbps: ArrayLike,
    path_efficiency: ArrayLike,
) -> Floats:
    """Bytes per second each accelerator can move: inside one node the intra-node fabric,
    across nodes its share of the node link after path efficiency."""
    across = gbps_to_bytes_per_second(
        as_floats(network_gbps) * as_floats(path_efficiency) / as_floats(accelerators_per_node)
    )
    inside = gbps_to_bytes_per_second(intra_node_gbps)
    return np.where(as_floats(nodes) <= 1.0, inside, across)


@dataclass(frozen=True)
class StepTiming:
    compute_seconds: Floats
    communication_seconds: Floats
    exposed_seconds: Floats
    step_seconds: Floats
    scaling_efficiency: Floats
    exposed_fraction: Floats


def step_timing(
    *,
    flops_per_step: ArrayLike,
    accelerators: ArrayLike,
    sustained_flops_per_accelerator: ArrayLike,
    communication_bytes: ArrayLike,
    bandwidth_bytes_per_second: ArrayLike,
    overlap: ArrayLike,
) -> StepTiming:
    """Time of one optimiser step.

    t_c = FLOPs per step / (n × peak × utilisation); t_comm = bytes / bandwidth; the part of
    t_comm not hidden behind overlap·t_c is exposed; step = t_c + exposed; scaling
    efficiency = t_c / step (model.md §3).
    """
    compute = as_floats(flops_per_step) / (
        as_floats(accelerators) * as_floats(sustained_flops_per_accelerator)
    )
    communication = as_floats(communication_bytes) / as_floats(bandwidth_bytes_per_second)
    exposed = np.maximum(0.0, communication - as_floats(overlap) * compute)
    step = compute + exposed
    return StepTiming(compute, communication, exposed, step, compute / step, exposed / step)


def network_gbps_for_efficiency(
    *,
    target_efficiency: ArrayLike,
    compute_seconds: ArrayLike,
    communication_bytes: ArrayLike,
    overlap: ArrayLike,
    accelerators_per_node: ArrayLike,
    path_efficiency: ArrayLike,
) -> Floats:
    """Node link speed (Gb/s) at which scaling efficiency reaches the target.

    Efficiency t_c/(t_c + exposed) ≥ e holds while exposed ≤ t_c·(1/e − 1), that is while
    t_comm ≤ t_c·(overlap + 1/e − 1); the bandwidth per accelerator that allows it, times the
    accelerators sharing the link, over the path efficiency, is the link needed.
    """
    allowed_seconds = as_floats(compute_seconds) * (
        as_floats(overlap) + 1.0 / as_floats(target_efficiency) - 1.0
    )
    per_accelerator = as_floats(communication_bytes) / allowed_seconds
    return bytes_per_second_to_gbps(
        per_accelerator * as_floats(accelerators_per_node) / as_floats(path_efficiency)
    )
