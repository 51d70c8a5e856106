"""Memory: does a layout hold the model, and with how many accelerators (model.md §2)."""

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.assumptions import default
from service.domain.campaign import Recompute

# Bytes per parameter of mixed-precision Adam that stay on every data-parallel replica, by ZeRO
# stage: 2 (bf16 weights) + 2 (bf16 gradients) + 12 (fp32 master weights, momentum, variance);
# stage 1 shards the 12, stage 2 also the gradients, stage 3 everything (Rajbhandari et al. 2020,
# ZeRO, SC20, §3.1 and §5).
_REPLICATED_BYTES_BY_STAGE = np.array([16.0, 4.0, 2.0, 0.0])


def zero_model_state_bytes(*, parameters: ArrayLike, data_parallel: ArrayLike, stage: ArrayLike) -> Floats:
    """Model-state bytes per accelerator under mixed-precision Adam, by ZeRO stage.

    Stage 0 keeps everything replicated, 16Ψ; stage 1 (P_os) 4Ψ + 12Ψ/d; stage 2 (P_os+g)
    2Ψ + 14Ψ/d; stage 3 (P_os+g+p, fully sharded) 16Ψ/d (Rajbhandari et al. 2020, §3.1, Fig. 1).
    Ψ is the parameters one data-parallel rank holds; with tensor and pipeline parallelism that is
    N/(t·p) (`parameters_per_model_rank`).
    """
    psi = as_floats(parameters)
    replicated = _REPLICATED_BYTES_BY_STAGE[np.asarray(stage, dtype=np.int64)]
    total = default("bytes_per_parameter_model_states")
    return np.asarray(psi * (replicated + (total - replicated) / as_floats(data_parallel)))


def parameters_per_model_rank(*, parameters: ArrayLike, tensor: ArrayLike, pipeline: ArrayLike) -> Floats:
    """Ψ' = N/(t·p): the parameters of one tensor-parallel rank of one pipeline stage."""
    return np.asarray(as_floats(parameters) / (as_floats(tensor) * as_floats(pipeline)))


def activation_bytes_per_layer(
    *,
    sequence_length: ArrayLike,
    micro_batch: ArrayLike,
    d_model: ArrayLike,
    attention_heads: ArrayLike,
    recompute: Recompute,
    tensor: ArrayLike = 1.0,
    sequence_parallel: ArrayLike = True,
) -> Floats:
    """16-bit activation bytes one transformer layer keeps for the backward pass, per accelerator.

    Korthikanti et al. 2022, "Reducing Activation Recomputation in Large Transformer Models",
    Eq. 1 and Table 2, with s sequence length, b micro-batch, h d_model, a heads, t tensor degree:
    - no recomputation: s·b·h·(34 + 5·a·s/h) without model parallelism; with tensor parallelism
      s·b·h·(10 + 24/t + 5·a·s/(h·t)); adding sequence parallelism s·b·h·(34/t + 5·a·s/(h·t));
    - selective recomputation (the attention scores are recomputed): s·b·h·(10 + 24/t), and with
      sequence parallelism s·b·h·34/t;
    - full recomputation keeps only each layer's 16-bit input, 2·s·b·h, split t ways along the
      sequence under sequence parallelism (2·s·b·h/t).
    With t = 1 every form reduces to Eq. 1's.
    """
    s = as_floats(sequence_length)
    b = as_floats(micro_batch)
    h = as_floats(d_model)
    a = as_floats(attention_heads)
    t = as_floats(tensor)
    parallel = np.asarray(sequence_parallel, dtype=bool)
    sbh = s * b * h
    if recompute == "full":
        return np.asarray(np.where(parallel, 2.0 * sbh / t, 2.0 * sbh))
    kept = np.where(parallel, 34.0 / t, 10.0 + 24.0 / t)
    if recompute == "selective":
        return np.asarray(sbh * kept)
    return np.asarray(sbh * (kept + 5.0 * a * s / (h * t)))


def micro_batches_in_flight(*, pipeline: ArrayLike, micro_batches: ArrayLike) -> Floats:
    """Micro-batches whose activations the first pipeline stage holds at once under 1F1B:
    min(p, m) (Narayanan et al. 2021, SC21, §2.2.1); 1 without pipelining."""
    return np.asarray(np.minimum(as_floats(pipeline), np.maximum(as_floats(micro_batches), 1.0)))


def usable_bytes(memory_bytes: ArrayLike) -> Floats:
    """Accelerator memory that states and activations may fill (allocator headroom kept)."""
    return default("usable_memory_fraction") * as_floats(memory_bytes)


def minimum_data_parallel(
    *, parameters_per_rank: ArrayLike, activation_bytes: ArrayLike, memory_bytes: ArrayLike, stage: ArrayLike
) -> Floats:
    """The fewest data-parallel replicas d with which a rank's states and activations fit, at a
    ZeRO stage: solve Ψ'·(r + (16 − r)/d) + activations ≤ usable memory for d (r the bytes a
    stage keeps replicated); 1 when it fits unsharded, inf when the replicated part alone
    overflows."""
    psi = as_floats(parameters_per_rank)
    replicated = _REPLICATED_BYTES_BY_STAGE[np.asarray(stage, dtype=np.int64)]
    sharded = psi * (default("bytes_per_parameter_model_states") - replicated)
    room = usable_bytes(memory_bytes) - as_floats(activation_bytes) - psi * replicated
    with np.errstate(divide="ignore", invalid="ignore"):
        needed = np.where(room > 0.0, np.ceil(sharded / np.where(room > 0.0, room, 1.0) - 1e-9), np.inf)
    return np.asarray(np.where(sharded <= 0.0, np.where(room >= 0.0, 1.0, np.inf), np.maximum(needed, 1.0)))
