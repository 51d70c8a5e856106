"""Memory: does the model fit on an accelerator, and how must its states be split (model.md §2)."""

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, as_floats
from service.domain.assumptions import default
from service.domain.campaign import Recompute


def zero_model_state_bytes(*, parameters: ArrayLike, data_parallel: ArrayLike, stage: int) -> Floats:
    """Model-state bytes per accelerator under mixed-precision Adam, by ZeRO stage.

    Stage 0 keeps everything replicated, 16Ψ; stage 1 (P_os) 4Ψ + 12Ψ/d; stage 2 (P_os+g)
    2Ψ + 14Ψ/d; stage 3 (P_os+g+p, fully sharded) 16Ψ/d (Rajbhandari et al. 2020, §3.1, Fig. 1).
    """
    psi = as_floats(parameters)
    d = as_floats(data_parallel)
    per_stage = {
        0: 16.0 * psi,
        1: 4.0 * psi + 12.0 * psi / d,
        2: 2.0 * psi + 14.0 * psi / d,
        3: 16.0 * psi / d,
    }
    return np.asarray(per_stage[stage])


def model_state_bytes(*, parameters: ArrayLike, shards: ArrayLike) -> Floats:
    """16 bytes per parameter, divided over the shards (1 = replicated) (ZeRO §3.1)."""
    return default("bytes_per_parameter_model_states") * as_floats(parameters) / as_floats(shards)


def activation_bytes_per_layer(
    *,
    sequence_length: ArrayLike,
    micro_batch: ArrayLike,
    d_model: ArrayLike,
    attention_heads: ArrayLike,
    recompute: Recompute,
) -> Floats:
    """16-bit activation bytes one transformer layer keeps for the backward pass.

    s·b·h·(34 + 5·a·s/h) with no recomputation (Korthikanti et al. 2022, Eq. 1); selective
    recomputation drops the attention term, s·b·h·34 (ibid., §5); full recomputation keeps only
    each layer's input, 2·s·b·h.
    """
    s = as_floats(sequence_length)
    b = as_floats(micro_batch)
    h = as_floats(d_model)
    a = as_floats(attention_heads)
    if recompute == "full":
        return 2.0 * s * b * h
    if recompute == "selective":
        return 34.0 * s * b * h
    return s * b * h * (34.0 + 5.0 * a * s / h)


def usable_bytes(memory_bytes: ArrayLike) -> Floats:
    """Accelerator memory that states and activations may fill (allocator headroom kept)."""
    return default("usable_memory_fraction") * as_floats(memory_bytes)


def fits(*, state_bytes: ArrayLike, activation_bytes: ArrayLike, memory_bytes: ArrayLike) -> Bools:
    """States plus activations within the usable share of accelerator memory."""
    return np.asarray(as_floats(state_bytes) + as_floats(activation_bytes) <= usable_bytes(memory_bytes))


def minimum_shards(*, parameters: ArrayLike, activation_bytes: ArrayLike, memory_bytes: ArrayLike) -> Floats:
    """The fewest accelerators a fully sharded model needs; inf when activations alone overflow."""
    room = usable_bytes(memory_bytes) - as_floats(activation_bytes)
    states = default("bytes_per_parameter_model_states") * as_floats(parameters)
    safe_room = np.where(room > 0.0, room, 1.0)
    return np.where(room > 0.0, np.maximum(1.0, np.ceil(states / safe_room)), np.inf)
