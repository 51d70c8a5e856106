"""Memory: model states by ZeRO stage, activations by tensor, sequence and pipeline parallelism, and
the fewest data-parallel replicas that hold a model (model.md §2)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from service.domain.memory import (
    activation_bytes_per_layer,
    micro_batches_in_flight,
    minimum_data_parallel,
    parameters_per_model_rank,
    usable_bytes,
    zero_model_state_bytes,
)
from service.domain.units import GIB

GB = 1e9  # ZeRO's Fig. 1 reports decimal gigabytes

# Rajbhandari et al. 2020, "ZeRO: Memory Optimizations Toward Training Trillion Parameter
# Models", SC20, Fig. 1: Ψ = 7.5B parameters, N_d = 64, K = 12. Per-device model states:
# baseline 120 GB, P_os 31.4 GB, P_os+g 16.6 GB, P_os+g+p 1.9 GB. The figure rounds to 0.1 GB,
# so each value holds to ±0.05 GB.
ZERO_FIGURE_1 = [(0, 120.0), (1, 31.4), (2, 16.6), (3, 1.9)]


@pytest.mark.parametrize(("stage", "published_gb"), ZERO_FIGURE_1)
def test_zero_stages_reproduce_figure_1_to_its_rounding(stage: int, published_gb: float) -> None:
    per_device = zero_model_state_bytes(parameters=7.5e9, data_parallel=64, stage=stage)
    assert_allclose(per_device / GB, published_gb, rtol=0.0, atol=0.05)


def test_the_stage_may_vary_per_candidate_and_unsharded_replicas_keep_sixteen_bytes() -> None:
    # ZeRO §3.1: 2Ψ fp16 weights + 2Ψ fp16 gradients + KΨ = 12Ψ fp32 optimizer states; with one
    # replica every stage keeps all 16 bytes.
    stages = np.array([0, 1, 2, 3])
    assert_allclose(zero_model_state_bytes(parameters=7.5e9, data_parallel=1.0, stage=stages), 16 * 7.5e9,
                    rtol=1e-15)
    assert_allclose(zero_model_state_bytes(parameters=7.5e9, data_parallel=64.0, stage=stages) / GB,
                    [120.0, 31.40625, 16.640625, 1.875], rtol=1e-12)


def test_tensor_and_pipeline_parallelism_divide_the_parameters_of_a_rank() -> None:
    # Narayanan et al. 2021, SC21, §3: each of the t·p model-parallel ranks holds N/(t·p).
    assert_allclose(parameters_per_model_rank(parameters=174.6e9, tensor=8, pipeline=12), 174.6e9 / 96, rtol=1e-15)


# Korthikanti et al. 2022, "Reducing Activation Recomputation in Large Transformer Models",
# Eq. 1 and Table 2, for the GPT-3 175B layer (s = 2048, b = 1, h = 12288, a = 96) and t = 8.
# s·b·h = 25,165,824; 5·a·s/h = 80; 5·a·s/(h·t) = 10. Integers that float64 holds exactly.
SBH = 2048 * 12288
KORTHIKANTI_TABLE_2 = [
    # (recompute, t, sequence parallel, bytes per layer)
    ("none", 1, False, SBH * (34 + 80)),  # Eq. 1: 2,868,903,936
    ("none", 8, False, SBH * (10 + 24 / 8 + 10)),  # tensor parallel (baseline): sbh(10 + 24/t + 5as/(ht))
    ("none", 8, True, SBH * (34 / 8 + 10)),  # tensor + sequence parallel: sbh(34/t + 5as/(ht))
    ("selective", 8, False, SBH * (10 + 24 / 8)),  # tensor parallel + selective: sbh(10 + 24/t)
    ("selective", 8, True, SBH * 34 / 8),  # tensor + sequence parallel + selective: sbh·34/t
    ("full", 1, False, SBH * 2),  # full recomputation: the layer input, 2sbh
    ("full", 8, True, SBH * 2 / 8),  # ... split along the sequence by sequence parallelism
]


@pytest.mark.parametrize(("recompute", "tensor", "sequence_parallel", "published"), KORTHIKANTI_TABLE_2)
def test_activations_per_layer_follow_korthikanti_table_2_exactly(
    recompute: str, tensor: int, sequence_parallel: bool, published: float
) -> None:
    per_layer = activation_bytes_per_layer(
        sequence_length=2048, micro_batch=1, d_model=12288, attention_heads=96, recompute=recompute,  # type: ignore[arg-type]
        tensor=tensor, sequence_parallel=sequence_parallel,
    )
    assert_allclose(per_layer, published, rtol=0.0, atol=0.0)


def test_korthikanti_equation_1_gives_the_gpt3_layer_activations() -> None:
    per_layer = activation_bytes_per_layer(
        sequence_length=2048, micro_batch=1, d_model=12288, attention_heads=96, recompute="none"
    )
    assert_allclose(per_layer, 2_868_903_936, rtol=0.0, atol=0.0)


def test_activations_grow_linearly_with_the_micro_batch() -> None:
    micro_batch = np.array([1.0, 2.0, 8.0])
    per_layer = activation_bytes_per_layer(
        sequence_length=2048, micro_batch=micro_batch, d_model=12288, attention_heads=96, recompute="none",
    )
    assert_allclose(per_layer, 2_868_903_936 * micro_batch, rtol=1e-15)


def test_the_first_pipeline_stage_holds_p_micro_batches_under_1f1b() -> None:
    # Narayanan et al. 2021, §2.2.1: with 1F1B at most p micro-batches are in flight; fewer when the
    # step has fewer micro-batches.
    assert_allclose(micro_batches_in_flight(pipeline=np.array([1.0, 8.0, 8.0]), micro_batches=np.array([64, 64, 3])),
                    [1.0, 8.0, 3.0], rtol=0)


def test_accelerator_memory_is_counted_in_binary_gigabytes_with_ten_percent_headroom() -> None:
    # 80 GiB = 80·2^30 bytes (model.md §2); 90% usable is common practice.
    assert_allclose(usable_bytes(80 * GIB), 0.9 * 80 * 2**30, rtol=1e-15)


@pytest.mark.parametrize("stage", [1, 2, 3])
def test_the_fewest_replicas_are_the_smallest_count_whose_states_fit(stage: int) -> None:
    # Demo: 7.5B parameters, 80 GB accelerators (decimal here), 20 GB kept for activations.
    memory, activations = 80 * GB, 20 * GB
    replicas = minimum_data_parallel(parameters_per_rank=7.5e9, activation_bytes=activations, memory_bytes=memory,
                                     stage=stage)
    room = 0.9 * memory - activations
    assert zero_model_state_bytes(parameters=7.5e9, data_parallel=replicas, stage=stage) <= room
    assert zero_model_state_bytes(parameters=7.5e9, data_parallel=replicas - 1.0, stage=stage) > room


def test_zero_stage_3_needs_three_replicas_where_52_gb_are_free_for_120_gb_of_states() -> None:
    # 72 − 20 = 52 GB free per accelerator; ⌈120/52⌉ = 3.
    assert_allclose(minimum_data_parallel(parameters_per_rank=7.5e9, activation_bytes=20 * GB,
                                          memory_bytes=80 * GB, stage=3), 3.0, rtol=0)


def test_no_replica_count_helps_when_the_unsharded_part_overflows() -> None:
    # Stage 0 shards nothing; stage 1 keeps 4 bytes a parameter on every replica: 4·15e9 = 60 GB.
    replicas = minimum_data_parallel(parameters_per_rank=np.array([1e9, 15e9]), activation_bytes=13 * GB,
                                     memory_bytes=80 * GB, stage=np.array([0, 1]))
    assert replicas[0] == 1.0
    assert np.isinf(replicas[1])
