"""Layout searches run together (lockstep.py): every venue's step figures evaluated in one call per
round must be, figure for figure and bit for bit, what each request gives alone; and the searches'
results must come back to the searches that asked. Catalogs and campaigns are demo data drawn at
random (test_reference_evaluation.py); nothing here is a published check value: the reference is
step_figures called once per request, as before the searches ran together.
"""

import dataclasses
from collections.abc import Generator
from typing import Any

import numpy as np
import pytest

from service.domain import lockstep
from service.domain.campaign import QuoteOptions, Recurrence
from service.domain.evaluate import evaluate_campaign
from service.domain.lockstep import StepRequest, evaluate_together, together
from service.domain.step import step_figures
from tests.domain.test_reference_evaluation import SCENARIOS, assert_identical, one, random_campaign, random_catalog

TERMS = ("owned_chargeback", "owned_new_build", "on_demand", "committed", "interruptible")


def recorded_rounds(seed: int, monkeypatch: pytest.MonkeyPatch) -> list[list[StepRequest]]:
    """The requests of every round of one random quote's searches (one scenario), without a deadline, so
    that each venue asks for its candidates' step figures (with one, for its deadline table whole:
    test_deadline_together.py)."""
    rng = np.random.default_rng(5100 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, SCENARIOS, vary_step=False, with_deadline=False)
    rounds: list[list[StepRequest]] = []

    def recording(requests: list[StepRequest]) -> list[dict[str, Any]]:
        assert all(isinstance(request, StepRequest) for request in requests)
        rounds.append(list(requests))
        return evaluate_together(requests)
    monkeypatch.setattr(lockstep, "evaluate_together", recording)
    with np.errstate(all="ignore"):
        evaluate_campaign(catalog, one(campaign, 0), QuoteOptions(terms=TERMS), one(overrides, 0))
    monkeypatch.undo()
    return rounds


@pytest.mark.parametrize("seed", range(6))
def test_requests_evaluated_together_give_each_what_it_gives_alone(seed: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """Each round of a random quote, and the same round with requests that cannot join (hardware that
    varies by scenario, candidates one row per scenario) mixed in: every figure of every request
    equal to step_figures of that request alone, in value, dtype and shape; and the joinable requests
    really shared one call."""
    rounds = recorded_rounds(seed, monkeypatch)
    assert max(len(requests) for requests in rounds) >= 4  # the venues' tables, asked for in one round
    calls: list[int] = []  # the candidates of each step_figures call

    def counted(*args: Any, **kwargs: Any) -> dict[str, Any]:
        calls.append(np.shape(args[2].nodes)[1])
        return step_figures(*args, **kwargs)
    for requests in rounds:
        first = requests[0]
        varying = dataclasses.replace(first, hardware=dataclasses.replace(
            first.hardware, network_gbps=np.array([[150.0], [450.0], [1600.0]])))
        per_row = dataclasses.replace(first, columns=dataclasses.replace(
            first.columns, nodes=np.concatenate([first.columns.nodes, 2.0 * first.columns.nodes])))
        mixed = [varying, *requests, per_row]
        calls.clear()
        monkeypatch.setattr(lockstep, "step_figures", counted)
        together_figures = evaluate_together(mixed)
        monkeypatch.undo()
        width = np.shape(first.columns.nodes)[1]  # the two that cannot join alone, then the rest in one call
        assert calls == [width, width, sum(np.shape(request.columns.nodes)[1] for request in requests)]
        for request, figures in zip(mixed, together_figures, strict=True):
            alone = step_figures(request.load, request.hardware, request.columns, request.found)
            assert figures.keys() == alone.keys()
            for name in alone:
                np.testing.assert_array_equal(figures[name], alone[name], err_msg=name, strict=True)


def test_searches_run_together_each_get_their_own_replies_in_order() -> None:
    """`together` asks, each round, what every unfinished search asks, in order, and routes each
    reply back to the search that asked; a search that asks nothing finishes at once; the result
    is every search's result in order."""
    def search(name: str, rounds: list[int]) -> Generator[list[Any], list[Any], tuple[str, list[Any]]]:
        seen: list[Any] = []
        for count in rounds:
            replies = yield [f"{name}{len(seen)}.{k}" for k in range(count)]
            seen.extend(replies)
        return name, seen

    joint: Any = together([search("a", [2, 1]), search("b", []), search("c", [1, 1, 3])])  # tokens, not requests
    asked = next(joint)
    log = [asked]
    try:
        while True:
            asked = joint.send([f"<{request}>" for request in asked])
            log.append(asked)
    except StopIteration as finished:
        results = finished.value
    assert log == [["a0.0", "a0.1", "c0.0"], ["a2.0", "c1.0"], ["c2.0", "c2.1", "c2.2"]]
    assert results == [("a", ["<a0.0>", "<a0.1>", "<a2.0>"]), ("b", []),
                       ("c", ["<c0.0>", "<c1.0>", "<c2.0>", "<c2.1>", "<c2.2>"])]


@pytest.mark.parametrize("kind", ["transformer", "flops", "measured", "pinned"])
@pytest.mark.parametrize("recurring", [False, True])
@pytest.mark.parametrize("seed", range(6))
def test_an_evaluation_is_identical_with_its_searches_run_together_or_each_step_alone(
        seed: int, recurring: bool, kind: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """Whole evaluations of random catalogs (every term), one scenario (a quote) and many (a sweep's
    chunk; the step varying by scenario for odd seeds), with and without a deadline, for work given as
    a transformer, as FLOPs (a run one step) or as a measured throughput, and with a pinned count of
    accelerators: every figure of every option identical whether each round's questions are answered
    together or each alone (step figures one request at a time, each deadline table searched step by
    step: as before the searches ran together)."""
    rng = np.random.default_rng(5300 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, SCENARIOS, vary_step=seed % 2 == 1, with_deadline=seed % 4 != 2,
                                          kind="transformer" if kind == "pinned" else kind,
                                          with_parameters=seed % 3 != 2)
    if recurring:
        campaign = dataclasses.replace(campaign, recurrence=Recurrence(every_months=float(rng.choice([1.0, 4.0])),
                                                                       for_months=36.0))
    pinned = int(rng.choice([64, 256, 1024])) if kind == "pinned" else None
    options = QuoteOptions(terms=TERMS, fixed_accelerators=pinned)

    def evaluated() -> list[Any]:
        with np.errstate(all="ignore"):
            return [evaluate_campaign(catalog, c, options, o)
                    for c, o in ((one(campaign, 0), one(overrides, 0)), (campaign, overrides))]
    rounds: list[int] = []

    def counted(requests: list[StepRequest]) -> list[dict[str, Any]]:
        rounds.append(len(requests))
        return evaluate_together(requests)
    monkeypatch.setattr(lockstep, "evaluate_together", counted)
    ours = evaluated()
    assert kind == "pinned" or max(rounds) >= 2  # a quote's venues asked together (a pinned count asks nothing)
    monkeypatch.setattr(lockstep, "evaluate_together", lambda questions: [question.alone() for question in questions])
    reference = evaluated()
    assert_identical(ours, reference, "evaluation")
    assert any(np.isfinite(option.total).any() for option in reference[0].options)
