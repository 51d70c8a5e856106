"""A training campaign and the options of one quote, as the core sees them.

Numeric fields may hold a scalar or an array with one element per scenario; the core broadcasts.
"""

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal

from service.domain.arrays import ArrayLike

Recompute = Literal["none", "selective", "full"]
Parallelism = Literal["auto", "replicated", "sharded"]
UtilisationBasis = Literal["model", "hardware"]
RankBy = Literal["cost", "wall_clock", "carbon"]
OwnedCostView = Literal["full", "incremental"]

OWNED_TERMS = ("owned_chargeback", "owned_new_build")
RENTED_TERMS = ("on_demand", "committed", "interruptible")
ALL_TERMS = OWNED_TERMS + RENTED_TERMS


@dataclass(frozen=True)
class TransformerWork:
    parameters: ArrayLike
    tokens: ArrayLike
    layers: ArrayLike | None = None
    d_model: ArrayLike | None = None
    sequence_length: ArrayLike | None = None
    attention_heads: ArrayLike | None = None
    kind: Literal["transformer"] = "transformer"


@dataclass(frozen=True)
class FlopsWork:
    total_flops: ArrayLike
    parameters: ArrayLike | None = None
    kind: Literal["flops"] = "flops"


@dataclass(frozen=True)
class MeasuredWork:
    reference_node_type: str
    samples: ArrayLike
    samples_per_second_per_accelerator: ArrayLike
    parameters: ArrayLike | None = None
    kind: Literal["measured"] = "measured"


Work = TransformerWork | FlopsWork | MeasuredWork


@dataclass(frozen=True)
class Training:
    """How the work is trained: numeric precision, recomputation and batch."""

    precision: str = "bf16"
    activation_recompute: Recompute = "none"
    global_batch_tokens: ArrayLike | None = None
    micro_batch_sequences: ArrayLike | None = None


@dataclass(frozen=True)
class Runs:
    count: ArrayLike = 1
    exploration_fraction: ArrayLike = 0.0
    evaluation_fraction: ArrayLike = 0.0


@dataclass(frozen=True)
class Recurrence:
    every_months: ArrayLike
    for_months: ArrayLike


@dataclass(frozen=True)
class DataPlan:
    dataset_tb: ArrayLike = 0.0
    checkpoint_tb: ArrayLike | None = None
    checkpoints_kept: ArrayLike = 1
    results_egress_tb: ArrayLike = 0.0
    allowed_jurisdictions: tuple[str, ...] | None = None
    home: str | None = None
    owned_only: bool = False


@dataclass(frozen=True)
class Campaign:
    name: str
    team: str
    work: Work
    training: Training = field(default_factory=Training)
    runs: Runs = field(default_factory=Runs)
    recurrence: Recurrence | None = None
    parallelism: Parallelism = "auto"
    deadline_days: ArrayLike | None = None
    data: DataPlan = field(default_factory=DataPlan)


@dataclass(frozen=True)
class LayoutPins:
    """Parts of the layout a request fixes; berth completes the rest (api.md `options.layout`)."""

    tensor: int | None = None
    pipeline: int | None = None
    zero_stage: int | None = None
    micro_batch: int | None = None
    sequence_parallel: bool | None = None
    pipeline_chunks: int | None = None


@dataclass(frozen=True)
class QuoteOptions:
    terms: tuple[str, ...] = ALL_TERMS
    max_accelerators: int | None = None
    fixed_accelerators: int | None = None
    utilisation_basis: UtilisationBasis = "model"
    rank_by: RankBy = "cost"
    layout: LayoutPins = field(default_factory=LayoutPins)
    owned_cost_view: OwnedCostView = "full"  # which cost of owned capacity ranks (model.md §6)


# The overrides one site or one offer may take for itself (`overrides.sites.<id>.<name>`).
SITE_OVERRIDES = ("utilisation", "electricity_price_per_kwh", "electricity_price_factor", "pue",
                  "utilisation_planned", "grid_kgco2e_per_kwh", "node_price_factor", "mtbf_hours", "network_gbps")
OFFER_OVERRIDES = ("utilisation", "on_demand_price_factor", "rented_price_factor", "mtbf_hours", "network_gbps")


@dataclass(frozen=True)
class Overrides:
    """Catalog values replaced for one request (or varied by a sweep): for every venue, and per
    site or offer id in `sites` and `offers` (name → value), where a value replaces the global one
    and a `_factor` multiplies it."""

    utilisation: ArrayLike | None = None
    electricity_price_per_kwh: ArrayLike | None = None
    on_demand_price_factor: ArrayLike | None = None
    rented_price_factor: ArrayLike | None = None
    pue: ArrayLike | None = None
    cost_of_capital_annual: ArrayLike | None = None
    node_price_factor: ArrayLike | None = None
    utilisation_planned: ArrayLike | None = None
    grid_kgco2e_per_kwh: ArrayLike | None = None
    mtbf_hours: ArrayLike | None = None
    network_gbps: ArrayLike | None = None
    electricity_price_factor: ArrayLike | None = None
    sites: Mapping[str, Mapping[str, ArrayLike]] = field(default_factory=dict)
    offers: Mapping[str, Mapping[str, ArrayLike]] = field(default_factory=dict)
