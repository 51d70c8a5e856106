"""The catalog as the core sees it: hardware, sites, rental offers and finance settings.

Built once from the validated edge model (catalog.md); plain frozen dataclasses of numbers.
"""

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Literal

NetworkPath = Literal["overlay", "direct", "rdma"]


@dataclass(frozen=True)
class Accelerator:
    id: str
    memory_gb: float  # binary gigabytes (GiB), as accelerator memory is sold
    peak_tflops: Mapping[str, float]
    utilisation: float


@dataclass(frozen=True)
class NodeType:
    id: str
    accelerator: Accelerator
    accelerators_per_node: int
    intra_node_gbps: float
    network_gbps: float
    power_kw_peak: float
    power_kw_idle: float
    checkpoint_write_gbps: float
    mtbf_hours: float | None = None
    # Measured per-accelerator speed of this type relative to another node type, by that type's id.
    measured_relative_speed: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class NodeCapex:
    node_price: float
    network_per_node: float = 0.0
    storage_per_node: float = 0.0
    install_per_node: float = 0.0

    @property
    def per_node(self) -> float:
        return self.node_price + self.network_per_node + self.storage_per_node + self.install_per_node


@dataclass(frozen=True)
class Colocation:
    price_per_kw_month: float
    kind: Literal["colocation"] = "colocation"


FacilityAllocation = Literal["installed", "capacity"]


@dataclass(frozen=True)
class OwnedHall:
    capex_per_kw: float
    life_years: float
    fixed_cost_per_year: float
    kind: Literal["owned"] = "owned"
    # What shares the fixed yearly cost: the installed IT load (owned nodes at peak) or the IT
    # power the hall can feed.
    allocate: FacilityAllocation = "installed"


Facility = Colocation | OwnedHall


@dataclass(frozen=True)
class Site:
    id: str
    jurisdiction: str
    node_type: NodeType
    nodes_owned: int
    nodes_max: int
    network_path: NetworkPath
    capex: NodeCapex
    depreciation_months: int
    residual_fraction: float
    maintenance_fraction_per_year: float
    staff_cost_per_node_year: float
    facility: Facility
    pue: float
    electricity_price_per_kwh: float
    grid_kgco2e_per_kwh: float
    utilisation_planned: float
    utilisation_current: float
    power_capacity_kw: float | None = None
    cooling_capacity_kw: float | None = None
    path_efficiency: float | None = None
    name: str = ""
    egress_per_gb: float = 0.0  # what the site pays to send data out (its network contract)
    wan_gbps: float | None = None  # the site's link to the outside, for moving datasets
    storage_write_gbps: float | None = None  # what the shared storage takes for checkpoints, all nodes together
    resale_fraction: float | None = None  # share of node_price a retired node fetches; None: the default


@dataclass(frozen=True)
class CommittedTerm:
    months: int
    per_accelerator_hour: float
    upfront_fraction: float = 0.0


@dataclass(frozen=True)
class InterruptibleTerm:
    per_accelerator_hour: float
    mean_hours_between_interruptions: float


@dataclass(frozen=True)
class Offer:
    id: str
    provider: str
    region: str
    jurisdiction: str
    node_type: NodeType
    nodes_max: int
    network_path: NetworkPath
    on_demand_per_accelerator_hour: float | None = None
    committed: tuple[CommittedTerm, ...] = ()
    interruptible: InterruptibleTerm | None = None
    storage_per_gb_month: float = 0.0
    ingress_per_gb: float = 0.0
    egress_per_gb: float = 0.0
    ingress_gbps: float | None = None
    pue: float | None = None
    grid_kgco2e_per_kwh: float | None = None
    path_efficiency: float | None = None
    storage_write_gbps: float | None = None


@dataclass(frozen=True)
class Catalog:
    name: str
    currency: str
    cost_of_capital_annual: float
    accelerators: Mapping[str, Accelerator]
    node_types: Mapping[str, NodeType]
    sites: tuple[Site, ...]
    offers: tuple[Offer, ...]
    jurisdiction_groups: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    effective_from: str | None = None
