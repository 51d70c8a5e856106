"""The quote request (api.md), validated field by field, then turned into the domain."""

from typing import Annotated, Literal, get_args

from pydantic import Field, model_validator

from service.contract.common import (
    Amount,
    CarbonIntensity,
    CatalogId,
    Factor,
    Gbps,
    Hours,
    Identifier,
    Name,
    PositiveFloat,
    PositiveInt,
    Strict,
    Team,
    Terabytes,
    Utilisation,
)
from service.domain import campaign as domain
from service.domain import limits

Term = Literal["owned_chargeback", "owned_new_build", "on_demand", "committed", "interruptible"]
ALL_TERMS: tuple[Term, ...] = get_args(Term)
# A country code or the name of one of the catalog's jurisdiction groups.
JurisdictionName = Annotated[str, Field(min_length=2, max_length=40, pattern=r"^[A-Za-z0-9._-]+$")]


class TransformerWorkIn(Strict):
    kind: Literal["transformer"]
    parameters: PositiveFloat = Field(description="trainable parameters N")
    tokens: PositiveFloat = Field(description="training tokens D per run")
    layers: PositiveInt | None = None
    d_model: PositiveInt | None = None
    sequence_length: PositiveInt | None = None
    attention_heads: PositiveInt | None = None
    precision: str = Field("bf16", min_length=1, max_length=20, pattern=r"^[A-Za-z0-9._-]+$")
    activation_recompute: Literal["none", "selective", "full"] = "none"
    global_batch_tokens: PositiveFloat | None = None
    micro_batch_sequences: PositiveInt | None = None

    @model_validator(mode="after")
    def _architecture_complete(self) -> "TransformerWorkIn":
        given = [self.layers is not None, self.d_model is not None, self.sequence_length is not None]
        if any(given) and not all(given):
            raise ValueError("layers, d_model and sequence_length go together: give all three or none")
        return self


class FlopsWorkIn(Strict):
    kind: Literal["flops"]
    total_flops: PositiveFloat = Field(description="model FLOPs of one run")
    parameters: PositiveFloat | None = Field(None, description="for memory and communication")
    precision: str = Field("bf16", min_length=1, max_length=20, pattern=r"^[A-Za-z0-9._-]+$")
    activation_recompute: Literal["none", "selective", "full"] = "none"
    global_batch_tokens: PositiveFloat | None = None


class MeasuredWorkIn(Strict):
    kind: Literal["measured"]
    reference_node_type: Identifier
    samples: PositiveFloat
    samples_per_second_per_accelerator: PositiveFloat
    parameters: PositiveFloat | None = Field(None, description="for memory and communication")
    precision: str = Field("bf16", min_length=1, max_length=20, pattern=r"^[A-Za-z0-9._-]+$")
    activation_recompute: Literal["none", "selective", "full"] = "none"
    global_batch_tokens: PositiveFloat | None = None


WorkIn = Annotated[TransformerWorkIn | FlopsWorkIn | MeasuredWorkIn, Field(discriminator="kind")]


class RunsIn(Strict):
    count: Annotated[int, Field(gt=0, le=limits.MAX_RUNS)] = 1
    exploration_fraction: Annotated[float, Field(ge=0, le=limits.MAX_EXTRA_WORK, allow_inf_nan=False)] = 0.0
    evaluation_fraction: Annotated[float, Field(ge=0, le=limits.MAX_EXTRA_WORK, allow_inf_nan=False)] = 0.0


class RecurrenceIn(Strict):
    every_months: Annotated[float, Field(gt=0, le=limits.MAX_MONTHS, allow_inf_nan=False)]
    for_months: Annotated[float, Field(gt=0, le=limits.MAX_MONTHS, allow_inf_nan=False)]

    @model_validator(mode="after")
    def _at_least_once(self) -> "RecurrenceIn":
        if self.for_months < self.every_months:
            raise ValueError("for_months must be at least every_months")
        return self


class DataIn(Strict):
    dataset_tb: Terabytes = 0.0
    checkpoint_tb: Annotated[float, Field(gt=0, le=limits.MAX_TB, allow_inf_nan=False)] | None = None
    checkpoints_kept: Annotated[int, Field(gt=0, le=limits.MAX_RUNS)] = 1
    results_egress_tb: Terabytes = 0.0
    allowed_jurisdictions: list[JurisdictionName] | None = Field(
        None, max_length=300, description="ISO 3166-1 alpha-2 codes and names of the catalog's jurisdiction groups")
    home: Identifier | None = Field(None, description="the venue where the dataset lives")
    owned_only: bool = False


class CampaignIn(Strict):
    name: Name
    team: Team
    work: WorkIn
    runs: RunsIn = Field(default_factory=RunsIn)
    recurrence: RecurrenceIn | None = None
    parallelism: Literal["auto", "replicated", "sharded"] = "auto"
    deadline_days: Annotated[float, Field(gt=0, le=limits.MAX_DAYS, allow_inf_nan=False)] | None = None
    data: DataIn = Field(default_factory=DataIn)


class LayoutIn(Strict):
    """Parts of the parallel layout to pin; berth completes the rest (model.md §5)."""

    tensor: Annotated[int, Field(ge=1, le=1024)] | None = Field(
        None, description="tensor-parallel degree t, inside one node (divides its accelerators)")
    pipeline: Annotated[int, Field(ge=1, le=4096)] | None = Field(
        None, description="pipeline stages p (divides the layer count)")
    zero_stage: Annotated[int, Field(ge=0, le=3)] | None = Field(
        None, description="ZeRO stage of the data-parallel part; 2 and 3 only without pipelining")
    micro_batch: Annotated[int, Field(ge=1, le=4096)] | None = Field(None, description="sequences per micro-batch")
    sequence_parallel: bool | None = Field(None, description="sequence parallelism beside tensor parallelism")
    pipeline_chunks: Annotated[int, Field(ge=1, le=64)] | None = Field(
        None, description="model chunks per pipeline stage (interleaved 1F1B; 1 is plain 1F1B)")

    def to_domain(self) -> domain.LayoutPins:
        return domain.LayoutPins(**self.model_dump())


class RequoteIn(Strict):
    """`POST /v1/quotes/{id}/requote`: the catalog to quote the stored request against."""

    catalog_id: Identifier


class OptionsIn(Strict):
    terms: list[Term] = Field(default_factory=lambda: list(ALL_TERMS), min_length=1)
    max_accelerators: PositiveInt | None = None
    fixed_accelerators: PositiveInt | None = None
    utilisation_basis: Literal["model", "hardware"] = "model"
    rank_by: Literal["cost", "wall_clock", "carbon"] = "cost"
    layout: LayoutIn = Field(default_factory=LayoutIn)
    owned_cost_view: Literal["full", "incremental"] = Field(
        "full", description="which cost of owned capacity ranks the options: `full` (the chargeback at planned "
                            "utilisation, every cost line) or `incremental` (what running the campaign adds: busy "
                            "energy, data, and the fixed cost of nodes beyond the site's free capacity); the other "
                            "is shown beside it")


class _NodeOverrides(Strict):
    utilisation: Utilisation | None = Field(None, description="the accelerators' utilisation")
    mtbf_hours: Hours | None = Field(None, description="node MTBF")
    network_gbps: Gbps | None = Field(None, description="the node link")


class SiteOverridesIn(_NodeOverrides):
    """Catalog values replaced at one owned site (`overrides.sites.<site id>`); a factor multiplies
    the global one."""

    electricity_price_per_kwh: Amount | None = Field(None, description="owned sites' electricity price")
    electricity_price_factor: Factor | None = Field(None, description="multiplies electricity prices")
    pue: Annotated[float, Field(ge=1, le=5, allow_inf_nan=False)] | None = Field(None, description="owned sites' PUE")
    node_price_factor: Factor | None = Field(None, description="multiplies owned node prices")
    utilisation_planned: Utilisation | None = Field(None, description="owned sites' planned utilisation")
    grid_kgco2e_per_kwh: CarbonIntensity | None = Field(None, description="owned sites' grid carbon factor")


class OfferOverridesIn(_NodeOverrides):
    """Catalog values replaced at one rental offer (`overrides.offers.<offer id>`); a factor
    multiplies the global one."""

    on_demand_price_factor: Factor | None = Field(None, description="multiplies on-demand prices")
    rented_price_factor: Factor | None = Field(None, description="multiplies every rented price")


class OverridesIn(SiteOverridesIn, OfferOverridesIn):
    """Catalog values replaced for this request, at every venue, and per site or offer in `sites`
    and `offers`; sweeps vary them as `overrides.<name>` and `overrides.sites.<id>.<name>`."""

    cost_of_capital_annual: Annotated[float, Field(ge=0, le=1, allow_inf_nan=False)] | None = None
    sites: dict[Identifier, SiteOverridesIn] = Field(default_factory=dict, description="by site id")
    offers: dict[Identifier, OfferOverridesIn] = Field(default_factory=dict, description="by offer id")

    def to_domain(self) -> domain.Overrides:
        return domain.Overrides(
            **self.model_dump(exclude={"sites", "offers"}),
            sites={k: v.model_dump(exclude_none=True) for k, v in self.sites.items()},
            offers={k: v.model_dump(exclude_none=True) for k, v in self.offers.items()})


class QuoteRequestIn(Strict):
    catalog_id: CatalogId | None = Field(None, description="default: the newest catalog")
    campaign: CampaignIn
    options: OptionsIn = Field(default_factory=OptionsIn)
    overrides: OverridesIn = Field(default_factory=OverridesIn)

    def to_domain(self) -> tuple[domain.Campaign, domain.QuoteOptions, domain.Overrides]:
        c = self.campaign
        w = c.work
        work: domain.Work
        if isinstance(w, TransformerWorkIn):
            work = domain.TransformerWork(w.parameters, w.tokens, w.layers, w.d_model, w.sequence_length,
                                          w.attention_heads)
        elif isinstance(w, FlopsWorkIn):
            work = domain.FlopsWork(w.total_flops, w.parameters)
        else:
            work = domain.MeasuredWork(w.reference_node_type, w.samples, w.samples_per_second_per_accelerator,
                                       w.parameters)
        campaign = domain.Campaign(
            name=c.name, team=c.team, work=work,
            training=domain.Training(
                precision=w.precision, activation_recompute=w.activation_recompute,
                global_batch_tokens=w.global_batch_tokens,
                micro_batch_sequences=getattr(w, "micro_batch_sequences", None)),
            runs=domain.Runs(c.runs.count, c.runs.exploration_fraction, c.runs.evaluation_fraction),
            recurrence=None if c.recurrence is None else domain.Recurrence(
                c.recurrence.every_months, c.recurrence.for_months),
            parallelism=c.parallelism, deadline_days=c.deadline_days,
            data=domain.DataPlan(
                dataset_tb=c.data.dataset_tb, checkpoint_tb=c.data.checkpoint_tb,
                checkpoints_kept=c.data.checkpoints_kept, results_egress_tb=c.data.results_egress_tb,
                allowed_jurisdictions=None if c.data.allowed_jurisdictions is None
                else tuple(c.data.allowed_jurisdictions),
                home=c.data.home, owned_only=c.data.owned_only),
        )
        o = self.options
        options = domain.QuoteOptions(
            terms=tuple(dict.fromkeys(o.terms)), max_accelerators=o.max_accelerators,
            fixed_accelerators=o.fixed_accelerators, utilisation_basis=o.utilisation_basis, rank_by=o.rank_by,
            layout=o.layout.to_domain(), owned_cost_view=o.owned_cost_view)
        return campaign, options, self.overrides.to_domain()
