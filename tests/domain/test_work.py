"""Work: how many FLOPs a campaign needs (model.md §1), held to published figures."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from service.domain.campaign import FlopsWork, MeasuredWork, Runs, TransformerWork
from service.domain.work import (
    recompute_flops_factor,
    runs_multiplier,
    transformer_flops_per_token,
    work_amount,
)

# Hoffmann et al. 2022, "Training Compute-Optimal Large Language Models", Table 3 (Approach 1):
# (parameters, FLOPs, tokens) of the compute-optimal models. The table rounds FLOPs to three
# significant figures and tokens to one decimal of the unit shown, so C = 6·N·D holds to 1%.
# The 67B row (5.76e23 FLOPs, 1.5T tokens) is left out: 6·N·D gives 6.03e23 (+4.7%), and even
# the extremes of its rounding (66.5B × 1.45T) give 5.79e23; 5.76e23/(6·67e9) is 1.43T tokens.
HOFFMANN_TABLE_3 = [
    (400e6, 1.92e19, 8.0e9),
    (1e9, 1.21e20, 20.2e9),
    (10e9, 1.23e22, 205.1e9),
    (175e9, 3.85e24, 3.7e12),
    (280e9, 9.90e24, 5.9e12),
    (520e9, 3.43e25, 11.0e12),
    (1e12, 1.27e26, 21.2e12),
    (10e12, 1.30e28, 216.2e12),
]


@pytest.mark.parametrize(("parameters", "flops", "tokens"), HOFFMANN_TABLE_3)
def test_six_n_d_reproduces_hoffmann_table_3_within_the_tables_rounding(
    parameters: float, flops: float, tokens: float
) -> None:
    work = work_amount(
        TransformerWork(parameters=parameters, tokens=tokens),
        recompute="none",
        utilisation_basis="model",
    )
    assert_allclose(work.model_flops, flops, rtol=0.01)


def test_training_costs_six_flops_per_parameter_per_token() -> None:
    # Kaplan et al. 2020, "Scaling Laws for Neural Language Models", §2.1: C ≈ 6N per token.
    parameters = np.array([1.5e9, 175e9])
    assert_allclose(transformer_flops_per_token(parameters=parameters), 6.0 * parameters, rtol=1e-15)


def test_attention_term_is_n_ctx_over_twelve_d_model_of_six_n() -> None:
    # Kaplan et al. 2020, §2.1, Table 1: forward FLOPs 2N + 2·n_layer·n_ctx·d_model, training
    # three times that. With N = 12·n_layer·d_model² (ibid., Eq. 2.1 without embeddings), the
    # attention share is n_ctx/(12·d_model): 2048/(12·12288) = 1/72.
    layers, d_model, n_ctx = 96, 12288, 2048
    parameters = 12.0 * layers * d_model**2
    per_token = transformer_flops_per_token(
        parameters=parameters, layers=layers, sequence_length=n_ctx, d_model=d_model
    )
    assert_allclose(per_token / (6.0 * parameters) - 1.0, 1.0 / 72.0, rtol=1e-12)


def test_attention_term_is_left_out_unless_the_whole_architecture_is_given() -> None:
    without_d_model = transformer_flops_per_token(parameters=1e9, layers=24, sequence_length=2048)
    assert_allclose(without_d_model, 6e9, rtol=1e-15)


def test_full_recomputation_gives_eight_n_d_hardware_flops() -> None:
    # Narayanan et al. 2021, "Efficient Large-Scale Language Model Training on GPU Clusters
    # Using Megatron-LM", SC21, §5.1, Eq. 3-4: with the extra forward pass, 8·T·P FLOPs.
    parameters, tokens = 175e9, 300e9
    work = work_amount(
        TransformerWork(parameters=parameters, tokens=tokens),
        recompute="full",
        utilisation_basis="hardware",
    )
    assert_allclose(work.model_flops, 6.0 * parameters * tokens, rtol=1e-15)
    assert_allclose(work.hardware_flops, 8.0 * parameters * tokens, rtol=1e-15)
    assert_allclose(recompute_flops_factor("full"), 4.0 / 3.0, rtol=1e-15)


def test_no_recomputation_adds_no_hardware_flops() -> None:
    work = work_amount(
        TransformerWork(parameters=1e9, tokens=2e10), recompute="none", utilisation_basis="hardware"
    )
    assert_allclose(work.hardware_flops, work.model_flops, rtol=0.0)


@pytest.mark.parametrize(
    ("basis", "expected_factor"), [("model", 1.0), ("hardware", 4.0 / 3.0)]
)
def test_the_utilisation_basis_picks_which_flops_are_timed(basis: str, expected_factor: float) -> None:
    # model.md §1: MFU times model FLOPs, HFU times hardware FLOPs.
    work = work_amount(
        TransformerWork(parameters=7e9, tokens=1e12),
        recompute="full",
        utilisation_basis=basis,  # type: ignore[arg-type]
    )
    assert_allclose(work.timed_flops, expected_factor * work.model_flops, rtol=1e-15)


def test_total_flops_are_taken_as_given_and_imply_tokens_by_six_n_d() -> None:
    work = work_amount(
        FlopsWork(total_flops=3.85e24, parameters=175e9), recompute="none", utilisation_basis="model"
    )
    assert_allclose(work.model_flops, 3.85e24, rtol=0.0)
    assert work.tokens is not None
    assert_allclose(work.tokens, 3.85e24 / (6.0 * 175e9), rtol=1e-15)


def test_runs_multiply_one_run_by_count_and_the_exploration_and_evaluation_shares() -> None:
    # model.md §1: total = one run × count × (1 + exploration + evaluation); demo figures.
    runs = Runs(count=np.array([1, 3]), exploration_fraction=0.2, evaluation_fraction=0.05)
    assert_allclose(runs_multiplier(runs), [1.25, 3.75], rtol=1e-15)


def test_measured_work_becomes_the_flops_the_reference_sustains_in_the_measured_time() -> None:
    # Demo figures: 3.6e6 samples at 50 samples/s per accelerator is 72,000 accelerator-seconds;
    # at 1.6e14 FLOP/s sustained that is 1.152e19 FLOPs, or 1.152e19/(6·1e9) tokens.
    work = work_amount(
        MeasuredWork(reference_node_type="ref", samples=3.6e6,
                     samples_per_second_per_accelerator=50.0, parameters=1e9),
        recompute="full",
        utilisation_basis="hardware",
        reference_sustained_flops=1.6e14,
    )
    assert_allclose(work.timed_flops, 72_000 * 1.6e14, rtol=1e-15)
    # Measured throughput already includes any recomputation: no factor is added on top.
    assert_allclose(work.hardware_flops, work.model_flops, rtol=0.0)
    assert work.tokens is not None
    assert_allclose(work.tokens, 72_000 * 1.6e14 / 6e9, rtol=1e-15)


def test_measured_work_without_a_reference_speed_is_refused() -> None:
    with pytest.raises(ValueError, match="reference"):
        work_amount(
            MeasuredWork(reference_node_type="ref", samples=1e6, samples_per_second_per_accelerator=10.0),
            recompute="none",
            utilisation_basis="model",
        )


def test_work_is_computed_for_every_scenario_at_once() -> None:
    tokens = np.array([1e9, 2e9, 4e9])
    work = work_amount(TransformerWork(parameters=1e9, tokens=tokens), recompute="none",
                       utilisation_basis="model")
    assert_allclose(work.model_flops, 6e9 * tokens, rtol=1e-15)
