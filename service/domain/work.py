"""Work: how many floating-point operations a campaign needs (model.md §1)."""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.assumptions import default
from service.domain.campaign import (
    FlopsWork,
    MeasuredWork,
    Recompute,
    Runs,
    TransformerWork,
    UtilisationBasis,
)


def transformer_flops_per_token(
    *,
    parameters: ArrayLike,
    layers: ArrayLike | None = None,
    sequence_length: ArrayLike | None = None,
    d_model: ArrayLike | None = None,
) -> Floats:
    """Training FLOPs per token of a dense transformer.

    Forward FLOPs per token are 2N + 2·n_layer·n_ctx·d_model and training is three forward
    passes, so 6N + 6·n_layer·n_ctx·d_model (Kaplan et al. 2020, §2.1, Table 1). The attention
    term is added only when layers, sequence length and d_model are all known.
    """
    per_token = default("training_flops_per_parameter_token") * as_floats(parameters)
    if layers is None or sequence_length is None or d_model is None:
        return per_token
    return per_token + 6.0 * as_floats(layers) * as_floats(sequence_length) * as_floats(d_model)


def recompute_flops_factor(mode: Recompute) -> float:
    """Hardware FLOPs over model FLOPs for an activation-recomputation mode.

    Full recomputation runs the forward pass twice: 8ND instead of 6ND (Narayanan et al. 2021,
    §5.1, Eq. 3-4); selective recomputation adds about 2.7% (Korthikanti et al. 2022).
    """
    if mode == "full":
        return default("full_recompute_flops_factor")
    if mode == "selective":
        return default("selective_recompute_flops_factor")
    return 1.0


def runs_multiplier(runs: Runs) -> Floats:
    """Total work over one run's work: count × (1 + exploration + evaluation)."""
    return as_floats(runs.count) * (
        1.0 + as_floats(runs.exploration_fraction) + as_floats(runs.evaluation_fraction)
    )


@dataclass(frozen=True)
class WorkAmount:
    """One run's work. `timed_flops` is what the utilisation figure is measured against."""

    model_flops: Floats
    hardware_flops: Floats
    timed_flops: Floats
    flops_per_token: Floats | None
    tokens: Floats | None
    parameters: Floats | None

    timed_factor: float = 1.0  # timed FLOPs over model FLOPs: the recompute factor on the hardware basis

    @property
    def timed_flops_per_token(self) -> Floats | None:
        """Timed FLOPs per token, formed without the token count, so that a sweep over tokens leaves
        every layout's step time alone (one row of the grid, not one per scenario)."""
        if self.flops_per_token is not None:
            return np.asarray(self.flops_per_token * self.timed_factor)
        if self.tokens is None or self.parameters is None:
            return None
        return np.asarray(default("training_flops_per_parameter_token") * self.parameters * self.timed_factor)


def work_amount(
    work: TransformerWork | FlopsWork | MeasuredWork,
    *,
    recompute: Recompute,
    utilisation_basis: UtilisationBasis,
    reference_sustained_flops: ArrayLike | None = None,
) -> WorkAmount:
    """FLOPs of one run of the campaign.

    With the `model` basis the catalog utilisation is MFU and time = model FLOPs / (peak × MFU);
    with `hardware` it is HFU and time = hardware FLOPs / (peak × HFU). Measured work is turned
    into the FLOPs that the reference node type sustains in the measured accelerator-seconds,
    so another node type takes time in the ratio of peak × utilisation (model.md §1).
    """
    parameters = None if work.parameters is None else as_floats(work.parameters)
    if isinstance(work, MeasuredWork):
        if reference_sustained_flops is None:
            raise ValueError("measured work needs the reference node type's sustained FLOP/s")
        accelerator_seconds = as_floats(work.samples) / as_floats(
            work.samples_per_second_per_accelerator
        )
        flops = accelerator_seconds * as_floats(reference_sustained_flops)
        return WorkAmount(flops, flops, flops, None, _tokens_from(flops, parameters), parameters)
    if isinstance(work, TransformerWork):
        per_token = transformer_flops_per_token(
            parameters=work.parameters,
            layers=work.layers,
            sequence_length=work.sequence_length,
            d_model=work.d_model,
        )
        given_tokens = as_floats(work.tokens)
        tokens: Floats | None = given_tokens
        model_flops = per_token * given_tokens
    else:
        per_token = None
        model_flops = as_floats(work.total_flops)
        tokens = _tokens_from(model_flops, parameters)
    factor = recompute_flops_factor(recompute)
    hardware_flops = model_flops * factor
    timed_factor = 1.0 if utilisation_basis == "model" else factor
    timed = model_flops * timed_factor
    return WorkAmount(model_flops, hardware_flops, timed, per_token, tokens, parameters, timed_factor)


def _tokens_from(flops: Floats, parameters: Floats | None) -> Floats | None:
    """Tokens implied by FLOPs and parameter count, C = 6·N·D (Kaplan et al. 2020, §2.1)."""
    if parameters is None:
        return None
    return np.asarray(flops / (default("training_flops_per_parameter_token") * parameters))
