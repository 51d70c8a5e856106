"""Layout searches run side by side, their step figures evaluated together.

A quote searches each venue's layouts on its own (`layout.layout_search`), and each search asks
`step.step_figures` for a table of node counts, then for the exact counts near the deadline: a
hundred-odd numpy calls each time, on arrays of a few hundred candidates, so that a quote's searches
cost far more in calls than in arithmetic. Written as generators that yield what they need
(`ask`), the searches run together (`together`): each round, every search's questions of one kind are
answered in one go (`Question.answer_together`). Step figures (`StepRequest`): the requests for the
same load become one call over their candidates side by side, the hardware of each request spread over
its own candidates. Every figure is elementwise in the candidates, so each comes out as it would
alone, bit for bit. A question may be a larger part of a search (`deadline_together.TableRequest`: a
venue's whole deadline table), answered for every venue at once.

`drive` runs a search to its end, answering each round's questions together.
"""

from collections.abc import Generator, Sequence
from dataclasses import dataclass, fields, replace
from typing import Any, Generic, TypeVar

import numpy as np

from service.domain.parallelism import Shapes
from service.domain.step import STEP_HARDWARE, Columns, Hardware, Load, side_by_side, step_figures

T = TypeVar("T")
A = TypeVar("A")
Figures = dict[str, Any]


class Question(Generic[A]):
    """What a search may ask for: answered together with the other questions of its kind in a round,
    each answer what the question alone would get."""

    @classmethod
    def answer_together(cls, questions: Sequence[Any]) -> list[A]:
        raise NotImplementedError

    def alone(self) -> A:
        """The answer this question gets by itself: what `answer_together` must give it."""
        raise NotImplementedError


@dataclass(frozen=True)
class StepRequest(Question[Figures]):
    """`step_figures(load, hardware, columns, found)`, asked for by a search."""

    load: Load
    hardware: Hardware
    columns: Columns
    found: Shapes

    @classmethod
    def answer_together(cls, questions: Sequence[Any]) -> list[Figures]:
        """Each request's step figures: the requests for one load whose hardware is one value for all
        scenarios and whose candidates are one row, in one call over their candidates side by side;
        any other alone."""
        requests: Sequence[StepRequest] = questions
        out: dict[int, Figures] = {}
        groups: dict[tuple[int, tuple[int, ...]], list[int]] = {}
        for index, request in enumerate(requests):
            if joinable(request.columns, request.hardware):
                groups.setdefault((id(request.load), request.found.zero_stages), []).append(index)
            else:
                out[index] = request.alone()
        for members in groups.values():
            if len(members) == 1:
                out[members[0]] = requests[members[0]].alone()
                continue
            joined = [requests[index] for index in members]
            widths = [_width(request.columns) for request in joined]
            # A step reads of the shapes only their ZeRO stages, which the group shares.
            figures = step_figures(joined[0].load, per_candidate([request.hardware for request in joined], widths),
                                   side_by_side(*(request.columns for request in joined)), joined[0].found)
            out.update(zip(members, split_columns(figures, widths), strict=True))
        return [out[index] for index in range(len(requests))]

    def alone(self) -> Figures:
        return step_figures(self.load, self.hardware, self.columns, self.found)


Search = Generator[list[Question[Any]], list[Any], T]


def ask(question: Question[A]) -> Generator[list[Question[Any]], list[Any], A]:
    """`answer = yield from ask(question)`: one question's answer, within a search."""
    answers = yield [question]
    answer: A = answers[0]
    return answer


def together(searches: Sequence[Search[Any]]) -> Search[list[Any]]:
    """The searches as one: each round asks what every unfinished search asks, in order; its result
    is every search's result, in order."""
    results: list[Any] = [None] * len(searches)
    asking: dict[int, list[Question[Any]]] = {}

    def advance(index: int, reply: list[Any] | None) -> None:
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
    """Run a search to its end, each round's questions answered together."""
    reply: list[Any] | None = None
    while True:
        try:
            requests = search.send(reply)  # type: ignore[arg-type]
        except StopIteration as finished:
            return finished.value  # type: ignore[no-any-return]
        reply = evaluate_together(requests)


def evaluate_together(questions: Sequence[Question[Any]]) -> list[Any]:
    """Each question's answer, the questions of each kind answered together, in the order asked."""
    kinds: dict[type[Question[Any]], list[int]] = {}
    for index, question in enumerate(questions):
        kinds.setdefault(type(question), []).append(index)
    out: list[Any] = [None] * len(questions)
    for kind, members in kinds.items():
        answers = kind.answer_together([questions[index] for index in members])
        for index, answer in zip(members, answers, strict=True):
            out[index] = answer
    return out


def _width(columns: Columns) -> int:
    return int(np.shape(columns.nodes)[1])


def joinable(columns: Columns, hardware: Hardware) -> bool:
    """Whether step figures of these candidates on this hardware can share a call: candidates one row,
    and every figure of the hardware the step reads one value (staging, never read by a step, may vary)."""
    of_columns, of_hardware = vars(columns), vars(hardware)
    return (all(np.shape(of_columns[name])[0] == 1 for name in COLUMNS)
            and all(isinstance(of_hardware[name], float | int) or np.size(of_hardware[name]) == 1
                    for name in STEP_HARDWARE))


COLUMNS = tuple(f.name for f in fields(Columns))  # what candidate columns are made of


def per_candidate(hardware: Sequence[Hardware], widths: Sequence[int]) -> Hardware:
    """Several venues' hardware as one, each figure the step reads spread over each one's `widths`
    candidates, (1, K) side by side; staging, which a step never reads, NaN so that any use shows."""
    spread = np.repeat(np.array([each.step_values for each in hardware]).T, widths, axis=1)  # (figures, K)
    spread_figures: dict[str, Any] = {name: spread[j][np.newaxis, :] for j, name in enumerate(STEP_HARDWARE)}
    return replace(hardware[0], **spread_figures, staging_seconds=np.full((1, 1), np.nan))


def split_columns(figures: Figures, widths: Sequence[int]) -> list[Figures]:
    """Figures of candidates side by side, cut back into blocks of `widths` columns, in order."""
    parts, end = [], 0
    for width in widths:
        start, end = end, end + width
        parts.append({name: value[:, start:end] for name, value in figures.items()})
    return parts
