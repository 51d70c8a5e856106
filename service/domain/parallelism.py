"""Which (tensor, pipeline, data) layouts to consider for a venue: a bounded set of shapes and, per
shape, the node counts worth pricing (model.md §5). Nothing here grows with a venue's node limit.

A layout runs t·p·d accelerators: tensor parallelism t inside one node, p pipeline stages, d
data-parallel replicas, ranks ordered tensor first, then data, then pipeline, as Megatron-LM lays
them out (Narayanan et al. 2021, SC21, §3.3), so a node holds g/t ranks of one stage's data group
whenever t·d ≥ g.
"""

import math
from dataclasses import dataclass

import numpy as np

from service.domain.arrays import Floats
from service.domain.campaign import LayoutPins

MAX_PIPELINE_DEGREES = 8  # pipeline degrees tried per tensor degree, spread over the layer's divisors


@dataclass(frozen=True)
class Shapes:
    """The (t, p) pairs to evaluate, as parallel 1-D arrays, and the ZeRO stages allowed."""

    tensor: Floats
    pipeline: Floats
    zero_stages: tuple[int, ...]

    @property
    def count(self) -> int:
        return int(self.tensor.shape[0])

    def node_unit(self, accelerators_per_node: int) -> Floats:
        """The fewest nodes whose accelerators a shape divides into whole replicas: t·p/gcd(t·p, g)."""
        model = (self.tensor * self.pipeline).astype(np.int64)
        return np.asarray(model // np.gcd(model, accelerators_per_node), dtype=np.float64)


def divisors(n: int) -> list[int]:
    """The divisors of n, ascending."""
    small = [k for k in range(1, math.isqrt(n) + 1) if n % k == 0]
    return sorted(set(small) | {n // k for k in small})


def spread(values: list[int], count: int) -> list[int]:
    """At most `count` of the ascending `values`, spread geometrically and keeping both ends."""
    if len(values) <= count:
        return values
    positions = np.unique(np.round(np.geomspace(1, len(values), count)).astype(int) - 1)
    return [values[i] for i in positions]


def shapes(
    *, accelerators_per_node: int, layers: int | None, attention_heads: float | None, pins: LayoutPins,
    zero_stages: tuple[int, ...], fixed_accelerators: int | None = None,
) -> Shapes:
    """The shapes to evaluate. t runs over the divisors of the node's accelerators (that divide the
    attention heads, when known); p over at most eight divisors of the layer count. Without an
    architecture there are no layers to split or activations to spread: t = p = 1. A pinned
    accelerator count below one node bounds t, and every t·p must divide it."""
    per_node = accelerators_per_node if fixed_accelerators is None else min(accelerators_per_node, fixed_accelerators)
    if layers is None:
        tensors, pipelines = [1], [1]
    else:
        heads = None if attention_heads is None else round(attention_heads)
        tensors = [t for t in divisors(per_node) if heads is None or heads % t == 0]
        pipelines = spread(divisors(layers), MAX_PIPELINE_DEGREES)
    if pins.tensor is not None:
        tensors = [pins.tensor]
    if pins.pipeline is not None:
        pipelines = [pins.pipeline]
    pairs = [(t, p) for t in tensors for p in pipelines
             if fixed_accelerators is None or fixed_accelerators % (t * p) == 0]
    if not pairs:  # nothing divides the pinned count: evaluate the pins as given, screened out later
        pairs = [(tensors[0], pipelines[0])]
    stages = zero_stages if pins.zero_stage is None else (pins.zero_stage,)
    return Shapes(np.array([float(t) for t, _ in pairs]), np.array([float(p) for _, p in pairs]), stages)
