"""The fleet-plan request (api.md): a site, the rented offer and term for the overflow, a demand
forecast, candidate fleet sizes, and the Monte Carlo settings."""

from typing import Annotated

from pydantic import Field, model_validator

from service.contract.common import CatalogId, Identifier, PositiveFloat, QuoteId, Strict
from service.domain.limits import MAX_COUNT, MAX_NODES

MAX_SEED = 2**63 - 1


class DemandIn(Strict):
    accelerator_hours_first_month: PositiveFloat | None = Field(
        None, description="the site's accelerator-hours demanded in the first month")
    doubling_months: PositiveFloat | None = Field(None, description="absent: flat demand")
    spread: Annotated[float, Field(ge=0, le=3, allow_inf_nan=False)] = Field(
        0.0, description="lognormal sigma of each month's demand (mean kept)")
    monthly: list[Annotated[float, Field(ge=0, le=1e15, allow_inf_nan=False)]] | None = Field(
        None, min_length=1, max_length=600, description="an explicit series, one value per month")
    from_quotes: list[QuoteId] | None = Field(
        None, min_length=1, max_length=200, description="stored quotes whose recurring campaigns make the demand")

    @model_validator(mode="after")
    def _one_source(self) -> "DemandIn":
        given = [self.accelerator_hours_first_month is not None, self.monthly is not None,
                 self.from_quotes is not None]
        if sum(given) != 1:
            raise ValueError("give exactly one of accelerator_hours_first_month, monthly, from_quotes")
        if self.doubling_months is not None and self.accelerator_hours_first_month is None:
            raise ValueError("doubling_months goes with accelerator_hours_first_month")
        return self


class CandidatesIn(Strict):
    min: Annotated[int, Field(ge=0, le=MAX_NODES)] = 0
    max: Annotated[int, Field(ge=0, le=MAX_NODES)]
    step: Annotated[int, Field(ge=1, le=MAX_NODES)] = 1

    @model_validator(mode="after")
    def _ordered(self) -> "CandidatesIn":
        if self.max < self.min:
            raise ValueError("max must not be below min")
        return self

    @property
    def count(self) -> int:
        return (self.max - self.min) // self.step + 1


class FleetPlanIn(Strict):
    catalog_id: CatalogId | None = None
    site: Identifier
    offer: Identifier
    term: Annotated[str, Field(pattern=r"^(on_demand|interruptible|committed_\d+m)$")] = "on_demand"
    horizon_months: Annotated[int, Field(ge=1, le=240)] = 48
    demand: DemandIn
    candidate_nodes: CandidatesIn
    samples: Annotated[int, Field(ge=1, le=MAX_COUNT)] = 1000
    seed: Annotated[int, Field(ge=0, le=MAX_SEED)] = 0
    max_utilisation: Annotated[float, Field(gt=0, le=1, allow_inf_nan=False)] = 0.85
    decision_every_months: Annotated[int, Field(ge=1, le=240)] = Field(
        12, description="months between the points at which the owned fleet may grow or retire nodes")
    precision: str = Field("bf16", min_length=1, max_length=20, pattern=r"^[A-Za-z0-9._-]+$")
