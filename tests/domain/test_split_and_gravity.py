"""Data gravity and hybrid splits (model.md §5, §7, §9), checked against hand computations written
out from the inputs.

Gravity: the dataset lives at `data.home`; training elsewhere pays egress at home and ingress at
the destination per decimal GB, and waits dataset bytes / the slower link (Gb/s = 1e9 bit/s, 8 bits
a byte, model.md §0) before training starts. With neither link stated, 10 Gb/s is assumed
(`common practice`, service.domain.assumptions "data_link_gbps").

Splits: an owned site's free capacity and a rented option run parts of the campaign's runs at
the same time; a split is shown only when it beats both pure options of its pair, or when
neither pure option is feasible.

The catalog is demo data with round invented figures: one accelerator type sustaining
100 TFLOP/s × 50% = 50e12 FLOP/s, 4 a node, no MTBF (no failure overhead); work given as FLOPs
without parameters, so there is no memory limit and no communication.
"""

import copy
import json
import math
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain import screens, split
from service.domain.arrays import take_rows
from service.domain.campaign import Campaign, Overrides, QuoteOptions
from service.domain.catalog import Catalog
from service.domain.evaluate import CampaignEvaluation, OptionResult, evaluate_campaign
from service.domain.split import evaluate_with_splits, split_points
from service.usecases.quoting import quote

DAY = 86400.0
SUSTAINED, PER_NODE = 100e12 * 0.5, 4
RTOL = 1e-12

CATALOG: dict[str, Any] = {
    "name": "gravity-test", "currency": "EUR", "finance": {"cost_of_capital_annual": 0.06},
    "accelerators": [{"id": "test-acc", "memory_gb": 80, "peak_tflops": {"bf16": 100}, "utilisation": 0.5}],
    "node_types": [{"id": "test-node", "accelerator": "test-acc", "accelerators_per_node": PER_NODE,
                    "intra_node_gbps": 1000, "network_gbps": 200, "power_kw_peak": 6.0,
                    "power_kw_idle": 1.5, "checkpoint_write_gbps": 10}],
    "sites": [{"id": "home-site", "jurisdiction": "DE", "node_type": "test-node",
               "nodes_owned": 4, "nodes_max": 40,
               "capex": {"node_price": 200000, "network_per_node": 20000},
               "depreciation_months": 60, "residual_fraction": 0.10,
               "facility": {"kind": "colocation", "price_per_kw_month": 150},
               "pue": 1.2, "electricity_price_per_kwh": 0.10, "grid_kgco2e_per_kwh": 0.25,
               "utilisation_planned": 0.8, "utilisation_current": 0.5,
               "egress_per_gb": 0.02, "wan_gbps": 20}],
    "offers": [{"id": "test-offer", "provider": "test-provider", "region": "test-region", "jurisdiction": "DE",
                "node_type": "test-node", "nodes_max": 16, "on_demand_per_accelerator_hour": 6.0,
                "storage_per_gb_month": 0.02, "ingress_per_gb": 0.01, "egress_per_gb": 0.05, "ingress_gbps": 25,
                "pue": 1.1,
                "grid_kgco2e_per_kwh": 0.3}],
}

# --- data gravity --------------------------------------------------------------------------------

DATASET_TB = 30.0
DATASET_GB = DATASET_TB * 1000  # decimal: 30,000 GB
DATASET_BYTES = DATASET_TB * 1e12
GRAVITY_WORK = {"kind": "flops", "total_flops": 16 * SUSTAINED * 5 * DAY}  # 5 days on 16 accelerators


def staging_seconds(link_gbps: float) -> float:
    return DATASET_BYTES / (link_gbps * 1e9 / 8)


def gravity_request(home: str | None) -> QuoteRequestIn:
    data: dict[str, Any] = {"dataset_tb": DATASET_TB}
    if home is not None:
        data["home"] = home
    return QuoteRequestIn.model_validate({
        "campaign": {"name": "gravity", "team": "test-team", "work": GRAVITY_WORK, "data": data},
        "options": {"terms": ["owned_chargeback", "on_demand"], "fixed_accelerators": 16}})


def evaluate(catalog: dict[str, Any], req: QuoteRequestIn) -> CampaignEvaluation:
    return evaluate_campaign(CatalogIn.model_validate(catalog).to_domain(), *req.to_domain())


def pick(evaluation: CampaignEvaluation, venue: str) -> OptionResult:
    return next(o for o in evaluation.options if o.venue_id == venue)


def document_option(body: dict[str, Any], venue: str, term: str) -> dict[str, Any]:
    found: dict[str, Any] = next(o for o in body["options"] if o["venue"]["id"] == venue and o["term"] == term)
    return found


def test_moving_the_dataset_to_the_offer_pays_egress_at_home_and_ingress_there():
    offer = pick(evaluate(CATALOG, gravity_request("home-site")), "test-offer")
    assert_allclose(offer.lines["egress_at_home"], DATASET_GB * 0.02, rtol=RTOL)  # 600 EUR
    assert_allclose(offer.lines["ingress"], DATASET_GB * 0.01, rtol=RTOL)  # 300 EUR
    # The slower link is the home's 20 Gb/s (the offer takes 25): 30e12 B / 2.5e9 B/s = 12,000 s.
    assert_allclose(offer.staging_seconds, staging_seconds(min(20, 25)), rtol=RTOL)


def test_the_quote_reports_the_staging_in_days_and_the_transfer_lines():
    body = quote(CatalogIn.model_validate(CATALOG), gravity_request("home-site"))
    o = document_option(body, "test-offer", "on_demand")
    assert o["timing"]["data_staging_days"] == pytest.approx(12000.0 / DAY, abs=5e-5)
    lines = {line["item"]: line for line in o["cost"]["lines"]}
    assert lines["egress_at_home"]["amount"] == 600.0
    assert lines["ingress"]["amount"] == 300.0
    assert "home-site" in lines["egress_at_home"]["basis"] and "20 Gb/s" in lines["egress_at_home"]["basis"]


def test_the_wall_clock_grows_by_exactly_the_staging_time():
    moved = pick(evaluate(CATALOG, gravity_request("home-site")), "test-offer")
    there = pick(evaluate(CATALOG, gravity_request("test-offer")), "test-offer")
    assert_allclose(there.staging_seconds, 0.0, atol=0)
    assert_allclose(there.layout.wall_seconds, 5 * DAY, rtol=RTOL)  # the work alone
    assert_allclose(moved.layout.wall_seconds - there.layout.wall_seconds, staging_seconds(20), rtol=1e-9)


def test_the_home_venue_itself_pays_no_transfer_and_waits_for_nothing():
    site = pick(evaluate(CATALOG, gravity_request("home-site")), "home-site")
    assert "egress_at_home" not in site.lines
    assert_allclose(site.lines["ingress"], 0.0, atol=0)
    assert_allclose(site.staging_seconds, 0.0, atol=0)
    offer = pick(evaluate(CATALOG, gravity_request("test-offer")), "test-offer")
    assert "egress_at_home" not in offer.lines
    assert_allclose(offer.lines["ingress"], 0.0, atol=0)


def test_data_at_the_offer_moving_to_the_site_pays_the_offers_egress_and_no_ingress():
    site = pick(evaluate(CATALOG, gravity_request("test-offer")), "home-site")
    assert_allclose(site.lines["egress_at_home"], DATASET_GB * 0.05, rtol=RTOL)  # 1,500 EUR
    assert_allclose(site.lines["ingress"], 0.0, atol=0)  # a site charges itself no ingress
    assert_allclose(site.staging_seconds, staging_seconds(20), rtol=RTOL)


def test_with_no_home_a_rented_venue_charges_its_ingress_and_nothing_is_staged():
    evaluation = evaluate(CATALOG, gravity_request(None))
    offer, site = pick(evaluation, "test-offer"), pick(evaluation, "home-site")
    assert_allclose(offer.lines["ingress"], DATASET_GB * 0.01, rtol=RTOL)
    assert "egress_at_home" not in offer.lines and "egress_at_home" not in site.lines
    assert_allclose(site.lines["ingress"], 0.0, atol=0)
    for o in (offer, site):
        assert_allclose(o.staging_seconds, 0.0, atol=0)
        assert_allclose(o.layout.wall_seconds, 5 * DAY, rtol=RTOL)


def test_with_neither_link_stated_the_default_link_is_assumed_and_listed():
    catalog = copy.deepcopy(CATALOG)
    del catalog["sites"][0]["wan_gbps"]
    del catalog["offers"][0]["ingress_gbps"]
    offer = pick(evaluate(catalog, gravity_request("home-site")), "test-offer")
    assert_allclose(offer.staging_seconds, staging_seconds(10.0), rtol=RTOL)  # 24,000 s at 10 Gb/s
    body = quote(CatalogIn.model_validate(catalog), gravity_request("home-site"))
    basis = {line["item"]: line["basis"] for line in document_option(body, "test-offer", "on_demand")["cost"]["lines"]}
    assert "link speed assumed" in basis["egress_at_home"]
    assumed = {a["name"]: a for a in body["assumptions"]}
    assert assumed["data_link_gbps"]["value"] == 10.0
    assert "common practice" in assumed["data_link_gbps"]["source"]


def test_stated_links_use_no_default_link():
    body = quote(CatalogIn.model_validate(CATALOG), gravity_request("home-site"))
    assert "data_link_gbps" not in {a["name"] for a in body["assumptions"]}


def test_a_missed_deadline_counts_the_staging_time_no_accelerator_can_shorten():
    # 1 Gb/s at home: 30e12 B / 1.25e8 B/s = 240,000 s = 2.78 days of copying before the 5 days of
    # work on the offer's 16 accelerators. Within 6 days the work must take 6 − 2.78 = 3.22 days:
    # 16 × 5 / 3.22 = 24.8 → 25 accelerators at ideal scaling. (16 × 7.78 / 6 = 20.7 would miss it:
    # 21 accelerators take 16 × 5 / 21 + 2.78 = 6.59 days.)
    catalog = copy.deepcopy(CATALOG)
    catalog["sites"][0]["wan_gbps"] = 1
    catalog["offers"][0]["nodes_max"] = 4
    staged = staging_seconds(1) / DAY
    needed = math.ceil(16 * 5 / (6 - staged))
    req = QuoteRequestIn.model_validate({
        "campaign": {"name": "gravity", "team": "test-team", "work": GRAVITY_WORK, "deadline_days": 6,
                     "data": {"dataset_tb": DATASET_TB, "home": "home-site"}},
        "options": {"terms": ["on_demand"]}})
    o = document_option(quote(CatalogIn.model_validate(catalog), req), "test-offer", "on_demand")
    days = 5 + staged
    assert o["reasons"] == [
        f"deadline: the fastest layout here (16 accelerators) takes {days:.1f} days, {days - 6:.1f} days past the "
        f"6.0-day deadline; meeting it would take at least {needed} accelerators at ideal scaling"]


def test_a_deadline_shorter_than_the_staging_says_no_layout_can_meet_it():
    catalog = copy.deepcopy(CATALOG)
    catalog["sites"][0]["wan_gbps"] = 1  # 2.78 days of staging
    req = QuoteRequestIn.model_validate({
        "campaign": {"name": "gravity", "team": "test-team", "work": GRAVITY_WORK, "deadline_days": 2,
                     "data": {"dataset_tb": DATASET_TB, "home": "home-site"}},
        "options": {"terms": ["on_demand"]}})
    reason = document_option(quote(CatalogIn.model_validate(catalog), req), "test-offer", "on_demand")["reasons"][0]
    assert reason.startswith("deadline:")
    assert f"copying the dataset alone takes {staging_seconds(1) / DAY:.1f} days" in reason
    assert "accelerators at ideal scaling" not in reason


# --- splits --------------------------------------------------------------------------------------

RUN_DAYS, RUNS, DEADLINE = 5.0, 4, 12.0  # one run: 5 days on the site's 8 free accelerators
SPLIT_WORK = {"kind": "flops", "total_flops": 8 * SUSTAINED * RUN_DAYS * DAY}


def split_request(*, runs: int = RUNS, deadline: float | None = DEADLINE, work: dict[str, Any] | None = None,
                  data: dict[str, Any] | None = None) -> QuoteRequestIn:
    campaign: dict[str, Any] = {"name": "split", "team": "test-team", "work": work or SPLIT_WORK,
                                "runs": {"count": runs},
                                "data": {"dataset_tb": 1.0, "results_egress_tb": 0.4, **(data or {})}}
    if deadline is not None:
        campaign["deadline_days"] = deadline
    return QuoteRequestIn.model_validate({"campaign": campaign,
                                          "options": {"terms": ["owned_chargeback", "on_demand"]}})


def splits_of(catalog: dict[str, Any], req: QuoteRequestIn) -> tuple[CampaignEvaluation, list[OptionResult]]:
    """The campaign's own options and its splits."""
    evaluation = evaluate_with_splits(CatalogIn.model_validate(catalog).to_domain(), *req.to_domain())
    return (replace(evaluation, options=tuple(o for o in evaluation.options if o.venue_kind != "split")),
            [o for o in evaluation.options if o.venue_kind == "split"])


def test_split_points_try_every_owned_run_count_up_to_eight_of_them():
    assert split_points(1) == []
    assert split_points(4) == [1, 2, 3]
    assert len(split_points(100)) == 8 and split_points(100)[0] == 1 and split_points(100)[-1] == 99


def test_a_split_beats_both_pure_options_when_the_cheap_owned_capacity_cannot_meet_the_deadline():
    # The site lends 4 × (1 − 50%) = 2 nodes = 8 accelerators: 4 runs take 20 days there, past 12.
    # The offer's 16 nodes meet it, at 6 EUR an hour. Two runs on the site take 10 days (three
    # would take 15), so the best split runs 2 there and 2 on the offer.
    owned_runs = max(k for k in split_points(RUNS) if k * RUN_DAYS <= DEADLINE)
    assert owned_runs == 2
    evaluation, splits = splits_of(CATALOG, split_request())
    owned, rented = pick(evaluation, "home-site"), pick(evaluation, "test-offer")
    assert int(owned.screens[0]) == screens.DEADLINE
    assert_allclose(owned.layout.wall_seconds, RUNS * RUN_DAYS * DAY, rtol=RTOL)
    assert bool(rented.feasible[0])
    assert len(splits) == 1
    split = splits[0]
    part_owned, part_rented = split.parts
    assert (part_owned.venue_id, part_owned.term) == ("home-site", "owned_chargeback")
    assert (part_rented.venue_id, part_rented.term) == ("test-offer", "on_demand")
    assert split.details["owned_runs"][0] == owned_runs
    assert split.details["owned_runs"][0] + split.details["rented_runs"][0] == RUNS
    assert_allclose(split.total, part_owned.total + part_rented.total, rtol=RTOL)
    assert_allclose(split.layout.wall_seconds, max(part_owned.layout.wall_seconds[0],
                                                   part_rented.layout.wall_seconds[0]), rtol=RTOL)
    assert_allclose(part_owned.layout.wall_seconds, owned_runs * RUN_DAYS * DAY, rtol=RTOL)
    # Storage by the month makes the offer's fastest layout its cheapest: 2 runs on 64 accelerators.
    assert_allclose(part_rented.layout.wall_seconds, 2 * RUN_DAYS * 8 / 64 * DAY, rtol=RTOL)
    assert split.layout.wall_seconds[0] <= DEADLINE * DAY
    assert float(split.total[0]) < float(rented.total[0])
    # Each part sends its share of the results out: 0.4 TB × 2/4 each, at its own venue's fee.
    assert_allclose(part_owned.lines["egress"], 0.4 * 1000 * 2 / 4 * 0.02, rtol=RTOL)
    assert_allclose(part_rented.lines["egress"], 0.4 * 1000 * 2 / 4 * 0.05, rtol=RTOL)


def test_the_split_is_ranked_first_and_its_parts_add_up_in_the_quote():
    body = quote(CatalogIn.model_validate(CATALOG), split_request())
    first = body["options"][0]
    assert (first["venue"]["kind"], first["venue"]["id"], first["term"]) == ("split", "home-site+test-offer", "split")
    assert first["feasible"] and first["rank"] == 1
    assert (body["recommendation"]["venue"], body["recommendation"]["term"]) == ("home-site+test-offer", "split")
    assert "runs 2 of the runs on home-site's free capacity" in body["recommendation"]["why"]
    parts = first["parts"]
    assert [p["runs"] for p in parts] == [2, 2]
    assert sum(p["runs"] for p in parts) == RUNS
    assert abs(sum(p["total"] for p in parts) - first["cost"]["total"]) <= 0.01 * len(parts)
    assert first["timing"]["wall_clock_days"] == max(p["wall_clock_days"] for p in parts)
    assert first["layout"]["accelerators"] == sum(p["accelerators"] for p in parts)


def test_a_split_is_offered_when_neither_pure_option_can_meet_the_deadline_alone():
    catalog = copy.deepcopy(CATALOG)
    catalog["offers"][0]["nodes_max"] = 2  # 8 accelerators: 4 runs take 20 days there too
    evaluation, splits = splits_of(catalog, split_request())
    assert not any(bool(o.feasible[0]) for o in evaluation.options)
    assert len(splits) == 1
    split = splits[0]
    assert split.details["owned_runs"][0] == 2 and split.details["rented_runs"][0] == 2
    assert_allclose(split.layout.wall_seconds, 2 * RUN_DAYS * DAY, rtol=RTOL)  # both parts take 10 days
    body = quote(CatalogIn.model_validate(catalog), split_request())
    assert body["recommendation"]["term"] == "split"
    assert "only feasible option" in body["recommendation"]["why"]


def test_no_split_when_the_owned_site_alone_is_feasible_and_cheapest():
    # Without a deadline the site's 8 accelerators take 20 days for all 4 runs, at its chargeback
    # rate, which is below the offer's 6 EUR an hour.
    evaluation, splits = splits_of(CATALOG, split_request(deadline=None))
    owned, rented = pick(evaluation, "home-site"), pick(evaluation, "test-offer")
    assert bool(owned.feasible[0]) and float(owned.total[0]) < float(rented.total[0])
    assert splits == []
    body = quote(CatalogIn.model_validate(CATALOG), split_request(deadline=None))
    assert all(o["term"] != "split" for o in body["options"])


def test_no_split_for_a_single_run():
    work = {"kind": "flops", "total_flops": 8 * SUSTAINED * RUNS * RUN_DAYS * DAY}  # the same work in one run
    evaluation, splits = splits_of(CATALOG, split_request(runs=1, work=work))
    assert not bool(pick(evaluation, "home-site").feasible[0])  # 20 days > 12 still
    assert splits == []


def test_no_split_when_the_request_allows_owned_sites_only():
    _, splits = splits_of(CATALOG, split_request(data={"owned_only": True}))
    assert splits == []


DEMO_EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"


def demo_quote(name: str) -> tuple[Catalog, Campaign, QuoteOptions, Overrides]:
    catalog = CatalogIn.model_validate(json.loads((DEMO_EXAMPLES / "catalog.json").read_text("utf-8"))).to_domain()
    request = QuoteRequestIn.model_validate(json.loads((DEMO_EXAMPLES / name).read_text("utf-8")))
    return catalog, *request.to_domain()


@pytest.mark.parametrize("name", sorted(p.name for p in DEMO_EXAMPLES.glob("campaign-*.json")))
def test_skipping_splits_that_a_standing_screen_rules_out_changes_no_answer(
        name: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """No split is searched when residency rules out every site or every offer (known before the
    evaluation), nor when every owned or every rented option has another screen that no share of the
    runs lifts (owned only, precision, memory, pinned count, capacity); on every demo campaign the
    answer must be what the full search over split points gives."""
    quick = evaluate_with_splits(*demo_quote(name)).options
    monkeypatch.setattr(split, "admits", lambda *_: True)
    monkeypatch.setattr(split, "_could_take_a_part", lambda _: True)
    full = evaluate_with_splits(*demo_quote(name)).options
    assert [(o.label, float(o.total[0])) for o in quick] == [(o.label, float(o.total[0])) for o in full]


@pytest.mark.parametrize("name", sorted(p.name for p in DEMO_EXAMPLES.glob("campaign-*.json")))
def test_split_points_evaluated_with_the_campaign_leave_its_options_as_it_alone_and_parts_as_each_alone(
        name: str) -> None:
    """The campaign and both parts at every split point are scenarios of one evaluation
    (`evaluate_with_splits`). The campaign's own options must be exactly what it gets evaluated alone,
    and each split's parts what that part's runs get evaluated alone (to 1e-9 relative: the part alone
    takes no path the scenarios share), owned and rented."""
    catalog, campaign, options, overrides = demo_quote(name)
    together = evaluate_with_splits(catalog, campaign, options, overrides)
    alone = evaluate_campaign(catalog, campaign, options, overrides)
    own = [o for o in together.options if o.venue_kind != "split"]
    assert [o.label for o in own] == [o.label for o in alone.options]
    figures = {"total": lambda o: o.total, "screens": lambda o: o.screens, "nodes": lambda o: o.layout.nodes,
               "wall clock": lambda o: o.layout.wall_seconds}
    for ours, theirs in zip(own, alone.options, strict=True):
        for figure, read in figures.items():
            np.testing.assert_array_equal(np.reshape(read(ours), -1), np.reshape(read(theirs), -1),
                                          err_msg=f"{ours.label}: {figure}")
    total = int(np.asarray(campaign.runs.count))
    splits = [o for o in together.options if o.venue_kind == "split"]
    assert bool(splits) == (name == "campaign-split.json")
    for option in splits:
        for part, runs in zip(option.parts, (option.details["owned_runs"][0], option.details["rented_runs"][0]),
                              strict=True):
            share = runs / total
            by_itself = replace(campaign, runs=replace(campaign.runs, count=float(runs)),
                                data=replace(campaign.data, results_egress_tb=campaign.data.results_egress_tb * share))
            reference = next(o for o in evaluate_campaign(catalog, by_itself, options, overrides).options
                             if o.label == part.label)
            assert bool(reference.feasible[0])
            assert_allclose(part.total, reference.total, rtol=1e-9)
            assert_allclose(part.layout.wall_seconds, reference.layout.wall_seconds, rtol=1e-9)
            assert part.layout.nodes[0] == reference.layout.nodes[0]


@pytest.mark.parametrize(("runs", "deadline_days"), [(4, 14.0), (12, 40.0), (12, 90.0)])
def test_each_site_is_offered_its_cheapest_split_combined_from_the_parts_at_that_point(
        runs: int, deadline_days: float) -> None:
    """`split_options` compares the points by their parts' totals and combines only each site's
    cheapest: the split it offers must be, to the bit, the cheapest of every point's split built
    whole with `combine` (the site's chargeback at the owned share of the runs, the cheapest feasible
    rented option at the rest), the first of equal totals, where it beats both its pure options. The
    demo split campaign as it is (4 runs, 14 days: one owned run fits), and with 12 runs (eight
    points) over 40 and 90 days, where several points are feasible on both sides and the best differ."""
    catalog, campaign, options, overrides = demo_quote("campaign-split.json")
    campaign = replace(campaign, runs=replace(campaign.runs, count=np.asarray(float(runs))),
                       deadline_days=np.asarray(deadline_days))
    points = split_points(runs)
    owned_runs = np.array(points, dtype=np.float64)
    counts = np.concatenate([[float(runs)], owned_runs, runs - owned_runs])
    together = evaluate_campaign(catalog, split._part(campaign, counts, runs), options, overrides)
    rows, count = counts.size, len(points)
    built: dict[str, OptionResult] = {}
    for k, owned_count in enumerate(points):
        rented = [o for o in together.options
                  if o.venue_kind == "rented" and bool(o.feasible[1 + count + k])]
        if not rented:
            continue
        cheapest = min(rented, key=lambda o: float(o.total[1 + count + k]))
        for owned in (o for o in together.options if o.term == "owned_chargeback"):
            if not bool(owned.feasible[1 + k]):
                continue
            whole = split.combine(
                take_rows(owned, slice(1 + k, 2 + k), rows),
                take_rows(cheapest, slice(1 + count + k, 2 + count + k), rows),
                owned_runs=owned_count, rented_runs=runs - owned_count)
            if owned.venue_id not in built or float(whole.total[0]) < float(built[owned.venue_id].total[0]):
                built[owned.venue_id] = whole
    pure = {o.label: o for o in together.options}
    shown = [whole for whole in built.values() if split._worth_showing(whole, pure)]
    assert len(built) == 2 and len(shown) == 2  # both demo sites are offered a split
    offered = split.split_options(together, points, runs)
    assert [o.label for o in offered] == [whole.label for whole in shown]
    for option, expected in zip(offered, shown, strict=True):
        assert option.details["owned_runs"][0] == expected.details["owned_runs"][0]
        assert float(option.total[0]) == float(expected.total[0])
        assert [item for item in option.lines] == [item for item in expected.lines]
