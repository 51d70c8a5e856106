"""Memory: model states, activations and the fewest shards (model.md §2)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from service.domain.memory import (
    activation_bytes_per_layer,
    fits,
    minimum_shards,
    model_state_bytes,
    usable_bytes,
    zero_model_state_bytes,
)

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


def test_mixed_precision_adam_keeps_sixteen_bytes_per_parameter() -> None:
    # ZeRO §3.1: 2Ψ fp16 weights + 2Ψ fp16 gradients + KΨ = 12Ψ fp32 optimizer states.
    assert_allclose(model_state_bytes(parameters=7.5e9, shards=1), 16 * 7.5e9, rtol=0.0)


def test_full_sharding_divides_the_states_over_the_shards_as_zero_stage_3_does() -> None:
    shards = np.array([1.0, 8.0, 64.0, 1000.0])
    assert_allclose(
        model_state_bytes(parameters=7.5e9, shards=shards),
        zero_model_state_bytes(parameters=7.5e9, data_parallel=shards, stage=3),
        rtol=1e-15,
    )


def test_korthikanti_equation_1_gives_the_gpt3_layer_activations_exactly() -> None:
    # Korthikanti et al. 2022, "Reducing Activation Recomputation in Large Transformer Models",
    # Eq. 1: s·b·h·(34 + 5·a·s/h) bytes per layer. s = 2048, b = 1, h = 12288, a = 96:
    # 2048·12288·(34 + 80) = 2,868,903,936 bytes, an integer float64 holds exactly.
    per_layer = activation_bytes_per_layer(
        sequence_length=2048, micro_batch=1, d_model=12288, attention_heads=96, recompute="none"
    )
    assert_allclose(per_layer, 2_868_903_936, rtol=0.0, atol=0.0)


def test_full_recomputation_keeps_only_each_layers_two_byte_input() -> None:
    # Korthikanti et al. 2022 (full recomputation stores only the layer input, 2·s·b·h bytes);
    # model.md §2 marks this [secondary]. 2·2048·4·12288 = 201,326,592.
    per_layer = activation_bytes_per_layer(
        sequence_length=2048, micro_batch=4, d_model=12288, attention_heads=96, recompute="full"
    )
    assert_allclose(per_layer, 201_326_592, rtol=0.0, atol=0.0)


def test_activations_grow_linearly_with_the_micro_batch() -> None:
    micro_batch = np.array([1.0, 2.0, 8.0])
    per_layer = activation_bytes_per_layer(
        sequence_length=2048, micro_batch=micro_batch, d_model=12288, attention_heads=96,
        recompute="none",
    )
    assert_allclose(per_layer, 2_868_903_936 * micro_batch, rtol=1e-15)


def test_states_and_activations_must_fit_in_ninety_percent_of_memory() -> None:
    # The 90% allocator headroom is common practice (model.md §2); demo 80 GB accelerator.
    memory = 80 * GB
    assert_allclose(usable_bytes(memory), 72 * GB, rtol=1e-15)
    verdict = fits(
        state_bytes=np.array([50, 50, 50]) * GB,
        activation_bytes=np.array([21, 22, 23]) * GB,
        memory_bytes=memory,
    )
    np.testing.assert_array_equal(verdict, [True, True, False])


def test_minimum_shards_is_the_smallest_count_whose_share_fits() -> None:
    # Demo: 7.5B parameters (120 GB of states), 80 GB accelerators, 20 GB kept for activations:
    # room 72 − 20 = 52 GB per accelerator, so ⌈120/52⌉ = 3 shards.
    memory, activations = 80 * GB, 20 * GB
    shards = minimum_shards(parameters=7.5e9, activation_bytes=activations, memory_bytes=memory)
    assert_allclose(shards, 3.0, rtol=0.0)
    at_minimum = model_state_bytes(parameters=7.5e9, shards=shards)
    one_fewer = model_state_bytes(parameters=7.5e9, shards=shards - 1.0)
    assert fits(state_bytes=at_minimum, activation_bytes=activations, memory_bytes=memory)
    assert not fits(state_bytes=one_fewer, activation_bytes=activations, memory_bytes=memory)


def test_a_model_that_fits_on_one_accelerator_needs_one_shard() -> None:
    shards = minimum_shards(parameters=1e9, activation_bytes=10 * GB, memory_bytes=80 * GB)
    assert_allclose(shards, 1.0, rtol=0.0)


def test_no_shard_count_helps_when_activations_alone_overflow() -> None:
    shards = minimum_shards(
        parameters=np.array([1e9, 1e9]), activation_bytes=np.array([71 * GB, 73 * GB]),
        memory_bytes=80 * GB,
    )
    assert np.isfinite(shards[0])
    assert np.isinf(shards[1])
