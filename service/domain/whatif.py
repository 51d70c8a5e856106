"""What-if inputs: the request fields and catalog overrides a sweep may vary, by path.

Each path names a field of the quote request (`campaign.work.tokens`) or an override of catalog
values, for every venue (`overrides.electricity_price_per_kwh`) or for one site or offer
(`overrides.sites.<id>.electricity_price_per_kwh`, `overrides.offers.<id>.on_demand_price_factor`),
with its unit, its valid range, and where the varied values go in the domain objects. Values
arrive as arrays, one element per scenario.
"""

from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields, replace
from typing import Any

import numpy as np

from service.domain import limits
from service.domain.arrays import Floats
from service.domain.campaign import (
    OFFER_OVERRIDES,
    SITE_OVERRIDES,
    Campaign,
    FlopsWork,
    MeasuredWork,
    Overrides,
    TransformerWork,
)

Setter = Callable[[Campaign, Overrides, Floats], tuple[Campaign, Overrides]]


@dataclass(frozen=True)
class InputPath:
    path: str
    unit: str
    low: float  # smallest valid value
    low_open: bool  # the low bound itself is not valid
    high: float = np.inf
    integer: bool = False
    description: str = ""

    def problems(self, values: Floats) -> str | None:
        """Why some values are out of range, or None when every value is valid."""
        bad = ~np.isfinite(values)
        bad |= (values <= self.low) if self.low_open else (values < self.low)
        bad |= values > self.high
        if self.integer:
            bad |= values != np.round(values)
        count = int(bad.sum())
        if not count:
            return None
        bound = f"{'>' if self.low_open else '≥'} {self.low:g}"
        if np.isfinite(self.high):
            bound += f" and ≤ {self.high:g}"
        kind = "whole numbers " if self.integer else ""
        return f"{count} of {values.size} values are outside the valid range ({kind}{bound})"


def _change(name: str, value: Any) -> dict[str, Any]:
    """A dataclasses.replace keyword argument built from a field name."""
    return {name: value}


def _work(kind: type, name: str) -> Setter:
    def apply(campaign: Campaign, overrides: Overrides, values: Floats) -> tuple[Campaign, Overrides]:
        if not isinstance(campaign.work, kind):
            raise LookupError(f"applies to work of kind {kind.__name__.removesuffix('Work').lower()} only")
        return replace(campaign, work=replace(campaign.work, **_change(name, values))), overrides
    return apply


def _any_work(name: str) -> Setter:
    def apply(campaign: Campaign, overrides: Overrides, values: Floats) -> tuple[Campaign, Overrides]:
        return replace(campaign, work=replace(campaign.work, **_change(name, values))), overrides
    return apply


def _nested(part: str, name: str) -> Setter:
    def apply(campaign: Campaign, overrides: Overrides, values: Floats) -> tuple[Campaign, Overrides]:
        current = getattr(campaign, part)
        if current is None:
            raise LookupError(f"the base request has no campaign.{part}")
        return replace(campaign, **_change(part, replace(current, **_change(name, values)))), overrides
    return apply


def _campaign(name: str) -> Setter:
    def apply(campaign: Campaign, overrides: Overrides, values: Floats) -> tuple[Campaign, Overrides]:
        return replace(campaign, **_change(name, values)), overrides
    return apply


def _override(name: str) -> Setter:
    def apply(campaign: Campaign, overrides: Overrides, values: Floats) -> tuple[Campaign, Overrides]:
        return campaign, replace(overrides, **_change(name, values))
    return apply


_CAMPAIGN_PATHS: tuple[tuple[InputPath, Setter], ...] = (
    (InputPath("campaign.work.parameters", "parameters", 0, True, limits.MAX_QUANTITY), _any_work("parameters")),
    (InputPath("campaign.work.tokens", "tokens", 0, True, limits.MAX_QUANTITY), _work(TransformerWork, "tokens")),
    (InputPath("campaign.work.total_flops", "FLOPs", 0, True, limits.MAX_QUANTITY), _work(FlopsWork, "total_flops")),
    (InputPath("campaign.work.samples", "samples", 0, True, limits.MAX_QUANTITY), _work(MeasuredWork, "samples")),
    (InputPath("campaign.work.samples_per_second_per_accelerator", "samples/s", 0, True, limits.MAX_QUANTITY),
     _work(MeasuredWork, "samples_per_second_per_accelerator")),
    (InputPath("campaign.work.global_batch_tokens", "tokens", 0, True, limits.MAX_QUANTITY),
     _nested("training", "global_batch_tokens")),
    (InputPath("campaign.runs.count", "runs", 1, False, limits.MAX_RUNS, integer=True), _nested("runs", "count")),
    (InputPath("campaign.runs.exploration_fraction", "fraction", 0, False, limits.MAX_EXTRA_WORK),
     _nested("runs", "exploration_fraction")),
    (InputPath("campaign.runs.evaluation_fraction", "fraction", 0, False, limits.MAX_EXTRA_WORK),
     _nested("runs", "evaluation_fraction")),
    (InputPath("campaign.deadline_days", "days", 0, True, limits.MAX_DAYS), _campaign("deadline_days")),
    (InputPath("campaign.data.dataset_tb", "TB", 0, False, limits.MAX_TB), _nested("data", "dataset_tb")),
    (InputPath("campaign.data.checkpoint_tb", "TB", 0, True, limits.MAX_TB), _nested("data", "checkpoint_tb")),
    (InputPath("campaign.data.checkpoints_kept", "checkpoints", 1, False, limits.MAX_RUNS, integer=True),
     _nested("data", "checkpoints_kept")),
    (InputPath("campaign.data.results_egress_tb", "TB", 0, False, limits.MAX_TB), _nested("data", "results_egress_tb")),
    (InputPath("campaign.recurrence.every_months", "months", 0, True, limits.MAX_MONTHS),
     _nested("recurrence", "every_months")),
    (InputPath("campaign.recurrence.for_months", "months", 0, True, limits.MAX_MONTHS),
     _nested("recurrence", "for_months")),
)

# Valid ranges of the catalog overrides (the same as the request's `overrides` object).
_OVERRIDE_RANGES: Mapping[str, InputPath] = {
    "utilisation": InputPath("overrides.utilisation", "fraction", 0, True, 1.0,
                             description="every accelerator's model- or hardware-FLOPs utilisation"),
    "electricity_price_per_kwh": InputPath("overrides.electricity_price_per_kwh", "currency/kWh", 0, False,
                                           limits.MAX_AMOUNT,
                                           description="every owned site's electricity price"),
    "electricity_price_factor": InputPath("overrides.electricity_price_factor", "factor", 0, True, limits.MAX_FACTOR,
                                          description="multiplies every owned site's electricity price"),
    "on_demand_price_factor": InputPath("overrides.on_demand_price_factor", "factor", 0, True, limits.MAX_FACTOR,
                                        description="multiplies every on-demand price"),
    "rented_price_factor": InputPath("overrides.rented_price_factor", "factor", 0, True, limits.MAX_FACTOR,
                                     description="multiplies every rented price"),
    "pue": InputPath("overrides.pue", "ratio", 1, False, 5.0, description="every owned site's PUE"),
    "cost_of_capital_annual": InputPath("overrides.cost_of_capital_annual", "fraction/year", 0, False, 1.0,
                                        description="the catalog's cost of capital"),
    "node_price_factor": InputPath("overrides.node_price_factor", "factor", 0, True, limits.MAX_FACTOR,
                                   description="multiplies every owned node's price"),
    "utilisation_planned": InputPath("overrides.utilisation_planned", "fraction", 0, True, 1.0,
                                     description="every owned site's planned utilisation"),
    "grid_kgco2e_per_kwh": InputPath("overrides.grid_kgco2e_per_kwh", "kgCO2e/kWh", 0, False, limits.MAX_KGCO2E_PER_KWH,
                                     description="every owned site's grid carbon factor"),
    "mtbf_hours": InputPath("overrides.mtbf_hours", "hours", 0, True,
                            limits.MAX_HOURS, description="every node type's MTBF"),
    "network_gbps": InputPath("overrides.network_gbps", "Gb/s", 0, True,
                              limits.MAX_GBPS, description="every node type's link"),
}

PATHS: dict[str, tuple[InputPath, Setter]] = {p.path: (p, s) for p, s in _CAMPAIGN_PATHS}
PATHS.update({spec.path: (spec, _override(name)) for name, spec in _OVERRIDE_RANGES.items()})
VENUE_OVERRIDES = {"sites": SITE_OVERRIDES, "offers": OFFER_OVERRIDES}
assert {f.name for f in fields(Overrides)} - set(VENUE_OVERRIDES) == set(_OVERRIDE_RANGES), \
    "every override has a sweep path"
assert set(SITE_OVERRIDES) | set(OFFER_OVERRIDES) <= set(_OVERRIDE_RANGES), "venue overrides are overrides"


class UnknownPath(KeyError):
    """A path no sweep can vary; the message says why."""

    def __str__(self) -> str:
        return str(self.args[0])


def venue_of(path: str) -> tuple[str, str, str] | None:
    """("sites" or "offers", venue id, override name) of a per-venue path, else None. Ids may hold
    dots; names do not."""
    for kind in VENUE_OVERRIDES:
        venue, dot, name = path.removeprefix(f"overrides.{kind}.").rpartition(".")
        if path.startswith(f"overrides.{kind}.") and dot and venue:
            return kind, venue, name
    return None


def input_path(path: str) -> tuple[InputPath, Setter]:
    """The valid range and the setter of a sweepable path; UnknownPath says what is wrong."""
    if path in PATHS:
        return PATHS[path]
    venue = venue_of(path)
    if venue is None:
        raise UnknownPath("unknown input path; see the list of sweepable paths in the README")
    kind, venue_id, name = venue
    if name not in VENUE_OVERRIDES[kind]:
        raise UnknownPath(f"{name!r} cannot be overridden per {kind[:-1]}; one of: {', '.join(VENUE_OVERRIDES[kind])}")
    spec = _OVERRIDE_RANGES[name]
    return replace(spec, path=path, description=f"{name.replace('_', ' ')} at {venue_id}"), \
        _venue_override(kind, venue_id, name)


def _venue_override(kind: str, venue_id: str, name: str) -> Setter:
    def apply(campaign: Campaign, overrides: Overrides, values: Floats) -> tuple[Campaign, Overrides]:
        venues = getattr(overrides, kind)
        changed = {**venues, venue_id: {**venues.get(venue_id, {}), name: values}}
        return campaign, replace(overrides, **_change(kind, changed))
    return apply


def apply(campaign: Campaign, overrides: Overrides, values: Mapping[str, Floats]) -> tuple[Campaign, Overrides]:
    """The campaign and overrides with each path's values in place. Raises UnknownPath (a KeyError)
    for an unknown path and LookupError for a path the base request cannot take."""
    for path, array in values.items():
        _, setter = input_path(path)
        campaign, overrides = setter(campaign, overrides, array)
    return campaign, overrides


def _override_getter(name: str) -> Callable[[Campaign, Overrides], object]:
    return lambda campaign, overrides: getattr(overrides, name)


_GETTERS: dict[str, Callable[[Campaign, Overrides], object]] = {
    "campaign.work.parameters": lambda c, o: c.work.parameters,
    "campaign.work.tokens": lambda c, o: getattr(c.work, "tokens", None),
    "campaign.work.total_flops": lambda c, o: getattr(c.work, "total_flops", None),
    "campaign.work.samples": lambda c, o: getattr(c.work, "samples", None),
    "campaign.work.samples_per_second_per_accelerator":
        lambda c, o: getattr(c.work, "samples_per_second_per_accelerator", None),
    "campaign.work.global_batch_tokens": lambda c, o: c.training.global_batch_tokens,
    "campaign.runs.count": lambda c, o: c.runs.count,
    "campaign.runs.exploration_fraction": lambda c, o: c.runs.exploration_fraction,
    "campaign.runs.evaluation_fraction": lambda c, o: c.runs.evaluation_fraction,
    "campaign.deadline_days": lambda c, o: c.deadline_days,
    "campaign.data.dataset_tb": lambda c, o: c.data.dataset_tb,
    "campaign.data.checkpoint_tb": lambda c, o: c.data.checkpoint_tb,
    "campaign.data.checkpoints_kept": lambda c, o: c.data.checkpoints_kept,
    "campaign.data.results_egress_tb": lambda c, o: c.data.results_egress_tb,
    "campaign.recurrence.every_months": lambda c, o: None if c.recurrence is None else c.recurrence.every_months,
    "campaign.recurrence.for_months": lambda c, o: None if c.recurrence is None else c.recurrence.for_months,
}
_GETTERS.update({spec.path: _override_getter(name) for name, spec in _OVERRIDE_RANGES.items()})


def base_value(campaign: Campaign, overrides: Overrides, path: str) -> float | None:
    """The base request's own value for a path, or None when it leaves it to the catalog."""
    venue = venue_of(path)
    if venue is None:
        value = _GETTERS[path](campaign, overrides)
    else:
        kind, venue_id, name = venue
        value = getattr(overrides, kind).get(venue_id, {}).get(name)
    return None if value is None else float(np.asarray(value))
