"""Step time and scaling of a (tensor, pipeline, data) layout across accelerators and nodes
(model.md §3).

Every collective is charged to the link it crosses: bytes that stay inside a node to the intra-node
fabric of each accelerator, bytes that cross a node's boundary to that node's link. Each costs its
bytes over the bandwidth plus a latency per step of its algorithm (the α–β model: Hockney 1994,
"The communication challenge for MPP: Intel Paragon and Meiko CS-2", Parallel Computing 20(3)).
"""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.assumptions import default
from service.domain.campaign import Recompute
from service.domain.catalog import NetworkPath
from service.domain.units import bytes_per_second_to_gbps, gbps_to_bytes_per_second


def ring_allreduce_bytes(*, payload_bytes: ArrayLike, ranks: ArrayLike) -> Floats:
    """Bytes each rank sends in a ring all-reduce: 2·(n−1)/n of the payload.

    Patarasuk and Yuan 2009, "Bandwidth optimal all-reduce algorithms for clusters of
    workstations", J. Parallel Distrib. Comput. 69(2); ZeRO §7 (2Ψ per step).
    """
    n = as_floats(ranks)
    return 2.0 * (n - 1.0) / n * as_floats(payload_bytes)


def path_efficiency(path: NetworkPath, override: float | None = None) -> float:
    """Share of the node link a job sees through its network path (model.md §3)."""
    if override is not None:
        return override
    return default(f"path_efficiency_{path}")


@dataclass(frozen=True)
class Traffic:
    """What one kind of collective moves in one optimiser step.

    `intra_bytes` crosses each accelerator's intra-node fabric; `inter_bytes` crosses each node's
    link (what leaves the node, per direction); `intra_steps` and `inter_steps` are the algorithm
    steps that each pay a latency α.
    """

    intra_bytes: Floats
    inter_bytes: Floats
    intra_steps: Floats
    inter_steps: Floats


def hierarchical_allreduce(
    *, payload_bytes: ArrayLike, ranks_per_node: ArrayLike, nodes: ArrayLike, groups_per_node: ArrayLike,
    volumes: ArrayLike = 2.0, pieces: ArrayLike = 1.0,
) -> Traffic:
    """A collective over ranks that sit k to a node across n nodes, c such groups in each node.

    Inside a node the k ranks reduce-scatter and all-gather on the fabric, each sending
    2·(k−1)/k of the payload P; across nodes each node's share (P/k from each of its k ranks)
    goes round a ring of n nodes, so the bytes leaving one node are c·2·(n−1)/n·P, about one
    payload per group, not one per rank (hierarchical all-reduce; ring volume from Patarasuk and
    Yuan 2009; the algorithms from Thakur, Rabenseifner and Gropp 2005, "Optimization of
    collective communication operations in MPICH", IJHPCA 19(1)). `volumes` counts payload
    volumes in units of (n−1)/n·P: 2 for an all-reduce (or a reduce-scatter plus an all-gather),
    3 for ZeRO-3's two parameter gathers and one gradient reduce-scatter (ZeRO §7). A volume
    moved in `pieces` separate collectives (ZeRO-3 gathers layer by layer) pays the latency of
    each piece's ring steps.
    """
    k = as_floats(ranks_per_node)
    n = as_floats(nodes)
    rings = np.where(as_floats(payload_bytes) > 0.0, as_floats(volumes) / 2.0, 0.0)  # all-reduces' worth
    return Traffic(
        intra_bytes=np.asarray(rings * ring_allreduce_bytes(payload_bytes=payload_bytes, ranks=k)),
        inter_bytes=np.asarray(as_floats(groups_per_node) * rings * ring_allreduce_bytes(
            payload_bytes=payload_bytes, ranks=n)),
        intra_steps=np.asarray(2.0 * rings * (k - 1.0) * as_floats(pieces)),
        inter_steps=np.asarray(2.0 * rings * (n - 1.0) * as_floats(pieces)),
    )


def tensor_parallel_traffic(
    *, message_bytes: ArrayLike, tensor: ArrayLike, layers: ArrayLike, micro_batches: ArrayLike,
    recompute: Recompute,
) -> Traffic:
    """Tensor-parallel collectives of one stage in one step, inside one node.

    Per layer and micro-batch, two all-reduces of the layer's activations (b·s·h 16-bit values,
    `message_bytes`) in the forward pass and two in the backward (Narayanan et al. 2021, SC21,
    §3, Fig. 5); with sequence parallelism each becomes a reduce-scatter plus an all-gather of the
    same volume (Korthikanti et al. 2022, §4.2.2). Full recomputation runs the forward pass, and
    its two all-reduces, again. Each all-reduce sends 2·(t−1)/t of the message per rank.
    """
    t = as_floats(tensor)
    count = 6.0 if recompute == "full" else 4.0
    collectives = count * as_floats(layers) * as_floats(micro_batches)
    zero = np.zeros(np.shape(collectives))
    return Traffic(
        intra_bytes=np.asarray(collectives * 2.0 * (t - 1.0) / t * as_floats(message_bytes)),
        inter_bytes=zero,
        intra_steps=np.asarray(collectives * 2.0 * (t - 1.0)),
        inter_steps=zero,
    )


def pipeline_traffic(
    *, message_bytes: ArrayLike, tensor: ArrayLike, stages: ArrayLike, micro_batches: ArrayLike, chunks: ArrayLike,
    ranks_per_node: ArrayLike, crossing_fraction: ArrayLike,
) -> Traffic:
    """Point-to-point sends between pipeline stages in one step.

    Each micro-batch sends its activations (b·s·h 16-bit values) to the next stage and their
    gradients back, once per model chunk; with tensor parallelism each of the t ranks sends 1/t
    of it (the scatter/gather optimisation, Narayanan et al. 2021, §4.1). A node's link carries
    what its ranks send to stages on other nodes: `crossing_fraction` of the sends. One stage sends
    nothing.
    """
    sends = np.where(as_floats(stages) > 1.0, 2.0 * as_floats(micro_batches) * as_floats(chunks), 0.0)
    per_rank = sends * as_floats(message_bytes) / as_floats(tensor)
    crossing = as_floats(crossing_fraction)
    return Traffic(
        intra_bytes=np.asarray(per_rank * (1.0 - crossing)),
        inter_bytes=np.asarray(per_rank * as_floats(ranks_per_node) * crossing),
        intra_steps=np.asarray(sends * (1.0 - crossing)),
        inter_steps=np.asarray(sends * crossing),
    )


def node_link_bytes_per_second(*, network_gbps: ArrayLike, path_efficiency: ArrayLike) -> Floats:
    """What a node's link carries for the job: link speed × the path's efficiency."""
    return gbps_to_bytes_per_second(as_floats(network_gbps) * as_floats(path_efficiency))


def exposed(seconds: ArrayLike, hidden_behind: ArrayLike) -> Floats:
    """The part of a collective's time not hidden behind compute it overlaps with."""
    return np.asarray(np.maximum(0.0, as_floats(seconds) - as_floats(hidden_behind)))


def network_gbps_for_efficiency(
    *,
    target_efficiency: ArrayLike,
    step_without_link_seconds: ArrayLike,
    exposed_only_bytes: ArrayLike,
    overlapped_bytes: ArrayLike,
    overlapped_other_seconds: ArrayLike,
    hidden_behind_seconds: ArrayLike,
    path_efficiency: ArrayLike,
) -> Floats:
    """Node link speed (Gb/s) at which the step is within the target of its time on an
    infinitely fast link.

    With r the bytes per second the job sees on the link, the step grows by
    B_e/r + max(0, D + B_o/r − W) − max(0, D − W) (B_e bytes always exposed, B_o bytes of a
    collective that hides behind W seconds of compute together with D seconds of its own that do
    not depend on the link). Allowing S·(1/e − 1) of growth on a step of S seconds gives
    r = max(B_e/A, (B_e + B_o)/(A + max(0, W − D))); the link is r over the path efficiency.
    NaN when nothing crosses a node's link.
    """
    allowed = as_floats(step_without_link_seconds) * (1.0 / as_floats(target_efficiency) - 1.0)
    always = as_floats(exposed_only_bytes)
    overlapped = as_floats(overlapped_bytes)
    slack = np.maximum(0.0, as_floats(hidden_behind_seconds) - as_floats(overlapped_other_seconds))
    rate = np.maximum(always / allowed, (always + overlapped) / (allowed + slack))
    gbps = bytes_per_second_to_gbps(rate / as_floats(path_efficiency))
    return np.asarray(np.where(always + overlapped > 0.0, gbps, np.nan))
