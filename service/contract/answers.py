"""The quote response as documented in the OpenAPI (api.md). The service builds the body in
`service.contract.document` and these models describe it; a test checks that real quotes validate."""

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict


class Open(BaseModel):
    """Responses may gain fields; clients ignore what they do not know."""

    model_config = ConfigDict(extra="allow")


class Venue(Open):
    """Where an option runs. A split runs part of the campaign's runs at an owned site and the rest
    on a rented offer: its id and jurisdiction join the two parts' with "+" (for example "NO+FR"),
    and the option lists both under `parts`."""

    kind: Literal["owned", "rented", "split"]
    id: str
    jurisdiction: str
    node_type: str


class Layout(Open):
    """How the campaign is split over its accelerators: tensor × pipeline × data = accelerators
    (model.md §2-§5). `strategy` and `shards` are kept from the first model version: deprecated."""

    nodes: int
    accelerators: int
    tensor: int
    pipeline: int
    data: int
    zero_stage: Literal[0, 1, 2, 3]
    sequence_parallel: bool
    micro_batch: int
    micro_batches: float | None
    pipeline_chunks: int
    pipeline_bubble_fraction: float | None
    decided_by: Literal["memory", "deadline", "cost", "node_limit", "pinned"]
    strategy: Literal["replicated", "sharded", "tensor-pipeline-data"]
    shards: int


class Memory(Open):
    model_state_bytes_per_accelerator: float | None
    activation_bytes_per_accelerator: float | None
    fits: bool


class Collective(Open):
    """One kind of collective in one optimiser step: its time on its link and what of it is not
    hidden behind compute."""

    collective: Literal["tensor_parallel", "pipeline", "data_parallel"]
    link: str
    seconds_per_step: float | None
    exposed_seconds_per_step: float | None
    overlap: str


class Timing(Open):
    step_seconds: float | None
    compute_seconds: float | None
    pipeline_bubble_seconds: float | None
    collectives: list[Collective]
    scaling_efficiency: float | None
    exposed_communication_fraction: float | None
    network_gbps_needed_for_95pct: float | None
    failure_overhead_fraction: float | None
    checkpoint_interval_hours: float | None
    wall_clock_days: float | None
    data_staging_days: float | None
    accelerator_hours: float | None


class Energy(Open):
    it_kwh: float | None
    facility_kwh: float | None
    peak_it_kw: float | None
    cooling_kw_thermal: float | None
    cooling_tons: float | None
    kgco2e: float | None


class CostLine(Open):
    """One cost line of one instance; `incremental_amount` is what the line adds on the incremental
    view (an owned site's fixed lines count only for nodes beyond its free capacity)."""

    item: str
    amount: float | None
    incremental_amount: float | None = None
    basis: str


class Cost(Open):
    """An option's cost (model.md §6). `total` and `per_instance_total`: one instance in the view
    that ranks (`view`, the request's `options.owned_cost_view`); `full_total` and
    `incremental_total`: one instance in each view; `programme_total`: every instance of a
    recurring campaign in the ranking view, commitments bought whole, capital in its annuity;
    `npv`: the present value of `cash_flow` at the catalog's cost of capital. Quotes stored before
    these fields existed lack them."""

    currency: str
    view: Literal["full", "incremental"] = "full"
    total: float | None
    per_instance_total: float | None = None
    programme_total: float | None = None
    npv: float | None = None
    full_total: float | None = None
    incremental_total: float | None = None
    per_accelerator_hour: float | None
    lines: list[CostLine]


class CashFlowYear(Open):
    """Money paid in one year of the programme, in the ranking view: capital (a new build's
    purchase, its residual back as a negative amount; a chargeback's capital line), operating and
    rent (rented compute and committed fees)."""

    year: int
    capital: float | None
    operating: float | None
    rent: float | None
    total: float | None
    currency: str


class Option(Open):
    rank: int | None
    venue: Venue
    term: str
    feasible: bool
    reasons: list[str]
    layout: Layout
    memory: Memory
    timing: Timing
    energy: Energy
    cost: Cost
    cash_flow: list[CashFlowYear] = []
    term_figures: dict[str, float | None]


class OtherView(Open):
    view: Literal["full", "incremental"]
    venue: str
    term: str


class Recommendation(Open):
    """The first option; `views_agree` says whether the other view of owned cost (`other_view`)
    ranks the same option first."""

    option_index: int
    venue: str
    term: str
    why: str
    view: Literal["full", "incremental"] | None = None
    views_agree: bool | None = None
    other_view: OtherView | None = None


class BreakEvenRow(Open):
    """An owned site against a rented option that passed every screen (model.md §8).
    `rented_per_accelerator_hour` = `rented_listed_per_accelerator_hour` (a committed term's at
    full use of the commitment) × `conversion` (rented accelerator-hours doing the work of one of
    the site's), as `conversion_basis` shows. Payback is discounted, for the demand stated in
    `payback_basis`; null with `payback_reason` where there is none within the depreciation life."""

    site: str
    offer: str
    term: str
    currency: str
    rented_per_accelerator_hour: float | None
    rented_listed_per_accelerator_hour: float | None
    conversion: float | None = None
    conversion_basis: str = ""
    owned_fixed_per_month: float | None
    owned_variable_per_accelerator_hour: float | None
    utilisation: float | None
    accelerator_hours_per_year: float | None
    campaigns_per_year: float | None
    payback_months: float | None
    reason: str | None
    payback_reason: str | None
    payback_demand_accelerator_hours_per_month: float | None = None
    payback_basis: str = ""
    note: str | None


class LeftOut(Open):
    """A rented option with no break-even row: it failed a screen."""

    offer: str
    term: str
    reasons: list[str]


class CurvePoint(Open):
    utilisation: float
    owned_per_accelerator_hour: float | None


class Curve(Open):
    site: str
    currency: str
    points: list[CurvePoint]


class AssumptionOut(Open):
    name: str
    value: float
    unit: str
    source: str


class WorkOut(Open):
    training_flops: float | None
    hardware_flops: float | None
    flops_per_token: float | None
    runs_total_flops: float | None
    instances: float | None
    programme_months: float | None = None


class QuoteOut(Open):
    id: str | None
    created_at: str
    catalog_id: str | None
    catalog_hash: str
    model_version: str
    request: dict[str, Any]
    currency: str
    work: WorkOut
    options: list[Option]
    recommendation: Recommendation | None
    next_steps: list[str]
    breakeven: list[BreakEvenRow]
    breakeven_left_out: list[LeftOut] = []
    curves: list[Curve]
    assumptions: list[AssumptionOut]
    cautions: list[str]


class PlanCost(Open):
    """Present cost of a plan over the demand samples."""

    present_cost_mean: float
    present_cost_p5: float
    present_cost_p50: float
    present_cost_p95: float
    currency: str


class StagedCost(PlanCost):
    saving_vs_single_purchase: float


class SinglePurchase(PlanCost):
    """The best fleet bought (or retired to) now and held for the whole horizon."""

    nodes: int
    added: int
    retired: int


class PlanStage(Open):
    """A run of decision points holding one fleet: from `month` to `until_month` (1-based)."""

    month: int
    until_month: int
    nodes: int
    added: int
    retired: int
    purchase: float
    resale: float
    rented_accelerator_hours: float
    owned_utilisation: float | None
    currency: str


class PlanYear(Open):
    year: int
    capital: float
    operating: float
    rent: float
    total: float
    rented_accelerator_hours: float
    currency: str


class FleetPlanOut(Open):
    """A fleet plan (api.md, Fleet plans): the staged plan from today's fleet, the single purchase
    for comparison, every candidate size, the cash flow by year and the months of the staged plan."""

    id: str
    created_at: str
    catalog_id: str
    site: str
    offer: str
    term: str
    currency: str
    horizon_months: int
    nodes_owned: int
    decision_every_months: int
    stages: list[PlanStage]
    staged: StagedCost
    single_purchase: SinglePurchase
    cash_flow: list[PlanYear]
    value_at_horizon_end: float
    candidates: list[dict[str, Any]]
    best_nodes: int
    probability_owning_beats_renting: float | None
    months: list[dict[str, Any]]
    assumptions: list[AssumptionOut]
    cautions: list[str]


class QuoteSummary(Open):
    id: str
    created_at: str
    team: str
    campaign_name: str
    catalog_id: str
    model_version: str
    recommendation: Recommendation | None
    recommended_option: str | None
    programme_total: float | None
    currency: str | None
    links: dict[str, str]


class QuotePage(Open):
    items: list[QuoteSummary]
    next_cursor: str | None


class OptionRow(Open):
    """One option in the summary view: its whole layout and every cost total, without cost lines."""

    rank: int | None
    venue: Venue
    term: str
    feasible: bool
    reasons: list[str]
    layout: dict[str, Any]
    wall_clock_days: float | None
    accelerator_hours: float | None
    cost: dict[str, Any]


class BreakEvenBrief(Open):
    site: str
    offer: str
    term: str
    utilisation: float | None
    payback_months: float | None
    reason: str | None


class QuoteSummaryView(Open):
    """`?view=summary`: what a portal shows, about a fifth of the full document."""

    view: Literal["summary"]
    id: str | None
    created_at: str
    catalog_id: str | None
    catalog_hash: str
    model_version: str
    currency: str
    campaign: dict[str, Any]
    recommendation: Recommendation | None
    options: list[OptionRow]
    breakeven: list[BreakEvenBrief]
    next_steps: list[str]
    cautions: list[str]
    links: dict[str, str]


class OptionChange(Open):
    option: str
    a: dict[str, Any] | None
    b: dict[str, Any] | None
    changed: bool


class Comparison(Open):
    """What changed from quote `a` to quote `b`."""

    a: dict[str, Any]
    b: dict[str, Any]
    changed: bool
    recommendation: dict[str, Any]
    inputs_changed: list[dict[str, Any]]
    inputs_changed_total: int
    currency_changed: bool
    options: list[OptionChange]
    breakeven_changed: list[dict[str, Any]]


class Requoted(Open):
    quote: dict[str, Any]
    comparison: Comparison


class SweepSummary(Open):
    id: str
    status: str
    created_at: str
    finished_at: str | None
    catalog_id: str
    progress: dict[str, int]
    links: dict[str, str]


class SweepPage(Open):
    items: list[SweepSummary]
    next_cursor: str | None


class FleetPlanSummary(Open):
    id: str
    created_at: str
    catalog_id: str
    site: str | None
    offer: str | None
    term: str | None
    best_nodes: int | None
    currency: str | None
    links: dict[str, str]


class FleetPlanPage(Open):
    items: list[FleetPlanSummary]
    next_cursor: str | None


class Difference(Open):
    path: str
    stored: Any
    recomputed: Any


class Recomputation(Open):
    quote_id: str
    catalog_id: str
    model_version_stored: str
    model_version_now: str
    changed: bool
    differences: list[Difference]
    differences_total: int


class CatalogSummary(Open):
    id: str
    name: str
    currency: str
    content_hash: str
    created_at: str
    status: Literal["active", "retired"]
    default: bool
    effective_from: str | None
    effective_until: str | None


class CatalogOut(CatalogSummary):
    content: dict[str, Any]


class CatalogPage(Open):
    items: list[CatalogSummary]
    next_cursor: str | None


class Problem(Open):
    """RFC 9457 problem details."""

    type: str
    title: str
    status: int
    detail: str
    errors: list[dict[str, str]] | None = None
