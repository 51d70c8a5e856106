"""Sweeps: every row equals the single quote with the same inputs; draws are seeded and do not
depend on the listing order or the chunk size; distributions draw what numpy's Generator draws,
with the analytic moments; the tornado sorts by effect; the scenario sample keeps exact percentiles
below its capacity and a uniform sample of scenarios above it; and a sweep that cannot run names its field.

All figures are demo data (invented ids and prices); reference values come from numpy itself
(Generator draws, np.percentile) or from closed-form moments, never from the code under test.
"""

import copy
import dataclasses
import itertools
import json
import math
import pickle
import subprocess
import sys
import threading
import zlib
from collections.abc import Iterator
from contextlib import contextmanager, nullcontext
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.contract.sweep import SweepIn
from service.domain import layout
from service.domain.arrays import percentiles
from service.domain.campaign import OFFER_OVERRIDES, SITE_OVERRIDES
from service.domain.distributions import Distribution, stream
from service.domain.evaluate import evaluate_campaign
from service.domain.gathered import GatheredGrid
from service.domain.sweep import (
    ONE_TABLE_FACTOR,
    ONE_TABLE_PATHS,
    OPTION_SCENARIOS,
    SAMPLE_FLOOR,
    SAMPLE_VALUES,
    SampledScenarios,
    ScenarioSample,
    SweepSummary,
    chunk_size,
    evaluate_chunk,
    scenario_chunks,
    tornado,
)
from service.domain.whatif import PATHS, input_path, venue_of
from service.errors import InvalidInput
from service.usecases import chunk_pool
from service.usecases.quoting import quote
from service.usecases.sweeps import PreparedSweep, SweepLimits, prepare_sweep, run, tornado_bars

EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"
CATALOG_IN = CatalogIn.model_validate(json.loads((EXAMPLES / "catalog.json").read_text(encoding="utf-8")))
CATALOG = CATALOG_IN.to_domain()


def example(name: str) -> dict[str, Any]:
    data: dict[str, Any] = json.loads((EXAMPLES / name).read_text(encoding="utf-8"))
    return data


def prepared(sweep: dict[str, Any], limits: SweepLimits | None = None) -> PreparedSweep:
    return prepare_sweep(CATALOG_IN, SweepIn.model_validate(sweep), limits or SweepLimits())


def request_with(base: dict[str, Any], inputs: dict[str, float]) -> QuoteRequestIn:
    """The single quote request equal to one sweep scenario: the base with each path's value set."""
    request = copy.deepcopy(base)
    for path, value in inputs.items():
        rule, _ = input_path(path)
        node = request
        venue = venue_of(path)
        *parents, name = ["overrides", venue[0], venue[1], venue[2]] if venue else path.split(".")
        for part in parents:
            node = node.setdefault(part, {})
        node[name] = round(value) if rule.integer else float(value)
    return QuoteRequestIn.model_validate(request)


def all_scenarios(plan_owner: PreparedSweep) -> tuple[dict[str, np.ndarray], Any]:
    """Every scenario of a small sweep in one chunk."""
    plan = plan_owner.plan
    (_, inputs), = list(scenario_chunks(plan, plan.scenarios))
    return inputs, evaluate_chunk(plan_owner.catalog, plan, inputs)


# ---- each row equals the single quote with the same inputs ---------------------------------------

OWNED_WINS_GRID = {
    "overrides.electricity_price_per_kwh": [0.05, 0.15, 0.30],
    "campaign.work.tokens": [1.0e11, 4.0e11, 2.0e12],
    "campaign.deadline_days": [7, 21, 60],
}
RECURRING_GRID = {
    "campaign.recurrence.every_months": [1, 3],
    "campaign.recurrence.for_months": [12, 36],
    "campaign.runs.count": [1, 3],
    "overrides.utilisation_planned": [0.5, 0.9],
}


def _cases() -> list[tuple[str, dict[str, Any]]]:
    demo = example("sweep-electricity-and-utilisation.json")
    demo["samples"] = 12
    return [
        ("owned-wins grid", {"base": example("campaign-owned-wins.json"), "grid": OWNED_WINS_GRID}),
        ("recurring grid", {"base": example("campaign-recurring.json"), "grid": RECURRING_GRID}),
        ("demo Monte Carlo", demo),
    ]


@pytest.mark.parametrize(("name", "sweep"), _cases(), ids=[name for name, _ in _cases()])
def test_every_scenario_equals_its_single_quote(name: str, sweep: dict[str, Any]) -> None:
    prep = prepared(sweep)
    inputs, chunk = all_scenarios(prep)
    _, rows = run(prep)
    scenarios = prep.plan.scenarios
    assert chunk.size == scenarios == len(rows)
    infeasible_seen = 0
    for s in range(scenarios):
        values = {path: float(inputs[path][s]) for path in inputs}
        request = request_with(sweep["base"], values)
        # 1. The engine on the one scenario, unrounded: equal to 1e-9 relative.
        single = evaluate_campaign(CATALOG, *request.to_domain())
        assert [o.label for o in single.options] == chunk.labels
        for k, option in enumerate(single.options):
            feasible = bool(np.asarray(option.feasible).reshape(-1)[0])
            assert feasible == bool(np.isfinite(chunk.totals[k, s])), (name, s, option.label)
            if feasible:
                expected = float(np.asarray(option.total).reshape(-1)[0])
                assert chunk.totals[k, s] == pytest.approx(expected, rel=1e-9, abs=0.0), (name, s, option.label)
            else:
                infeasible_seen += 1
        # 2. The public quote document (rounded to cents; it may add split options, sweeps never do).
        document = quote(CATALOG_IN, request)
        quoted = {f"{o['venue']['id']}/{o['term']}": o for o in document["options"] if o["venue"]["kind"] != "split"}
        assert set(quoted) == set(chunk.labels)
        for k, label in enumerate(chunk.labels):
            option = quoted[label]
            raw = chunk.totals[k, s]
            assert option["feasible"] == bool(np.isfinite(raw)), (name, s, label)
            if option["feasible"]:
                # round(x, 2) is within half a cent of x; the rest must agree to 1e-9.
                assert abs(option["cost"]["total"] - raw) <= 0.005 + 1e-9 * abs(raw), (name, s, label)
                assert rows[s]["totals"][label] == pytest.approx(option["cost"]["total"], rel=1e-9, abs=0.01)
            else:
                assert rows[s]["totals"][label] is None
        # The quote document lists options ranked; the first feasible non-split one is the cheapest.
        best = next((label for label, o in ((f"{o['venue']['id']}/{o['term']}", o) for o in document["options"])
                     if o["feasible"] and o["venue"]["kind"] != "split"), None)
        sweep_best = None if chunk.cheapest[s] < 0 else chunk.labels[int(chunk.cheapest[s])]
        assert sweep_best == best == rows[s]["cheapest"], (name, s)
        assert rows[s]["inputs"] == values
    if name == "owned-wins grid":
        assert infeasible_seen > 0  # the grid reaches infeasible options (short deadlines), so NaN is checked


# Two valid values for every sweepable path, and the base request that can take it.
EVERY_PATH: dict[str, tuple[str, list[float]]] = {
    "campaign.work.parameters": ("transformer", [5e9, 9e9]),
    "campaign.work.tokens": ("transformer", [1.5e11, 3e11]),
    "campaign.work.total_flops": ("flops", [5e21, 1e22]),
    "campaign.work.samples": ("measured", [1e9, 3e9]),
    "campaign.work.samples_per_second_per_accelerator": ("measured", [200, 400]),
    "campaign.work.global_batch_tokens": ("transformer", [2.5e5, 8e6]),  # 61 sequences cap the replicas
    "campaign.runs.count": ("transformer", [1, 3]),
    "campaign.runs.exploration_fraction": ("transformer", [0.0, 0.3]),
    "campaign.runs.evaluation_fraction": ("transformer", [0.0, 0.1]),
    "campaign.deadline_days": ("transformer", [10, 40]),
    "campaign.data.dataset_tb": ("transformer", [0, 50]),
    "campaign.data.checkpoint_tb": ("transformer", [0.05, 0.5]),
    "campaign.data.checkpoints_kept": ("transformer", [1, 5]),
    "campaign.data.results_egress_tb": ("transformer", [0, 2]),
    "campaign.recurrence.every_months": ("recurring", [1, 6]),
    "campaign.recurrence.for_months": ("recurring", [12, 48]),
    "overrides.utilisation": ("transformer", [0.3, 0.5]),
    "overrides.electricity_price_per_kwh": ("transformer", [0.0, 0.25]),
    "overrides.on_demand_price_factor": ("transformer", [0.8, 1.2]),
    "overrides.rented_price_factor": ("transformer", [0.8, 1.2]),
    "overrides.pue": ("transformer", [1.1, 1.6]),
    "overrides.cost_of_capital_annual": ("transformer", [0.0, 0.12]),
    "overrides.node_price_factor": ("transformer", [0.7, 1.3]),
    "overrides.utilisation_planned": ("transformer", [0.4, 0.95]),
    "overrides.grid_kgco2e_per_kwh": ("transformer", [0.0, 0.5]),
    "overrides.mtbf_hours": ("transformer", [5000, 50000]),
    "overrides.network_gbps": ("transformer", [100, 800]),
    "overrides.electricity_price_factor": ("transformer", [0.5, 2.0]),
}
# Every per-venue override, at one site or offer of the demo catalog, with the same values.
SITE_PATH = "overrides.sites.fjordvik-hall."
OFFER_PATH = "overrides.offers.nimbrel-ardvolly-a88."
EVERY_PATH.update({SITE_PATH + name: EVERY_PATH["overrides." + name] for name in SITE_OVERRIDES})
EVERY_PATH.update({OFFER_PATH + name: EVERY_PATH["overrides." + name] for name in OFFER_OVERRIDES})


def base_for(kind: str) -> dict[str, Any]:
    if kind == "recurring":
        return example("campaign-recurring.json")
    base = example("campaign-owned-wins.json")
    work = base["campaign"]["work"]
    if kind == "flops":
        base["campaign"]["work"] = {"kind": "flops", "total_flops": 8e21, "parameters": work["parameters"],
                                    "global_batch_tokens": work["global_batch_tokens"]}
    elif kind == "measured":
        base["campaign"]["work"] = {"kind": "measured", "reference_node_type": "a88-x8", "samples": 2e9,
                                    "samples_per_second_per_accelerator": 300, "parameters": work["parameters"]}
    return base


def test_the_path_table_covers_every_sweepable_path() -> None:
    assert {p for p in EVERY_PATH if venue_of(p) is None} == set(PATHS)
    assert {p.rpartition(".")[2] for p in EVERY_PATH if p.startswith(SITE_PATH)} == set(SITE_OVERRIDES)
    assert {p.rpartition(".")[2] for p in EVERY_PATH if p.startswith(OFFER_PATH)} == set(OFFER_OVERRIDES)


def test_a_per_site_electricity_distribution_changes_only_that_sites_totals() -> None:
    # Norway and Germany no longer share one draw: fjordvik-hall's price varies, every other
    # option (rhine-campus's included) keeps its base total in every row.
    _, rows = run(prepared(owned_wins(samples=200, seed=3, distributions={
        SITE_PATH + "electricity_price_per_kwh": {"kind": "uniform", "low": 0.03, "high": 0.12}})))
    assert len(rows) == 200
    labels = rows[0]["totals"].keys()
    varying = {label for label in labels if len({row["totals"][label] for row in rows}) > 1}
    assert varying and all(label.startswith("fjordvik-hall/") for label in varying), varying
    assert any(label.startswith("rhine-campus/") for label in labels)
    # Each row is the single quote with that price at fjordvik-hall only.
    for row in rows[:3]:
        value = row["inputs"][SITE_PATH + "electricity_price_per_kwh"]
        single = evaluate_campaign(CATALOG, *request_with(owned_wins()["base"], {
            SITE_PATH + "electricity_price_per_kwh": value}).to_domain())
        for option in single.options:
            if bool(np.asarray(option.feasible).reshape(-1)[0]):
                assert row["totals"][option.label] == pytest.approx(float(np.asarray(option.total).reshape(-1)[0]),
                                                                    abs=0.006)


def test_a_venues_factor_multiplies_the_global_one_and_its_own_value_replaces_the_global_value() -> None:
    base = owned_wins()["base"]
    def totals(overrides: dict[str, Any]) -> dict[str, float]:
        request = QuoteRequestIn.model_validate({**base, "overrides": overrides})
        return {o.label: float(np.asarray(o.total).reshape(-1)[0])
                for o in evaluate_campaign(CATALOG, *request.to_domain()).options}
    both = totals({"on_demand_price_factor": 0.8, "offers": {"nimbrel-ardvolly-a88": {"on_demand_price_factor": 1.5}}})
    product = totals({"offers": {"nimbrel-ardvolly-a88": {"on_demand_price_factor": 1.2}}})
    assert both["nimbrel-ardvolly-a88/on_demand"] == pytest.approx(product["nimbrel-ardvolly-a88/on_demand"],
                                                                   rel=1e-12)
    assert both["tidewell-halvert-a88/on_demand"] == pytest.approx(
        totals({"on_demand_price_factor": 0.8})["tidewell-halvert-a88/on_demand"], rel=1e-12)
    local = totals({"electricity_price_per_kwh": 0.3, "sites": {"rhine-campus": {"electricity_price_per_kwh": 0.19}}})
    plain = totals({"electricity_price_per_kwh": 0.3})
    assert local["rhine-campus/owned_chargeback"] == pytest.approx(totals({})["rhine-campus/owned_chargeback"],
                                                                   rel=1e-12)  # 0.19 is its catalog price
    assert local["fjordvik-hall/owned_chargeback"] == pytest.approx(plain["fjordvik-hall/owned_chargeback"],
                                                                    rel=1e-12)


def test_unknown_venues_and_fields_of_per_venue_paths_are_named() -> None:
    found = problems(owned_wins(samples=10, distributions={
        "overrides.sites.nowhere.pue": {"kind": "uniform", "low": 1.1, "high": 1.3},
        "overrides.offers.nimbrel-ardvolly-a88.pue": {"kind": "uniform", "low": 1.1, "high": 1.3},
        "overrides.offers.fjordvik-hall.rented_price_factor": {"kind": "uniform", "low": 0.9, "high": 1.1}}))
    assert "no owned site 'nowhere'" in found["distributions.overrides.sites.nowhere.pue"]
    assert "cannot be overridden per offer" in found["distributions.overrides.offers.nimbrel-ardvolly-a88.pue"]
    assert "no rental offer 'fjordvik-hall'" in found[
        "distributions.overrides.offers.fjordvik-hall.rented_price_factor"]
    found = problems(owned_wins(grid={SITE_PATH + "pue": [0.5, 1.2]}))
    assert "outside the valid range" in found["grid." + SITE_PATH + "pue"]


@pytest.mark.parametrize("path", sorted(EVERY_PATH))
def test_each_path_varied_alone_equals_its_single_quotes(path: str) -> None:
    kind, values = EVERY_PATH[path]
    chunk, carbon = swept_as_single_quotes(base_for(kind), path, values)
    if path.endswith(".grid_kgco2e_per_kwh"):  # moves the carbon of owned sites, not their cost
        assert np.array_equal(chunk.totals[:, 0], chunk.totals[:, 1], equal_nan=True)
        assert carbon[0] != carbon[1]
    else:  # the two values change at least one option's total or feasibility, or the path would do nothing
        assert not np.array_equal(chunk.totals[:, 0], chunk.totals[:, 1], equal_nan=True), path


@pytest.mark.parametrize(("kind", "path", "values"), [
    ("flops", "campaign.work.total_flops", [2e21, 5e21, 1e22, 3e22]),
    ("measured", "campaign.work.samples", [5e8, 1e9, 3e9, 9e9])])
def test_work_without_a_parameter_count_swept_under_a_deadline_equals_its_single_quotes(
        kind: str, path: str, values: list[float]) -> None:
    # Without a parameter count there are no tokens: a run is one step, so its FLOPs are an input of
    # the step (the sweep crashed on the one-table deadline search), and there is no checkpoint to
    # size (every wall clock was NaN).
    base = base_for(kind)
    del base["campaign"]["work"]["parameters"]
    base["campaign"]["data"].pop("checkpoint_tb", None)
    assert base["campaign"]["deadline_days"]
    chunk, _ = swept_as_single_quotes(base, path, values)
    assert np.isfinite(chunk.totals).any(axis=0).all()  # every scenario has a feasible option


def swept_as_single_quotes(base: dict[str, Any], path: str, values: list[float]) -> tuple[Any, list[list[float]]]:
    """A grid sweep of `path` over `values`, checked scenario by scenario against the single quote
    (feasibility, and totals to 1e-9): the sweep's chunk, and each scenario's carbon by option."""
    prep = prepared({"base": base, "grid": {path: values}})
    _, chunk = all_scenarios(prep)
    summary, rows = run(prep)
    assert summary["scenarios"] == len(rows) == len(values)
    carbon = []
    for s, value in enumerate(values):
        single = evaluate_campaign(CATALOG, *request_with(base, {path: value}).to_domain())
        carbon.append([float(np.asarray(o.energy.kgco2e).reshape(-1)[0]) for o in single.options])
        assert [o.label for o in single.options] == chunk.labels
        for k, option in enumerate(single.options):
            feasible = bool(np.asarray(option.feasible).reshape(-1)[0])
            assert feasible == bool(np.isfinite(chunk.totals[k, s])), (path, value, option.label)
            if feasible:
                expected = float(np.asarray(option.total).reshape(-1)[0])
                assert chunk.totals[k, s] == pytest.approx(expected, rel=1e-9, abs=0.0), (path, value, option.label)
    return chunk, carbon


def test_grid_scenarios_enumerate_every_combination_last_path_fastest() -> None:
    prep = prepared({"base": example("campaign-owned-wins.json"), "grid": OWNED_WINS_GRID})
    expected = list(itertools.product(*OWNED_WINS_GRID.values()))
    for size in (1, 4, 27, 1000):
        got = [tuple(float(v) for v in combo)
               for _, inputs in scenario_chunks(prep.plan, size)
               for combo in zip(*inputs.values(), strict=True)]
        assert got == [tuple(float(v) for v in combo) for combo in expected], size


def test_the_summary_aggregates_the_rows_as_numpy_would() -> None:
    prep = prepared({"base": example("campaign-owned-wins.json"), "grid": OWNED_WINS_GRID})
    _, chunk = all_scenarios(prep)
    summary, _ = run(prep)
    assert summary["scenarios"] == 27 and summary["percentiles"] == "exact"
    for k, option in enumerate(summary["options"]):
        totals = chunk.totals[k]
        finite = totals[np.isfinite(totals)]
        assert option["option"] == chunk.labels[k]
        assert option["feasible_share"] == finite.size / 27
        assert option["cheapest_share"] == np.count_nonzero(chunk.cheapest == k) / 27
        if finite.size:
            reference = np.round(np.percentile(finite, [5, 50, 95]), 2)
            assert [option["total_p5"], option["total_p50"], option["total_p95"]] == reference.tolist()
    owned = np.array([label.split("/")[1].startswith("owned_") for label in chunk.labels])
    best = np.where(np.isfinite(chunk.totals), chunk.totals, np.inf)
    wins = np.count_nonzero(best[owned].min(axis=0) < best[~owned].min(axis=0))
    assert summary["probability_owning_beats_renting"] == wins / 27
    assert summary["nothing_feasible_share"] == np.count_nonzero(np.isinf(best.min(axis=0))) / 27


# ---- seeds, listing order and chunk size --------------------------------------------------------

def monte_carlo(samples: int = 3000, seed: int = 7, reverse: bool = False) -> dict[str, Any]:
    sweep = example("sweep-electricity-and-utilisation.json")
    sweep["samples"], sweep["seed"] = samples, seed
    if reverse:
        sweep["distributions"] = dict(reversed(list(sweep["distributions"].items())))
    return sweep


def draws(prep: PreparedSweep, chunk: int) -> dict[str, np.ndarray]:
    parts = [inputs for _, inputs in scenario_chunks(prep.plan, chunk)]
    return {path: np.concatenate([p[path] for p in parts]) for path in prep.plan.paths}


def test_the_same_seed_gives_the_same_summary_and_another_seed_another() -> None:
    first, _ = run(prepared(monte_carlo(seed=7)))
    again, _ = run(prepared(monte_carlo(seed=7)))
    other, _ = run(prepared(monte_carlo(seed=8)))
    assert first == again
    assert first != other
    assert [o["total_p50"] for o in first["options"]] != [o["total_p50"] for o in other["options"]]


def test_the_listing_order_of_distributions_does_not_change_the_draws() -> None:
    forward, backward = prepared(monte_carlo()), prepared(monte_carlo(reverse=True))
    assert forward.plan.paths == list(reversed(backward.plan.paths))
    a, b = draws(forward, 3000), draws(backward, 3000)
    for path in forward.plan.paths:
        assert np.array_equal(a[path], b[path]), path
    assert run(forward)[0] == run(backward)[0]


def test_adding_an_input_leaves_the_other_inputs_draws_unchanged() -> None:
    sweep = monte_carlo()
    more = copy.deepcopy(sweep)
    more["distributions"]["overrides.node_price_factor"] = {"kind": "uniform", "low": 0.9, "high": 1.1}
    a, b = draws(prepared(sweep), 3000), draws(prepared(more), 3000)
    for path in a:
        assert np.array_equal(a[path], b[path]), path


@pytest.mark.parametrize("sizes", [(3000, 1000), (3000, 97), (64, 4096)])
def test_the_chunk_size_does_not_change_the_draws(sizes: tuple[int, int]) -> None:
    prep = prepared(monte_carlo())
    a, b = draws(prep, sizes[0]), draws(prep, sizes[1])
    for path in prep.plan.paths:
        assert a[path].size == 3000
        assert np.array_equal(a[path], b[path]), path


# Where each input may go in a sweep of the demo campaign (whole numbers where the input is one).
ONE_TABLE_RANGES = {
    "campaign.work.tokens": (1e11, 4e11), "campaign.runs.count": (1, 5), "campaign.runs.exploration_fraction": (0, 0.5),
    "campaign.runs.evaluation_fraction": (0, 0.3), "campaign.deadline_days": (5, 60),
    "campaign.data.dataset_tb": (1, 50), "campaign.data.checkpoints_kept": (1, 6),
    "campaign.data.results_egress_tb": (0, 5), "campaign.recurrence.every_months": (1, 12),
    "campaign.recurrence.for_months": (6, 36), "overrides.electricity_price_per_kwh": (0.05, 0.3),
    "overrides.electricity_price_factor": (0.5, 2), "overrides.on_demand_price_factor": (0.7, 1.3),
    "overrides.rented_price_factor": (0.7, 1.3), "overrides.cost_of_capital_annual": (0.02, 0.15),
    "overrides.node_price_factor": (0.7, 1.3), "overrides.utilisation_planned": (0.3, 0.9),
    "overrides.grid_kgco2e_per_kwh": (0.05, 0.8),
}


@pytest.mark.parametrize("path", [*sorted(ONE_TABLE_PATHS), "overrides.network_gbps", "overrides.pue"])
def test_an_input_of_the_one_table_paths_keeps_every_search_on_one_table(path: str,
                                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    """Each input that `chunk_size` lets a sweep take larger chunks for, varied alone in a sweep large
    enough to prune, keeps every venue's search on one table whose base candidates are gathered from
    one row: no (scenarios × candidates) array, which is why its memory grows with the options alone.
    An input of the step (the network) or of a node limit (PUE) does not, and keeps the smaller chunks."""
    base = json.loads((EXAMPLES / "sweep-electricity-and-utilisation.json").read_text(encoding="utf-8"))["base"]
    if path.startswith("campaign.recurrence."):
        base["campaign"]["recurrence"] = {"every_months": 3, "for_months": 24}
    low, high = ONE_TABLE_RANGES.get(path, (1.1, 2.0) if path == "overrides.pue" else (100, 1000))
    integer = input_path(path)[0].integer
    sweep = ({"base": base, "grid": {path: list(range(int(low), int(high) + 1)) * 100}} if integer else
             {"base": base, "samples": 600, "seed": 5, "distributions": {path: {"kind": "uniform", "low": low,
                                                                              "high": high}}})
    prep = prepare_sweep(CATALOG_IN, SweepIn.model_validate(sweep), SweepLimits())
    one_table, gathered_base = [], []
    step_varies, base_block = layout.step_varies, layout._base_block
    monkeypatch.setattr(layout, "step_varies", lambda *args: one_table.append(not step_varies(*args)) or
                        not one_table[-1])
    monkeypatch.setattr(layout, "_base_block", lambda *args, **kwargs: gathered_base.append(
        isinstance(block := base_block(*args, **kwargs), GatheredGrid)) or block)
    (_, inputs), = scenario_chunks(prep.plan, prep.plan.scenarios)
    evaluate_chunk(prep.catalog, prep.plan, inputs)
    alone = path in ONE_TABLE_PATHS
    assert one_table and (all(one_table) and bool(gathered_base) and all(gathered_base)) == alone
    size = chunk_size(prep.catalog)
    assert chunk_size(prep.catalog, prep.plan.paths) == (ONE_TABLE_FACTOR * size if alone else size)


def test_a_one_table_sweep_chunk_is_bounded_by_its_options() -> None:
    """Larger chunks for a sweep over ONE_TABLE_PATHS alone, bounded by its options: never more than
    OPTION_SCENARIOS option-scenarios beyond the candidates' bound, and never fewer scenarios than that bound."""
    size = chunk_size(CATALOG)
    assert chunk_size(CATALOG, ["overrides.rented_price_factor"]) == ONE_TABLE_FACTOR * size
    assert chunk_size(CATALOG, ["overrides.rented_price_factor", "overrides.network_gbps"]) == size
    assert chunk_size(CATALOG, []) == size
    many = dataclasses.replace(CATALOG, offers=CATALOG.offers * 20)  # 20 times the offers' options
    options = 2 * len(many.sites) + sum(bool(o.on_demand_per_accelerator_hour) + len(o.committed)
                                        + (o.interruptible is not None) for o in many.offers)
    assert chunk_size(many, ["campaign.work.tokens"]) == max(size, OPTION_SCENARIOS // options) == size


def test_a_chunk_without_break_even_is_the_same_chunk_less_its_break_even_rows() -> None:
    """CSV rows have no break-even column, so their chunks skip the break-even utilisations (a chunk's
    largest array on a larger catalog: (sites × rented options) × scenarios); every other figure is
    the same, bit for bit."""
    prep = prepared(monte_carlo())
    (_, inputs), = scenario_chunks(prep.plan, prep.plan.scenarios)
    full = evaluate_chunk(prep.catalog, prep.plan, inputs)
    rows_only = evaluate_chunk(prep.catalog, prep.plan, inputs, breakeven=False)
    assert full.breakeven_labels and full.breakeven_utilisation.shape == (len(full.breakeven_labels), full.size)
    assert rows_only.breakeven_labels == [] and rows_only.breakeven_utilisation.shape == (0, full.size)
    for name in ("labels", "owned", "totals", "cheapest", "owned_best", "rented_best"):
        assert np.array_equal(getattr(full, name), getattr(rows_only, name), equal_nan=name == "totals"), name
    assert all(np.array_equal(full.inputs[p], rows_only.inputs[p]) for p in full.inputs)


def test_the_csv_stream_makes_no_break_even_figures_and_the_summary_does(monkeypatch: pytest.MonkeyPatch) -> None:
    from service.domain import sweep as sweep_module
    from service.usecases.sweeps import csv_chunks
    made: list[int] = []
    breakeven_utilisations = sweep_module.breakeven_utilisations
    monkeypatch.setattr(sweep_module, "breakeven_utilisations",
                        lambda *args, **kwargs: made.append(1) or breakeven_utilisations(*args, **kwargs))
    prep = prepared(monte_carlo())
    assert "".join(csv_chunks(prep)).count("\r\n") == prep.plan.scenarios + 1
    assert made == []
    summary, _ = run(prep)
    assert made and summary["breakeven_utilisation"]


def test_streams_are_keyed_by_seed_and_name() -> None:
    same = stream(7, "overrides.pue").random(5), stream(7, "overrides.pue").random(5)
    assert np.array_equal(*same)
    assert not np.array_equal(same[0], stream(8, "overrides.pue").random(5))
    assert not np.array_equal(same[0], stream(7, "overrides.mtbf_hours").random(5))


# ---- distributions against numpy's own draws and the analytic moments --------------------------

N_DRAWS = 200_000
SE_TOLERANCE = 5.0  # sample mean and variance within 5 standard errors of the analytic values


def _phi(z: float) -> float:
    return math.exp(-z * z / 2.0) / math.sqrt(2.0 * math.pi) if math.isfinite(z) else 0.0


def _cdf(z: float) -> float:
    return 0.5 * (1.0 + math.erf(z / math.sqrt(2.0)))


def _clipped_normal(mu: float, sd: float, a: float, b: float) -> tuple[float, float]:
    """Mean and variance of N(mu, sd²) clipped (censored) to [a, b]."""
    alpha, beta = (a - mu) / sd, (b - mu) / sd
    mass = _cdf(beta) - _cdf(alpha)
    tail_a, tail_b = _cdf(alpha), 1.0 - _cdf(beta)
    mean = a * tail_a + b * tail_b + mu * mass + sd * (_phi(alpha) - _phi(beta))
    second = (a * a * tail_a + b * b * tail_b + mu * mu * mass + 2.0 * mu * sd * (_phi(alpha) - _phi(beta))
              + sd * sd * (mass + alpha * _phi(alpha) - beta * _phi(beta)))
    return mean, second - mean * mean


def _choice_moments(values: list[float], weights: list[float]) -> tuple[float, float]:
    p = np.asarray(weights) / np.sum(weights)
    x = np.asarray(values)
    mean = float(p @ x)
    return mean, float(p @ (x - mean) ** 2)


# (distribution, numpy's own call on a Generator, analytic mean and variance)
DISTRIBUTIONS: list[tuple[str, Distribution, Any, tuple[float, float]]] = [
    ("uniform", Distribution("uniform", low=0.8, high=1.1),
     lambda g, n: g.uniform(0.8, 1.1, n), (0.95, 0.3**2 / 12)),
    ("triangular", Distribution("triangular", low=0.05, mode=0.12, high=0.30),
     lambda g, n: g.triangular(0.05, 0.12, 0.30, n),
     ((0.05 + 0.12 + 0.30) / 3,
      (0.05**2 + 0.12**2 + 0.30**2 - 0.05 * 0.12 - 0.05 * 0.30 - 0.12 * 0.30) / 18)),
    ("normal", Distribution("normal", mean=1.0, sd=0.1),
     lambda g, n: g.normal(1.0, 0.1, n), (1.0, 0.01)),
    ("normal clipped", Distribution("normal", mean=1.0, sd=0.2, low=0.8, high=1.3),
     lambda g, n: np.clip(g.normal(1.0, 0.2, n), 0.8, 1.3), _clipped_normal(1.0, 0.2, 0.8, 1.3)),
    ("lognormal", Distribution("lognormal", mean=26.0, sigma=0.3),
     lambda g, n: g.lognormal(26.0, 0.3, n),
     (math.exp(26.0 + 0.045), (math.exp(0.09) - 1.0) * math.exp(52.0 + 0.09))),
    ("choice", Distribution("choice", values=(1.0, 2.0, 5.0)),
     lambda g, n: g.choice(np.array([1.0, 2.0, 5.0]), size=n), _choice_moments([1, 2, 5], [1, 1, 1])),
    ("weighted choice", Distribution("choice", values=(0.5, 1.0, 1.5), weights=(1.0, 6.0, 3.0)),
     lambda g, n: g.choice(np.array([0.5, 1.0, 1.5]), size=n, p=np.array([0.1, 0.6, 0.3])),
     _choice_moments([0.5, 1.0, 1.5], [1, 6, 3])),
]


@pytest.mark.parametrize(("name", "distribution", "numpy_call", "moments"), DISTRIBUTIONS,
                         ids=[d[0] for d in DISTRIBUTIONS])
def test_draws_are_numpys_own_with_the_analytic_moments(
    name: str, distribution: Distribution, numpy_call: Any, moments: tuple[float, float]
) -> None:
    seed = np.random.SeedSequence(20270104, spawn_key=(zlib.crc32(name.encode()),))
    drawn = distribution.draw(np.random.default_rng(seed), N_DRAWS)
    reference = numpy_call(np.random.default_rng(seed), N_DRAWS)
    assert np.array_equal(drawn, reference)

    mean, variance = moments
    centred = drawn - drawn.mean()
    sample_variance = drawn.var(ddof=1)
    fourth = float(np.mean(centred**4))
    se_mean = math.sqrt(variance / N_DRAWS)
    se_variance = math.sqrt(max(fourth - sample_variance**2, 0.0) / N_DRAWS)
    assert abs(drawn.mean() - mean) <= SE_TOLERANCE * se_mean, (drawn.mean(), mean, se_mean)
    assert abs(sample_variance - variance) <= SE_TOLERANCE * se_variance, (sample_variance, variance, se_variance)


@pytest.mark.parametrize(("name", "distribution"), [(d[0], d[1]) for d in DISTRIBUTIONS if "choice" not in d[0]],
                         ids=[d[0] for d in DISTRIBUTIONS if "choice" not in d[0]])
def test_the_centre_is_the_median(name: str, distribution: Distribution) -> None:
    drawn = distribution.draw(np.random.default_rng(11), N_DRAWS)
    below = np.count_nonzero(drawn < distribution.centre()) / N_DRAWS
    # the empirical CDF at the median is 1/2, with standard error sqrt(1/4 / n)
    assert abs(below - 0.5) <= SE_TOLERANCE * math.sqrt(0.25 / N_DRAWS), (name, below)


def test_the_centre_of_a_weighted_choice_is_its_weighted_median() -> None:
    skewed = Distribution("choice", values=(1.0, 2.0, 3.0), weights=(0.8, 0.1, 0.1))
    drawn = skewed.draw(np.random.default_rng(3), N_DRAWS)
    assert float(np.median(drawn)) == 1.0
    assert skewed.centre() == 1.0
    assert Distribution("choice", values=(1.0, 2.0, 5.0)).centre() == 2.0


# ---- tornado -----------------------------------------------------------------------------------

def _gap(request: QuoteRequestIn) -> float:
    """Best owned total minus best rented total, from the public quote document."""
    document = quote(CATALOG_IN, request)
    feasible = [o for o in document["options"] if o["feasible"] and o["venue"]["kind"] != "split"]
    owned = min(o["cost"]["total"] for o in feasible if o["venue"]["kind"] == "owned")
    rented = min(o["cost"]["total"] for o in feasible if o["venue"]["kind"] == "rented")
    return float(owned - rented)


def test_tornado_sorts_by_effect_and_moves_each_input_around_its_centre() -> None:
    base = example("campaign-owned-wins.json")
    prep = prepared({"base": base, "grid": {"overrides.electricity_price_per_kwh": [0.06],
                                            "overrides.rented_price_factor": [1.0]}})
    centres = {"overrides.electricity_price_per_kwh": 0.10, "overrides.rented_price_factor": 1.0}
    ranges = {path: (0.0, np.inf) for path in centres}
    bars = tornado(prep.catalog, prep.plan, centres, ranges, 0.2)
    assert [bar.path for bar in bars] == ["overrides.rented_price_factor", "overrides.electricity_price_per_kwh"]
    rented, power = bars
    assert rented.effect > 5 * power.effect > 0  # renting's price moves the gap much more than electricity
    assert rented.gap_high < rented.gap_low  # dearer renting: owning gains
    assert power.gap_high > power.gap_low  # dearer electricity: owning loses
    for bar in bars:
        assert (bar.centre, bar.low, bar.high) == (centres[bar.path], centres[bar.path] * 0.8, centres[bar.path] * 1.2)
        others = {p: c for p, c in centres.items() if p != bar.path}
        for value, gap in ((bar.low, bar.gap_low), (bar.high, bar.gap_high), (bar.centre, bar.gap_centre)):
            expected = _gap(request_with(base, {**others, bar.path: value}))
            assert gap == pytest.approx(expected, rel=1e-9, abs=0.011), (bar.path, value)


def test_tornado_bars_centre_on_the_base_value_or_the_grid_median_and_clip_to_the_valid_range() -> None:
    base = example("campaign-owned-wins.json")
    base["overrides"] = {"rented_price_factor": 1.1}
    prep = prepared({"base": base, "tornado": {"swing": 0.2},
                     "grid": {"overrides.utilisation_planned": [0.85, 0.9, 0.95],
                              "overrides.rented_price_factor": [1.0, 1.2]}})
    bars = {bar["input"]: bar for bar in tornado_bars(prep) or []}
    planned, factor = bars["overrides.utilisation_planned"], bars["overrides.rented_price_factor"]
    assert (planned["centre"], planned["low"], planned["high"]) == (0.9, 0.9 * 0.8, 1.0)  # ≤ 1, clipped
    assert (factor["centre"], factor["low"], factor["high"]) == (1.1, 1.1 * 0.8, 1.1 * 1.2)
    effects = [bar["effect"] for bar in tornado_bars(prep) or []]
    assert effects == sorted(effects, reverse=True)
    assert tornado_bars(prepared({"base": base, "grid": {"overrides.pue": [1.2]}})) is None


# ---- the scenario sample -----------------------------------------------------------------------

Q = (5.0, 25.0, 50.0, 75.0, 95.0)


def _filled(seed: int, rows: np.ndarray, capacity: int, chunk: int) -> ScenarioSample:
    """A sample of `rows` (rows, scenarios), given to it `chunk` scenarios at a time, as a summary does."""
    sampled = SampledScenarios(rows.shape[1], capacity, seed)
    sample = ScenarioSample(len(rows), sampled)
    for start in range(0, rows.shape[1], chunk):
        part = rows[:, start:start + chunk]
        sample.append(part[:, sampled.within(start, part.shape[1])])
    return sample


def test_below_capacity_the_percentiles_are_exact() -> None:
    generator = np.random.default_rng(5)
    parts = [generator.lognormal(0.0, 1.0, (3, n)) for n in (1000, 37, 2500)]
    parts[1][0, ::3] = np.nan  # infeasible scenarios are left out of that row's percentiles
    parts[2][1, :100] = np.inf  # as are unreachable break-even rows
    parts[0][2], parts[1][2], parts[2][2] = np.nan, np.nan, np.nan  # a row with no value at all
    sampled = SampledScenarios(3537, capacity=5000, seed=1)
    sample = ScenarioSample(3, sampled)
    for part in parts:
        assert sampled.within(0, part.shape[1]) == slice(None)  # every scenario is kept
        sample.append(part[:1], part[1:])  # blocks of rows, as a summary gives its totals and break-even rows
    values = np.concatenate(parts, axis=1)
    assert sampled.exact
    for row in (0, 1):
        finite = values[row][np.isfinite(values[row])]
        assert sample.percentiles(row, Q) == np.percentile(finite, Q).tolist()
    assert sample.percentiles(2, Q) == [None] * len(Q)


def test_the_percentiles_are_numpys_to_the_bit() -> None:
    """`arrays.percentiles` places only the order statistics it reads, and must give what np.percentile (the
    reference; its default linear method, Hyndman & Fan 1996, "Sample quantiles in statistical packages",
    definition 7) gives, bit for bit: sizes from one value up, ties, signed zeros, percentiles that fall on
    a value or between two, and 0 and 100."""
    generator = np.random.default_rng(11)
    kinds = (lambda n: generator.normal(size=n), lambda n: generator.integers(0, 4, n).astype(np.float64),
             lambda n: np.round(generator.lognormal(size=n), 1), lambda n: -np.zeros(n),
             lambda n: np.sort(generator.normal(size=n))[::-1].copy())
    for case in range(3000):
        n = int(generator.integers(1, 40)) if case % 2 else int(generator.integers(1, 6000))
        values = kinds[case % len(kinds)](n)
        q = Q if case % 3 else (*generator.uniform(0, 100, int(generator.integers(1, 6))).tolist(), 0.0, 100.0)
        ours, reference = percentiles(values.copy(), q), np.percentile(values, q)
        assert np.array_equal(ours, reference) and np.array_equal(np.signbit(ours), np.signbit(reference)), (n, q)


def test_above_capacity_the_sample_is_uniform_over_the_whole_stream_and_the_same_scenarios_for_every_row() -> None:
    n, capacity = 1_000_000, 20_000
    # The stream's values are its positions, so a sample favouring early or late scenarios would show.
    positions = np.arange(n, dtype=np.float64)
    sample = _filled(3, np.stack([positions, -positions]), capacity, 37_000)
    assert not sample.sampled.exact
    held = sample.held[0]
    assert held.size == capacity and np.unique(held).size == capacity  # without replacement
    assert np.array_equal(sample.held[1], -held)  # every row at the same scenarios
    counts = np.bincount((held // (n // 10)).astype(np.int64), minlength=10)
    expected = capacity / 10
    chi_square = float(np.sum((counts - expected) ** 2 / expected))
    assert chi_square < 40.0, counts  # 9 degrees of freedom: P(χ² > 40) ≈ 7e-6 for a uniform sample
    se = n / math.sqrt(12 * capacity)
    assert abs(held.mean() - (n - 1) / 2) <= SE_TOLERANCE * se


def test_the_sample_does_not_depend_on_how_the_scenarios_are_cut_into_chunks() -> None:
    rows = np.random.default_rng(2).normal(size=(2, 300_000))
    cut = [_filled(7, rows, 10_000, chunk).held for chunk in (40_000, 12_345, 300_000)]
    assert all(np.array_equal(cut[0], other) for other in cut[1:])


def test_above_capacity_the_median_is_close_to_the_true_median() -> None:
    n, capacity = 1_000_000, 20_000
    values = np.random.default_rng(9).exponential(1.0, (1, n))  # true median ln 2
    p50 = _filled(4, values, capacity, 50_000).percentiles(0, (50.0,))[0]
    assert p50 is not None
    # sd of a sample median ≈ 1 / (2 f(m) sqrt(k)) = 1 / sqrt(k) here (f(ln 2) = 1/2): about 1% of ln 2
    assert abs(p50 - math.log(2)) <= 0.035, p50


def test_reading_the_percentiles_leaves_the_sample_as_it_was() -> None:
    """The values are sorted in place for the percentiles: a copy of the sample, never the sample."""
    sample = _filled(7, np.random.default_rng(3).normal(size=(1, 50_000)), 5_000, 20_000)
    kept = sample.held.copy()
    first = sample.percentiles(0, Q)
    assert np.array_equal(sample.held, kept)
    assert sample.percentiles(0, Q) == first == np.percentile(kept[0], Q).tolist()


def test_a_summary_takes_no_more_scenarios_than_it_was_made_for() -> None:
    prep = prepared(monte_carlo(samples=300))
    (_, inputs), = scenario_chunks(prep.plan, prep.plan.scenarios)
    chunk = evaluate_chunk(prep.catalog, prep.plan, inputs)
    summary = SweepSummary(500, seed=1)
    summary.add(chunk)
    before = summary.result()
    with pytest.raises(ValueError, match="more than the 500 scenarios"):
        summary.add(chunk)
    assert summary.result() == before  # the refused chunk left nothing behind
    sample = ScenarioSample(1, SampledScenarios(10, capacity=5, seed=1))
    sample.append(np.ones((1, 4)))
    with pytest.raises(ValueError, match="more than the 5 scenarios"):
        sample.append(np.ones((1, 2)))
    assert sample.held.shape == (1, 4)


@contextmanager
def a_thread_alive() -> Iterator[None]:
    """Another thread in this process while the block runs (as in the server)."""
    stop = threading.Event()
    waiting = threading.Thread(target=stop.wait, daemon=True)
    waiting.start()
    try:
        yield
    finally:
        stop.set()
        waiting.join()


@pytest.mark.parametrize("threaded", [False, True], ids=["as-is", "with-another-thread"])
def test_tallies_made_in_worker_processes_give_the_summary_of_whole_chunks(threaded: bool) -> None:
    """Beyond the sample's capacity a worker sends back of each chunk only its counts and its scenarios kept
    (`ChunkTally`), or, forked from this process, writes the values kept into the sample itself: the summary
    is the one whole chunks give in this process, to the bit; from workers forked by a fork server too, as
    where this process holds another thread, which send the values back."""
    prep = prepared(monte_carlo(samples=6000))
    chunks = list(scenario_chunks(prep.plan, 1500))
    # 34 rows (14 options, 20 break-even rows): 1,176 scenarios kept, which the budget holds
    whole, tallied = (SweepSummary(6000, sample_values=40_000, seed=5) for _ in range(2))
    for chunk in chunk_pool.evaluated(prep.catalog, prep.plan, chunks, processes=1):
        whole.add(chunk)
    with a_thread_alive() if threaded else nullcontext():
        forked = chunk_pool._workers_context(6000, 2)[0].get_start_method() == "fork"
        tallies = list(chunk_pool.evaluated(prep.catalog, prep.plan, chunks, processes=2,
                                            tallying=tallied.tallying))
    for tally in tallies:
        tallied.add_tally(tally)
    assert whole.result()["percentiles"] == "estimated from a seeded sample of 1,176 scenarios"
    assert tallied.result() == whole.result()
    assert sum(t.kept for t in tallies) == 1176
    # Beside another thread, never forked from this process; as is, forked where the test process holds no
    # thread but its main one (earlier tests may leave some), which the command-line tests always exercise.
    assert not (threaded and forked)
    for tally in tallies:  # written in place by forked workers, else sent
        assert (tally.totals is None and tally.breakeven_utilisation is None) == forked
        assert forked or (tally.totals is not None and tally.totals.shape[1] == tally.kept)


def test_a_tallying_sent_to_a_process_started_afresh_shares_no_memory_and_its_tallies_carry_the_values() -> None:
    """Once shared, a tallying writes the values kept into its sample (for the processes forked from this one);
    pickled for a process that is not forked from it, it leaves its memory behind, and that process's tallies
    carry the values, which the summary appends: the same summary either way."""
    prep = prepared(monte_carlo(samples=3000))
    chunks = [evaluate_chunk(prep.catalog, prep.plan, inputs) for _, inputs in scenario_chunks(prep.plan, 1000)]
    reference, shared = (SweepSummary(3000, sample_values=40_000, seed=2) for _ in range(2))
    for chunk in chunks:
        reference.add(chunk)
    shared.tallying.share()
    afresh = pickle.loads(pickle.dumps(shared.tallying))
    in_place = shared.tallying(chunks[0], 0)
    assert in_place.totals is None and in_place.kept > 0
    sent = [afresh(chunk, start) for chunk, start in zip(chunks[1:], (1000, 2000), strict=True)]
    assert all(t.totals is not None and t.totals.shape[1] == t.kept for t in sent)
    for tally in (in_place, *sent):
        shared.add_tally(tally)
    assert shared.result() == reference.result()
    floor = SweepSummary(3000, sample_values=10_000, seed=2).tallying
    floor.share()  # 34 rows × the floor's 1,000 scenarios kept: more than the budget it maps
    assert floor(chunks[0], 0).totals is not None


@pytest.mark.skipif(sys.platform != "linux", reason="workers are forked from the sweeping process on Linux only")
def test_workers_are_forked_from_a_process_with_one_thread_and_from_a_fork_server_beside_threads() -> None:
    """A command line's sweep holds one thread, and its workers are forked from it (sharing its imports and
    kernel); a process with other threads, whose locks a fork would copy held, has them forked from a clean
    fork server. In a process of its own, whose threads the test knows."""
    script = ("import threading\n"
              "from service.usecases import chunk_pool\n"
              "alone, priced = chunk_pool._workers_context(10, 2)\n"
              "stop = threading.Event()\n"
              "threading.Thread(target=stop.wait, daemon=True).start()\n"
              "beside, _ = chunk_pool._workers_context(10, 2)\n"
              "print(alone.get_start_method(), priced, beside.get_start_method())\n")
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["fork", "10", "forkserver"]


def test_a_summarys_sample_holds_one_budget_of_values() -> None:
    """However many options and break-even rows a catalog makes, a sweep's summary holds at most
    SAMPLE_VALUES values (at least SAMPLE_FLOOR scenarios): exact percentiles while every scenario fits,
    then from a seeded sample of the scenarios, which the summary names."""
    prep = prepared(monte_carlo(samples=3000))
    (_, inputs), = scenario_chunks(prep.plan, prep.plan.scenarios)
    chunk = evaluate_chunk(prep.catalog, prep.plan, inputs)
    rows = len(chunk.labels) + len(chunk.breakeven_labels)
    budget = rows * 1_200  # 1,200 scenarios' values: fewer than the sweep's scenarios
    summary = SweepSummary(3000, sample_values=budget, seed=3)
    summary.add(chunk)
    sample = summary._sample
    assert sample is not None and sample.sampled.capacity == 1_200 and not sample.sampled.exact
    assert sample.held.shape == (rows, 1_200) and sample.held.size <= budget
    assert summary.result()["percentiles"] == "estimated from a seeded sample of 1,200 scenarios"
    exact = SweepSummary(3000, seed=3)
    exact.add(chunk)
    assert exact.result()["percentiles"] == "exact"
    assert exact._sample is not None and exact._sample.sampled.capacity == max(SAMPLE_FLOOR, SAMPLE_VALUES // rows)
    tiny = SweepSummary(3000, sample_values=10, seed=3)  # a budget below the floor: the floor holds
    tiny.add(chunk)
    assert tiny._sample is not None and tiny._sample.sampled.capacity == SAMPLE_FLOOR


def test_the_sample_is_deterministic_for_a_seed() -> None:
    values = np.random.default_rng(2).normal(size=(1, 300_000))
    a = _filled(7, values, 10_000, 40_000).percentiles(0, Q)
    b = _filled(7, values, 10_000, 40_000).percentiles(0, Q)
    c = _filled(8, values, 10_000, 40_000).percentiles(0, Q)
    assert a == b
    assert a != c


# ---- validation --------------------------------------------------------------------------------

def problems(sweep: dict[str, Any], limits: SweepLimits | None = None) -> dict[str, str]:
    with pytest.raises(InvalidInput) as caught:
        prepared(sweep, limits)
    return {p.field: p.reason for p in caught.value.problems}


def owned_wins(**rest: Any) -> dict[str, Any]:
    return {"base": example("campaign-owned-wins.json"), **rest}


def test_an_unknown_path_is_named() -> None:
    assert "distributions.overrides.sunshine" in problems(owned_wins(
        samples=10, distributions={"overrides.sunshine": {"kind": "uniform", "low": 0, "high": 1}}))
    found = problems(owned_wins(grid={"campaign.work.colour": [1.0], "overrides.pue": [1.2]}))
    assert set(found) == {"grid.campaign.work.colour"}
    assert "unknown input path" in found["grid.campaign.work.colour"]


def test_a_path_the_base_request_cannot_take_is_named() -> None:
    found = problems(owned_wins(samples=10, distributions={
        "campaign.work.total_flops": {"kind": "uniform", "low": 1e21, "high": 2e21}}))
    assert "flops" in found["distributions.campaign.work.total_flops"]
    found = problems(owned_wins(grid={"campaign.recurrence.every_months": [1, 2], "campaign.work.samples": [1e9]}))
    assert "campaign.recurrence" in found["grid.campaign.recurrence.every_months"]
    assert "measured" in found["grid.campaign.work.samples"]


def test_grid_values_out_of_range_are_named() -> None:
    found = problems(owned_wins(grid={"overrides.utilisation": [0.4, 1.2, 0.0],
                                      "campaign.runs.count": [1, 2.5],
                                      "overrides.pue": [1.1, 1.3]}))
    assert set(found) == {"grid.overrides.utilisation", "grid.campaign.runs.count"}
    assert found["grid.overrides.utilisation"].startswith("2 of 3 values")
    assert "whole numbers" in found["grid.campaign.runs.count"]


def test_distributions_that_can_draw_invalid_values_are_refused() -> None:
    found = problems(owned_wins(samples=10, distributions={
        "campaign.work.tokens": {"kind": "normal", "mean": 2e11, "sd": 2e10},
        "overrides.utilisation": {"kind": "uniform", "low": 0.5, "high": 1.2},
        "overrides.pue": {"kind": "lognormal", "mean": 0.2, "sigma": 0.1},
        "overrides.node_price_factor": {"kind": "choice", "values": [1.0, 0.0]}}))
    assert set(found) == {"distributions.campaign.work.tokens", "distributions.overrides.utilisation",
                          "distributions.overrides.pue", "distributions.overrides.node_price_factor"}
    assert "bounds" in found["distributions.campaign.work.tokens"]
    # with bounds inside the valid range, the same normal distribution is accepted
    accepted = prepared(owned_wins(samples=10, distributions={
        "campaign.work.tokens": {"kind": "normal", "mean": 2e11, "sd": 2e10, "low": 1e11, "high": 3e11}}))
    assert accepted.plan.scenarios == 10


def test_a_continuous_distribution_on_a_whole_number_path_is_refused() -> None:
    found = problems(owned_wins(samples=10, distributions={
        "campaign.runs.count": {"kind": "uniform", "low": 1, "high": 5}}))
    assert "whole numbers" in found["distributions.campaign.runs.count"]
    accepted = prepared(owned_wins(samples=10, distributions={
        "campaign.runs.count": {"kind": "choice", "values": [1, 2, 4]}}))
    assert accepted.plan.scenarios == 10


def test_over_the_limits_is_refused_with_the_limit_in_the_reason() -> None:
    limits = SweepLimits(max_scenarios=1000, max_grid_values=5, max_paths=2)
    found = problems(owned_wins(samples=1001, distributions={
        "overrides.pue": {"kind": "uniform", "low": 1.1, "high": 1.4}}), limits)
    assert found == {"samples": "1,001 scenarios exceed the limit of 1,000 per sweep"}
    found = problems(owned_wins(grid={"overrides.pue": [1.1, 1.2, 1.3, 1.4, 1.5],
                                      "campaign.deadline_days": [float(d) for d in range(10, 15)]}),
                     SweepLimits(max_scenarios=24))
    assert "24" in found["grid"] and "25" in found["grid"]
    found = problems(owned_wins(grid={"overrides.pue": [1.0 + k / 100 for k in range(6)]}), limits)
    assert "at most 5" in found["grid.overrides.pue"]
    found = problems(owned_wins(grid={"overrides.pue": [1.2], "overrides.mtbf_hours": [1e4],
                                      "overrides.network_gbps": [100.0]}), limits)
    assert "at most 2" in found["grid"]
    # at the limit exactly, the sweep runs
    assert prepared(owned_wins(samples=1000, distributions={
        "overrides.pue": {"kind": "uniform", "low": 1.1, "high": 1.4}}), limits).plan.scenarios == 1000
