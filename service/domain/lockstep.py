"""Layout searches run side by side, their step figures evaluated together.

A quote searches each venue's layouts on its own (`layout.layout_search`), and each search asks
`step.step_figures` for a table of node counts, then for the exact counts near the deadline: a
hundred-odd numpy calls each time, on arrays of a few hundred candidates, so that a quote's searches
cost far more in calls than in arithmetic. Written as generators that yield what they need
(`ask`), the searches run together (`together`): each round, every search's requests for the same
load become one call over their candidates side by side, the hardware of each request spread over
its own candidates (`evaluate_together`). Every figure is elementwise in the candidates, so each
comes out as it would alone, bit for bit.

`drive` runs a search to its end, evaluating each round's requests together.
"""

from collections.abc import Generator, Sequence
from dataclasses import dataclass, fields, replace
from typing import Any, TypeVar

import numpy as np

from service.domain.parallelism import Shapes
from service.domain.step import Columns, Hardware, Load, side_by_side, step_figures

T = TypeVar("T")
Figures = dict[str, Any]


@dataclass(frozen=True)
class StepRequest:
    """`step_figures(load, hardware, columns, found)`, asked for by a search."""

    load: Load
    hardware: Hardware
    columns: Columns
    found: Shapes


Search = Generator[list[StepRequest], list[Figures], T]


def ask(request: StepRequest) -> Generator[list[StepRequest], list[Figures], Figures]:
    """`figures = yield from ask(request)`: one request's figures, within a search."""
    figures = yield [request]
    return figures[0]


def together(searches: Sequence[Search[Any]]) -> Search[list[Any]]:
    """The searches as one: each round asks what every unfinished search asks, in order; its result
    is every search's result, in order."""
    results: list[Any] = [None] * len(searches)
    asking: dict[int, list[StepRequest]] = {}

    def advance(index: int, reply: list[Figures] | None) -> None:
        try:
            asking[index] = searches[index].send(reply)  # type: ignore[arg-type]
        except StopIteration as finished:
            asking.pop(index, None)
            results[index] = finished.value

    for index in range(len(searches)):
        advance(index, None)
    while asking:
        order = list(asking)
        replies = yield [request for index in order for request in asking[index]]
        offset = 0
        for index in order:
            count = len(asking[index])
            advance(index, replies[offset:offset + count])
            offset += count
    return results


def drive(search: Search[T]) -> T:
    """Run a search to its end, each round's requests evaluated together."""
    reply: list[Figures] | None = None
    while True:
        try:
            requests = search.send(reply)  # type: ignore[arg-type]
        except StopIteration as finished:
            return finished.value  # type: ignore[no-any-return]
        reply = evaluate_together(requests)


def evaluate_together(requests: Sequence[StepRequest]) -> list[Figures]:
    """Each request's step figures: the requests for one load whose hardware is one value for all
    scenarios and whose candidates are one row, in one call over their candidates side by side;
    any other alone."""
    out: dict[int, Figures] = {}
    groups: dict[tuple[int, tuple[int, ...]], list[int]] = {}
    for index, request in enumerate(requests):
        if _joinable(request):
            groups.setdefault((id(request.load), request.found.zero_stages), []).append(index)
        else:
            out[index] = _alone(request)
    for members in groups.values():
        if len(members) == 1:
            out[members[0]] = _alone(requests[members[0]])
            continue
        joined = [requests[index] for index in members]
        # A step reads of the shapes only their ZeRO stages, which the group shares.
        columns = side_by_side(*(request.columns for request in joined))
        figures = step_figures(joined[0].load, _per_candidate(joined), columns, joined[0].found)
        end = 0
        for index, request in zip(members, joined, strict=True):
            start, end = end, end + np.shape(request.columns.nodes)[1]
            out[index] = {name: value[:, start:end] for name, value in figures.items()}
    return [out[index] for index in range(len(requests))]


def _alone(request: StepRequest) -> Figures:
    return step_figures(request.load, request.hardware, request.columns, request.found)


def _joinable(request: StepRequest) -> bool:
    """Whether the request's step figures can share a call: candidates one row, and every figure of
    the hardware the step reads one value (staging, never read by a step, may vary)."""
    columns, hardware = vars(request.columns), vars(request.hardware)
    return (all(np.shape(columns[name])[0] == 1 for name in COLUMNS)
            and all(isinstance(hardware[name], float | int) or np.size(hardware[name]) == 1 for name in STEP_HARDWARE))


# The hardware a step reads: everything but the staging time; and what candidate columns are made of.
STEP_HARDWARE = tuple(f.name for f in fields(Hardware) if f.name != "staging_seconds")
COLUMNS = tuple(f.name for f in fields(Columns))


def _per_candidate(requests: Sequence[StepRequest]) -> Hardware:
    """The requests' hardware as one, each figure the step reads spread over each request's
    candidates, (1, K) side by side; staging, which a step never reads, NaN so that any use shows."""
    widths = [np.shape(request.columns.nodes)[1] for request in requests]

    def spread(name: str) -> Any:
        values = [np.asarray(getattr(request.hardware, name), dtype=np.float64).reshape(-1)[0] for request in requests]
        return np.array(values).repeat(widths)[np.newaxis, :]
    per_candidate: dict[str, Any] = {name: spread(name) for name in STEP_HARDWARE}
    return replace(requests[0].hardware, **per_candidate, staging_seconds=np.full((1, 1), np.nan))
