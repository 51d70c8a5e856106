"""Deadline tables of several venues solved at once (deadline_together.py): each venue's answer must be,
part for part and bit for bit, what `deadline.table_search` gives that venue searched on its own. The
requests are those random quotes ask (catalogs and campaigns: demo data drawn at random, as in
test_reference_evaluation.py); nothing here is a published check value: the reference is the search
each venue ran before the tables were solved together.
"""

from typing import Any

import numpy as np
import pytest

from service.domain import deadline, deadline_together, lockstep
from service.domain.campaign import QuoteOptions
from service.domain.deadline_together import TableAnswer, TableRequest
from service.domain.evaluate import evaluate_campaign
from service.domain.lockstep import evaluate_together
from tests.domain.test_reference_evaluation import SCENARIOS, one, random_campaign, random_catalog

TERMS = ("owned_chargeback", "owned_new_build", "on_demand", "committed", "interruptible")
KINDS = ("transformer", "flops", "measured")


def asked_tables(seed: int, kind: str, monkeypatch: pytest.MonkeyPatch, *, scenarios: int = 1) -> list[TableRequest]:
    """The table requests of one random quote (one scenario, with a deadline; one allowance per venue),
    or of an evaluation of its `SCENARIOS` scenarios (their tokens and deadlines vary, so each venue has
    up to as many allowances)."""
    rng = np.random.default_rng(7100 + seed)
    catalog = random_catalog(rng)
    campaign, overrides = random_campaign(rng, SCENARIOS, vary_step=False, kind=kind, with_parameters=seed % 3 != 2)
    if scenarios == 1:
        campaign, overrides = one(campaign, 0), one(overrides, 0)
    asked: list[TableRequest] = []

    def recording(questions: list[Any]) -> list[Any]:
        asked.extend(question for question in questions if isinstance(question, TableRequest))
        return evaluate_together(questions)
    monkeypatch.setattr(lockstep, "evaluate_together", recording)
    with np.errstate(all="ignore"):
        evaluate_campaign(catalog, campaign, QuoteOptions(terms=TERMS), overrides)
    monkeypatch.undo()
    return asked


def assert_same_answer(ours: TableAnswer, alone: TableAnswer) -> None:
    for part, (got, expected) in enumerate(zip(ours, alone, strict=True)):
        if isinstance(expected, dict):
            assert got.keys() == expected.keys(), part
            for name in expected:
                np.testing.assert_array_equal(got[name], expected[name], err_msg=f"part {part}: {name}", strict=True)
        else:
            np.testing.assert_array_equal(got, expected, err_msg=f"part {part}", strict=True)


# Work given as FLOPs or samples, without tokens, makes a run one step, whose work varies by scenario in these
# campaigns: a step that varies by scenario has no one table. Their quotes have one.
CASES = [(kind, 1) for kind in KINDS] + [("transformer", SCENARIOS)]


@pytest.mark.parametrize(("kind", "scenarios"), CASES)
@pytest.mark.parametrize("seed", range(8))
def test_tables_solved_together_give_each_venue_what_it_finds_alone(
        seed: int, kind: str, scenarios: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """Every venue's table of a random quote, and of a random evaluation of many scenarios (each venue and
    each interruptible term: several shapes each, one or several allowances), solved together and each
    alone: the base candidates' figures, the exact counts' figures, the distinct rows of each shape's
    chosen column, the row of each allowance and each scenario's allowance identical in value, dtype and
    shape."""
    requests = asked_tables(seed, kind, monkeypatch, scenarios=scenarios)
    assert len(requests) >= 5  # two sites, three offers and their interruptible terms
    assert scenarios == 1 or max(request.alone()[3].size for request in requests) > 1  # several allowances
    with np.errstate(all="ignore"):
        together = TableRequest.answer_together(requests)
        for request, answer in zip(requests, together, strict=True):
            assert_same_answer(answer, request.alone())


def test_both_ways_of_settling_a_table_are_taken_and_requests_of_several_loads_kept_apart(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """Over the random quotes, most venues are settled with the others and some (a guess that misses by
    more than a count: a bracket to close) by `deadline.settle`, as `table_search` settles them (each
    answer held to what it gets alone above); and requests of two quotes asked in one round are solved
    each with its own quote's, each answer still what it gets alone."""
    requests = [asked_tables(seed, kind, monkeypatch, scenarios=scenarios) for seed in range(8)
                for kind, scenarios in CASES]
    settled: list[int] = []
    settle = deadline_together.settle
    monkeypatch.setattr(deadline_together, "settle", lambda *args: settled.append(1) or settle(*args))
    with np.errstate(all="ignore"):
        for asked in requests:
            TableRequest.answer_together(asked)
    monkeypatch.undo()
    assert 0 < len(settled) < sum(map(len, requests)) / 4, (len(settled), sum(map(len, requests)))

    mixed = requests[0] + requests[1]
    groups: list[int] = []
    solve = deadline_together.solve_tables
    monkeypatch.setattr(deadline_together, "solve_tables", lambda group: groups.append(len(group)) or solve(group))
    with np.errstate(all="ignore"):
        answers = TableRequest.answer_together(mixed)
        for request, answer in zip(mixed, answers, strict=True):
            assert_same_answer(answer, request.alone())
    assert sorted(groups) == sorted([len(requests[0]), len(requests[1])])


def test_unknown_allowances_are_solved_as_table_search_solves_them(monkeypatch: pytest.MonkeyPatch) -> None:
    """Allowances that are NaN (a deadline or staging unknown for some scenarios: NaN sorts last) take the
    top of each shape and meet nothing, alone or together: the tables of random quotes and evaluations
    with their largest allowances made unknown are solved as each venue's `table_search` solves them."""
    requests = [asked_tables(seed, kind, monkeypatch, scenarios=scenarios) for seed in range(4)
                for kind, scenarios in CASES]
    known = deadline.allowances

    def unknown_at_the_top(*args: Any) -> tuple[np.ndarray, np.ndarray]:
        afforded, scenario_of = known(*args)
        afforded = afforded.copy()
        unknown = 1 if afforded.size < 3 else 2  # the largest one or two; some known where there are several
        afforded[afforded.size - unknown:] = np.nan
        return afforded, scenario_of
    monkeypatch.setattr(deadline, "allowances", unknown_at_the_top)
    monkeypatch.setattr(deadline_together, "allowances", unknown_at_the_top)
    with np.errstate(all="ignore"):
        for asked in requests:
            for request, answer in zip(asked, TableRequest.answer_together(asked), strict=True):
                assert np.isnan(deadline.allowances(request.load, request.hardware, request.deadline)[0][-1])
                assert_same_answer(answer, request.alone())
