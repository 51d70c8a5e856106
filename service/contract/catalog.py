"""The catalog as uploaded (catalog.md), validated field by field, then turned into the domain."""

from collections import Counter
from datetime import date
from typing import Annotated, Any, Literal

import pycountry
from pydantic import (
    BeforeValidator,
    Field,
    SerializerFunctionWrapHandler,
    field_validator,
    model_serializer,
    model_validator,
)

from service.contract.common import (
    Amount,
    CarbonIntensity,
    CountryCode,
    CurrencyCode,
    Factor,
    Fraction,
    Gbps,
    Hours,
    Identifier,
    Kilowatts,
    Months,
    Name,
    Nodes,
    PositiveAmount,
    Strict,
    Utilisation,
)
from service.domain import catalog as domain
from service.domain.limits import MAX_ITEMS, MAX_NODES


class ReferenceProblems(ValueError):
    """Several catalog problems found together, each with its own field path."""

    def __init__(self, problems: list[tuple[str, str]]) -> None:
        super().__init__("; ".join(f"{field}: {reason}" for field, reason in problems))
        self.problems = problems


def _known_country(code: str) -> str:
    if pycountry.countries.get(alpha_2=code) is None:
        raise ValueError(f"{code!r} is not an ISO 3166-1 alpha-2 country code")
    return code


def _date_text(value: object) -> object:
    """Lax date parsing would read a number as a Unix time; a date is written as text (2027-01-01)."""
    if isinstance(value, bool | int | float):
        raise ValueError("give an ISO 8601 date, e.g. 2027-01-01")
    return value


GroupName = Annotated[str, Field(min_length=1, max_length=40, pattern=r"^[A-Za-z0-9._-]+$")]


class Finance(Strict):
    cost_of_capital_annual: Annotated[float, Field(ge=0, le=1, allow_inf_nan=False)] = 0.08


class AcceleratorIn(Strict):
    id: Identifier
    memory_gb: Annotated[float, Field(
        gt=0, le=1e6, allow_inf_nan=False,
        description="memory per accelerator in binary gigabytes (GiB, 2^30 bytes), as accelerator memory is sold")]
    peak_tflops: dict[Annotated[str, Field(min_length=1, max_length=20)],
                      Annotated[float, Field(gt=0, le=1e9, allow_inf_nan=False)]] = Field(
        min_length=1, max_length=20, description="by precision, e.g. bf16")
    utilisation: Utilisation = Field(description="model- or hardware-FLOPs utilisation, in (0, 1]")


class NodeTypeIn(Strict):
    id: Identifier
    accelerator: Identifier
    accelerators_per_node: Annotated[int, Field(gt=0, le=4096)]
    intra_node_gbps: Gbps
    network_gbps: Gbps
    power_kw_peak: Kilowatts
    power_kw_idle: Annotated[float, Field(ge=0, le=1e7, allow_inf_nan=False)]
    checkpoint_write_gbps: Gbps
    mtbf_hours: Hours | None = None
    measured_relative_speed: dict[Identifier, Factor] = Field(default_factory=dict, max_length=MAX_ITEMS)

    @model_validator(mode="after")
    def _idle_below_peak(self) -> "NodeTypeIn":
        if self.power_kw_idle > self.power_kw_peak:
            raise ValueError("power_kw_idle must not exceed power_kw_peak")
        return self


class CapexIn(Strict):
    node_price: PositiveAmount
    network_per_node: Amount = 0.0
    storage_per_node: Amount = 0.0
    install_per_node: Amount = 0.0


class ColocationIn(Strict):
    kind: Literal["colocation"]
    price_per_kw_month: Amount


class OwnedHallIn(Strict):
    kind: Literal["owned"]
    capex_per_kw: Amount
    life_years: Annotated[float, Field(gt=0, le=100, allow_inf_nan=False)]
    fixed_cost_per_year: Amount = 0.0
    allocate: Literal["installed", "capacity"] = Field(
        "installed", description="what shares the fixed yearly cost: the installed IT load (owned nodes at peak "
                                 "kW) or the IT power the hall can feed (power capacity / PUE)")


class SiteIn(Strict):
    id: Identifier
    name: Annotated[str, Field(max_length=200, pattern=r"^[^\x00-\x1f\x7f]*$")] = ""
    jurisdiction: CountryCode
    node_type: Identifier
    nodes_owned: Nodes
    nodes_max: Nodes
    network_path: Literal["overlay", "direct", "rdma"] = "rdma"
    path_efficiency: Annotated[float, Field(gt=0, le=1)] | None = None
    capex: CapexIn
    depreciation_months: Months
    residual_fraction: Fraction = 0.0
    maintenance_fraction_per_year: Fraction = 0.0
    staff_cost_per_node_year: Amount = 0.0
    facility: Annotated[ColocationIn | OwnedHallIn, Field(discriminator="kind")]
    pue: Annotated[float, Field(ge=1, le=5)]
    electricity_price_per_kwh: Amount
    grid_kgco2e_per_kwh: CarbonIntensity = 0.0
    power_capacity_kw: Kilowatts | None = None
    cooling_capacity_kw: Kilowatts | None = None
    utilisation_planned: Utilisation
    utilisation_current: Fraction = 0.0
    egress_per_gb: Amount = Field(0.0, description="what the site pays to send data out")
    wan_gbps: Gbps | None = Field(None, description="the site's link to the outside")
    storage_write_gbps: Gbps | None = Field(
        None, description="the shared storage's write bandwidth that checkpoints of all nodes share (default in "
                          "assumptions)")
    resale_fraction: Fraction | None = Field(
        None, description="share of node_price a retired node fetches (fleet plans); default under assumptions")

    _country = field_validator("jurisdiction")(_known_country)

    @model_validator(mode="after")
    def _fleet_within_site(self) -> "SiteIn":
        if self.nodes_owned > self.nodes_max:
            raise ValueError("nodes_owned must not exceed nodes_max")
        return self


class CommittedIn(Strict):
    months: Months
    per_accelerator_hour: PositiveAmount
    upfront_fraction: Fraction = 0.0


class InterruptibleIn(Strict):
    per_accelerator_hour: PositiveAmount
    mean_hours_between_interruptions: Hours


class OfferIn(Strict):
    id: Identifier
    provider: Name
    region: Annotated[str, Field(min_length=1, max_length=100, pattern=r"^[^\x00-\x1f\x7f]+$")]
    jurisdiction: CountryCode
    node_type: Identifier
    nodes_max: Annotated[int, Field(gt=0, le=MAX_NODES)]
    network_path: Literal["overlay", "direct", "rdma"] = "direct"
    path_efficiency: Annotated[float, Field(gt=0, le=1)] | None = None
    on_demand_per_accelerator_hour: PositiveAmount | None = None
    committed: list[CommittedIn] = Field(default_factory=list, max_length=20)
    interruptible: InterruptibleIn | None = None
    storage_per_gb_month: Amount = 0.0
    ingress_per_gb: Amount = 0.0
    storage_write_gbps: Gbps | None = Field(
        None, description="the shared storage's write bandwidth that checkpoints of all nodes share (default in "
                          "assumptions)")
    egress_per_gb: Amount = 0.0
    ingress_gbps: Gbps | None = None
    pue: Annotated[float, Field(ge=1, le=5)] | None = None
    grid_kgco2e_per_kwh: CarbonIntensity | None = None

    _country = field_validator("jurisdiction")(_known_country)

    @model_validator(mode="after")
    def _some_term(self) -> "OfferIn":
        if self.on_demand_per_accelerator_hour is None and not self.committed and self.interruptible is None:
            raise ValueError("an offer needs at least one of on_demand_per_accelerator_hour, committed, "
                             "interruptible")
        months = [c.months for c in self.committed]
        if len(months) != len(set(months)):
            raise ValueError("committed terms must have distinct months")
        return self


class DefaultCatalogIn(Strict):
    """`PUT /v1/catalogs/default`: which catalog requests that name none use."""

    catalog_id: Identifier


class CatalogStatusIn(Strict):
    """`PATCH /v1/catalogs/{id}`: a catalog's lifecycle, the one thing about it that changes."""

    status: Literal["active", "retired"]


_DOMAIN_FORM = "_domain_form"  # where a catalog keeps its domain form (`CatalogIn.to_domain`), not a field


class CatalogIn(Strict):
    name: Name
    currency: CurrencyCode
    effective_from: Annotated[date | None, Field(strict=False, description="first day a quote may use it (ISO 8601)"),
                              BeforeValidator(_date_text)] = None
    effective_until: Annotated[date | None, Field(
        strict=False, description="last day a quote may use it (inclusive, ISO 8601); absent: no end"),
        BeforeValidator(_date_text)] = None
    jurisdiction_groups: dict[GroupName, Annotated[list[CountryCode], Field(max_length=300)]] = Field(
        default_factory=dict, max_length=100)
    finance: Finance = Field(default_factory=Finance)
    accelerators: list[AcceleratorIn] = Field(min_length=1, max_length=MAX_ITEMS)
    node_types: list[NodeTypeIn] = Field(min_length=1, max_length=MAX_ITEMS)
    sites: list[SiteIn] = Field(default_factory=list, max_length=MAX_ITEMS)
    offers: list[OfferIn] = Field(default_factory=list, max_length=MAX_ITEMS)

    @field_validator("currency")
    @classmethod
    def _known_currency(cls, code: str) -> str:
        if pycountry.currencies.get(alpha_3=code) is None:
            raise ValueError(f"{code!r} is not an ISO 4217 currency code")
        return code

    @field_validator("jurisdiction_groups")
    @classmethod
    def _group_codes(cls, groups: dict[str, list[str]]) -> dict[str, list[str]]:
        for name, codes in groups.items():
            if len(name) == 2 and name.isupper():
                raise ValueError(f"group {name!r} would shadow a country code; use a longer name")
            for code in codes:
                _known_country(code)
        return groups

    @model_serializer(mode="wrap")
    def _without_open_end(self, handler: SerializerFunctionWrapHandler) -> dict[str, Any]:
        # A catalog without an end date dumps (and so hashes) as it did before the field existed.
        dumped: dict[str, Any] = handler(self)
        if dumped.get("effective_until", 0) is None:
            del dumped["effective_until"]
        return dumped

    @model_validator(mode="after")
    def _references(self) -> "CatalogIn":
        problems: list[tuple[str, str]] = []
        if self.effective_from and self.effective_until and self.effective_until < self.effective_from:
            problems.append(("effective_until", f"{self.effective_until} is before effective_from "
                                                f"{self.effective_from}"))
        for kind, items in (("accelerators", self.accelerators), ("node_types", self.node_types),
                            ("sites", self.sites), ("offers", self.offers)):
            for ident, count in Counter(item.id for item in items).items():
                if count > 1:
                    problems.append((kind, f"id {ident!r} appears {count} times"))
        for shared in sorted({s.id for s in self.sites} & {o.id for o in self.offers}):
            problems.append(("offers", f"id {shared!r} is also a site's id; venue ids must be unique"))
        accelerators = {a.id for a in self.accelerators}
        node_types = {n.id for n in self.node_types}
        for i, n in enumerate(self.node_types):
            if n.accelerator not in accelerators:
                problems.append((f"node_types.{i}.accelerator", f"unknown accelerator {n.accelerator!r}"))
            for ref in n.measured_relative_speed:
                if ref not in node_types:
                    problems.append((f"node_types.{i}.measured_relative_speed", f"unknown node type {ref!r}"))
        references = [("sites", i, s.node_type) for i, s in enumerate(self.sites)]
        references += [("offers", i, o.node_type) for i, o in enumerate(self.offers)]
        for kind, i, node_type in references:
            if node_type not in node_types:
                problems.append((f"{kind}.{i}.node_type", f"unknown node type {node_type!r}"))
        for i, s in enumerate(self.sites):
            if (isinstance(s.facility, OwnedHallIn) and s.power_capacity_kw is None and s.facility.fixed_cost_per_year
                    and (s.facility.allocate == "capacity" or s.nodes_owned == 0)):
                problems.append((f"sites.{i}.power_capacity_kw", "an owned hall's fixed cost is shared by its "
                                 "power capacity (facility.allocate capacity, or no nodes installed), so it "
                                 "must be given"))
        if problems:
            raise ReferenceProblems(problems)
        return self

    def to_domain(self) -> domain.Catalog:
        """The catalog as the domain reads it, made once: a validated catalog is frozen, and the domain only
        reads it, so the quotes against a catalog the server keeps (`usecases.catalogs.ParsedCatalogs`)
        share one. Kept with the id of the catalog it was made of, so that a copy (which copies what an
        instance holds, and may change fields) makes its own."""
        kept = self.__dict__.get(_DOMAIN_FORM)
        if kept is None or kept[0] != id(self):
            kept = id(self), self._made_domain()
            self.__dict__[_DOMAIN_FORM] = kept
        made: domain.Catalog = kept[1]
        return made

    def _made_domain(self) -> domain.Catalog:
        accelerators = {
            a.id: domain.Accelerator(a.id, a.memory_gb, dict(a.peak_tflops), a.utilisation)
            for a in self.accelerators
        }
        node_types = {
            n.id: domain.NodeType(
                id=n.id, accelerator=accelerators[n.accelerator],
                accelerators_per_node=n.accelerators_per_node, intra_node_gbps=n.intra_node_gbps,
                network_gbps=n.network_gbps, power_kw_peak=n.power_kw_peak, power_kw_idle=n.power_kw_idle,
                checkpoint_write_gbps=n.checkpoint_write_gbps, mtbf_hours=n.mtbf_hours,
                measured_relative_speed=dict(n.measured_relative_speed))
            for n in self.node_types
        }
        sites = tuple(_site(s, node_types) for s in self.sites)
        offers = tuple(_offer(o, node_types) for o in self.offers)
        return domain.Catalog(
            name=self.name, currency=self.currency,
            cost_of_capital_annual=self.finance.cost_of_capital_annual,
            accelerators=accelerators, node_types=node_types, sites=sites, offers=offers,
            jurisdiction_groups={k: tuple(v) for k, v in self.jurisdiction_groups.items()},
            effective_from=None if self.effective_from is None else self.effective_from.isoformat(),
        )


def _site(s: SiteIn, node_types: dict[str, domain.NodeType]) -> domain.Site:
    facility: domain.Facility
    if isinstance(s.facility, ColocationIn):
        facility = domain.Colocation(s.facility.price_per_kw_month)
    else:
        facility = domain.OwnedHall(s.facility.capex_per_kw, s.facility.life_years, s.facility.fixed_cost_per_year,
                                    allocate=s.facility.allocate)
    return domain.Site(
        id=s.id, name=s.name, jurisdiction=s.jurisdiction, node_type=node_types[s.node_type],
        nodes_owned=s.nodes_owned, nodes_max=s.nodes_max, network_path=s.network_path,
        path_efficiency=s.path_efficiency,
        capex=domain.NodeCapex(s.capex.node_price, s.capex.network_per_node, s.capex.storage_per_node,
                               s.capex.install_per_node),
        depreciation_months=s.depreciation_months, residual_fraction=s.residual_fraction,
        maintenance_fraction_per_year=s.maintenance_fraction_per_year,
        staff_cost_per_node_year=s.staff_cost_per_node_year, facility=facility, pue=s.pue,
        electricity_price_per_kwh=s.electricity_price_per_kwh, grid_kgco2e_per_kwh=s.grid_kgco2e_per_kwh,
        power_capacity_kw=s.power_capacity_kw, cooling_capacity_kw=s.cooling_capacity_kw,
        utilisation_planned=s.utilisation_planned, utilisation_current=s.utilisation_current,
        egress_per_gb=s.egress_per_gb, wan_gbps=s.wan_gbps, storage_write_gbps=s.storage_write_gbps,
        resale_fraction=s.resale_fraction,
    )


def _offer(o: OfferIn, node_types: dict[str, domain.NodeType]) -> domain.Offer:
    return domain.Offer(
        id=o.id, provider=o.provider, region=o.region, jurisdiction=o.jurisdiction,
        node_type=node_types[o.node_type], nodes_max=o.nodes_max, network_path=o.network_path,
        path_efficiency=o.path_efficiency, on_demand_per_accelerator_hour=o.on_demand_per_accelerator_hour,
        committed=tuple(domain.CommittedTerm(c.months, c.per_accelerator_hour, c.upfront_fraction)
                        for c in o.committed),
        interruptible=None if o.interruptible is None else domain.InterruptibleTerm(
            o.interruptible.per_accelerator_hour, o.interruptible.mean_hours_between_interruptions),
        storage_per_gb_month=o.storage_per_gb_month, ingress_per_gb=o.ingress_per_gb,
        egress_per_gb=o.egress_per_gb, ingress_gbps=o.ingress_gbps, pue=o.pue,
        grid_kgco2e_per_kwh=o.grid_kgco2e_per_kwh, storage_write_gbps=o.storage_write_gbps,
    )
