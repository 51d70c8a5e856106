"""The sweep request (api.md): a base quote request and the inputs to vary, as a grid or as
distributions, validated field by field."""

from typing import Annotated, Literal

from pydantic import AfterValidator, Field, model_validator

from service.contract.common import Strict, unsigned_zero
from service.contract.request import QuoteRequestIn
from service.domain.distributions import Distribution
from service.domain.limits import MAX_COUNT

MAX_SEED = 2**63 - 1


class DistributionIn(Strict):
    kind: Literal["uniform", "triangular", "normal", "lognormal", "choice"]
    low: float | None = Field(None, allow_inf_nan=False)
    high: float | None = Field(None, allow_inf_nan=False)
    mode: float | None = Field(None, allow_inf_nan=False)
    mean: float | None = Field(None, allow_inf_nan=False)
    sd: Annotated[float, Field(ge=0, allow_inf_nan=False), AfterValidator(unsigned_zero)] | None = None
    sigma: Annotated[float, Field(ge=0, allow_inf_nan=False), AfterValidator(unsigned_zero)] | None = None
    values: list[Annotated[float, Field(allow_inf_nan=False)]] | None = Field(None, min_length=1, max_length=10_000)
    weights: list[Annotated[float, Field(ge=0, allow_inf_nan=False)]] | None = None

    @model_validator(mode="after")
    def _parameters(self) -> "DistributionIn":
        needed = {"uniform": ("low", "high"), "triangular": ("low", "mode", "high"), "normal": ("mean", "sd"),
                  "lognormal": ("mean", "sigma"), "choice": ("values",)}[self.kind]
        missing = [name for name in needed if getattr(self, name) is None]
        if missing:
            raise ValueError(f"a {self.kind} distribution needs {', '.join(missing)}")
        if self.kind in ("uniform", "triangular") and not (self.low or 0) <= (self.high or 0):
            raise ValueError("low must not exceed high")
        if self.kind == "triangular" and not (self.low or 0) <= (self.mode or 0) <= (self.high or 0):
            raise ValueError("mode must lie between low and high")
        if self.kind == "normal" and self.low is not None and self.high is not None and self.low > self.high:
            raise ValueError("low must not exceed high")
        if self.weights is not None:
            if self.values is None or len(self.weights) != len(self.values):
                raise ValueError("weights need one entry per value")
            if sum(self.weights) <= 0:
                raise ValueError("weights must not all be zero")
        return self

    def to_domain(self) -> Distribution:
        return Distribution(
            kind=self.kind, low=self.low, high=self.high, mode=self.mode or 0.0, mean=self.mean or 0.0,
            sd=1.0 if self.sd is None else self.sd, sigma=1.0 if self.sigma is None else self.sigma,
            values=tuple(self.values or ()), weights=None if self.weights is None else tuple(self.weights))


class TornadoIn(Strict):
    swing: Annotated[float, Field(gt=0, lt=1, allow_inf_nan=False)] = 0.2


class SweepIn(Strict):
    base: QuoteRequestIn
    grid: dict[str, list[Annotated[float, Field(allow_inf_nan=False)]]] | None = Field(
        None, description="path → values; every combination is a scenario")
    samples: Annotated[int, Field(gt=0, le=MAX_COUNT)] | None = Field(None, description="Monte Carlo scenarios")
    seed: Annotated[int, Field(ge=0, le=MAX_SEED)] = 0
    distributions: dict[str, DistributionIn] | None = None
    tornado: TornadoIn | None = None

    @model_validator(mode="after")
    def _one_kind(self) -> "SweepIn":
        if self.grid is not None and (self.samples is not None or self.distributions is not None):
            raise ValueError("give either a grid, or samples with distributions, not both")
        if self.grid is None and (self.samples is None or not self.distributions):
            raise ValueError("give a grid, or samples with distributions")
        if self.grid is not None and (not self.grid or any(len(v) == 0 for v in self.grid.values())):
            raise ValueError("every grid path needs at least one value")
        return self
