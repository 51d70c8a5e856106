"""The throughput verdict of `bench_quotes.py` says what the target leaves the evaluation: the server
CPU per quote that reaching the target allows, less what floor/documented (the quote with its
evaluation free) takes. Figures shaped like a measured run (2,000 requests each)."""

import numpy as np
from bench_quotes import DOCUMENTED, QUOTES, STORED, Run, evaluation_budget


def run(name: str, per_second: float, server_cpu_ms: float | None) -> Run:
    count = 2000
    return Run(name, count, 0, count / per_second, 0.5, np.ones(count),
               None if server_cpu_ms is None else server_cpu_ms * count / 1000.0)


def runs(stored: float, documented_ms: float, quote_ms: float | None) -> list[Run]:
    return [run(STORED, stored, 2.1), run(DOCUMENTED, 280.0, documented_ms), run(QUOTES, 130.0, quote_ms)]


def test_the_budget_is_the_cpu_the_target_allows_less_the_documented_floor() -> None:
    # 0.5 × 484.5 req/s = 242.25 req/s on 2 busy workers: 2,000 / 242.25 = 8.256 ms of CPU per quote,
    # of which floor/documented takes 6.25 ms and the evaluation may take the other 2.006 ms.
    words = evaluation_budget(2, runs(484.5, 6.25, 14.48))
    assert "242.2 req/s allows 8.26 ms" in words
    assert "at most 2.01 ms, and takes 8.23 ms" in words


def test_a_target_below_the_documented_floor_leaves_no_evaluation_any_time() -> None:
    # 0.5 × 419.0 req/s on 1 worker: 1,000 / 209.5 = 4.77 ms per quote, below floor/documented's 6.64 ms.
    words = evaluation_budget(1, runs(419.0, 6.64, 15.06))
    assert "allows 4.77 ms" in words
    assert "no evaluation, however fast, passes" in words


def test_no_budget_is_stated_without_the_server_cpu() -> None:
    assert evaluation_budget(2, runs(484.5, 6.25, None)) == ""
