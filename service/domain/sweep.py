"""Sweeps: many what-if scenarios through the same vectorised core as one quote.

A plan names the varied inputs as a grid (every combination) or as distributions (Monte Carlo).
Scenarios are made and evaluated in chunks, so memory stays bounded at any size; the summary
accumulates across chunks. No Python loop runs per scenario.
"""

import mmap
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from service.domain.arrays import Bools, Floats, Ints, percentiles
from service.domain.campaign import Campaign, Overrides, QuoteOptions
from service.domain.catalog import Catalog
from service.domain.comparison import breakeven_utilisations, cheapest
from service.domain.compiled import Kernel
from service.domain.distributions import Distribution, stream
from service.domain.evaluate import evaluate_campaign
from service.domain.parallelism import MAX_PIPELINE_DEGREES, divisors
from service.domain.programme import view_total
from service.domain.whatif import apply

CHUNK_ELEMENTS = 1_600_000  # scenarios × candidate layouts per chunk: bounds memory
CANDIDATES_PER_SHAPE = 4  # the memory minimum, a site's two node limits (an offer has one) and the deadline
# The inputs that change prices, the work's length, the data or the deadline, but never a step's figures or a
# candidate's node count. A sweep over these alone solves every scenario on one table of candidates (layout.py)
# and lays out no (scenarios × candidates) array: its memory grows with the options (bench_sweeps' 10-venue
# catalog, 28 options, chunks of 12,500: about 3 KB a scenario, against 10 KB over the network and 17 KB over the
# model's size), so its chunks hold OPTION_SCENARIOS / options scenarios, at most ONE_TABLE_FACTOR times the others'.
# There, 37,500 against 25,000 took a 1,000,000-scenario `berth sweep` from 6.5-6.7 to 6.0-6.2 s of CPU and a
# 200,000-row CSV stream from 702 to 843 MB of peak tree RSS (bench_sweeps 2c); 50,000 saved no more, took 966 MB.
ONE_TABLE_PATHS = frozenset({
    "campaign.work.tokens", "campaign.runs.count", "campaign.runs.exploration_fraction",
    "campaign.runs.evaluation_fraction", "campaign.deadline_days", "campaign.data.dataset_tb",
    "campaign.data.checkpoints_kept", "campaign.data.results_egress_tb", "campaign.recurrence.every_months",
    "campaign.recurrence.for_months", "overrides.electricity_price_per_kwh", "overrides.electricity_price_factor",
    "overrides.on_demand_price_factor", "overrides.rented_price_factor", "overrides.cost_of_capital_annual",
    "overrides.node_price_factor", "overrides.utilisation_planned", "overrides.grid_kgco2e_per_kwh"})
OPTION_SCENARIOS = 1_050_000  # options × scenarios per chunk of such a sweep
ONE_TABLE_FACTOR = 3


@dataclass(frozen=True)
class SweepPlan:
    campaign: Campaign
    options: QuoteOptions
    overrides: Overrides
    grid: Mapping[str, Floats] = field(default_factory=dict)
    distributions: Mapping[str, Distribution] = field(default_factory=dict)
    samples: int = 0
    seed: int = 0

    @property
    def paths(self) -> list[str]:
        return list(self.grid) if self.grid else list(self.distributions)

    @property
    def scenarios(self) -> int:
        if self.grid:
            return int(np.prod([len(v) for v in self.grid.values()], dtype=np.int64))
        return self.samples


def scenario_chunks(plan: SweepPlan, chunk: int) -> Iterator[tuple[int, dict[str, Floats]]]:
    """(first scenario index, {path: values}) for consecutive chunks of at most `chunk` scenarios.
    Grid scenarios enumerate the combinations with the last path varying fastest; Monte Carlo
    draws come from one stream per path, so they do not depend on the chunk size."""
    total = plan.scenarios
    if plan.grid:
        axes = [np.asarray(v, dtype=np.float64) for v in plan.grid.values()]
        shape = tuple(len(a) for a in axes)
        for start in range(0, total, chunk):
            index = np.unravel_index(np.arange(start, min(start + chunk, total)), shape)
            yield start, {path: axes[k][index[k]] for k, path in enumerate(plan.grid)}
        return
    generators = {path: stream(plan.seed, path) for path in plan.distributions}
    for start in range(0, total, chunk):
        size = min(chunk, total - start)
        yield start, {path: dist.draw(generators[path], size) for path, dist in plan.distributions.items()}


@dataclass(frozen=True)
class ChunkResult:
    """One chunk's scenarios: inputs, each option's total (NaN where infeasible), the cheapest."""

    inputs: dict[str, Floats]
    labels: list[str]
    owned: Bools  # which options are owned, by label order
    totals: Floats  # (options, scenarios)
    cheapest: Ints  # option index, −1 where nothing is feasible
    owned_best: Floats
    rented_best: Floats
    breakeven_labels: list[tuple[str, str, str]]
    breakeven_utilisation: Floats  # (rows, scenarios), NaN where there is none

    @property
    def size(self) -> int:
        return int(self.totals.shape[1])


def evaluate_chunk(catalog: Catalog, plan: SweepPlan, inputs: Mapping[str, Floats], *,
                   kernel: Kernel | None = None, breakeven: bool = True) -> ChunkResult:
    """The chunk's scenarios evaluated, each term priced and chosen by `kernel` where one is given
    (`compiled.kernel()`), else in numpy: the same answers. Without `breakeven` (rows read as CSV, which
    has no break-even column) the break-even utilisations are not made: no rows, an (0, S) array."""
    campaign, overrides = apply(plan.campaign, plan.overrides, inputs)
    size = len(next(iter(inputs.values()))) if inputs else 1
    evaluation = evaluate_campaign(catalog, campaign, plan.options, overrides, kernel=kernel)
    options = evaluation.options
    view = plan.options.owned_cost_view
    totals, best = np.full((len(options), size), np.nan), np.full((len(options), size), np.inf)
    for row, o in enumerate(options):  # each total where it is feasible, written in place
        np.copyto(totals[row], view_total(o, evaluation, view), where=o.feasible)
        np.copyto(best[row], totals[row], where=o.feasible)
    owned = np.array([o.venue_kind == "owned" for o in options])
    labels, utilisations = breakeven_utilisations(evaluation, size, kernel) if breakeven else ([], np.empty((0, size)))
    return ChunkResult(
        inputs=dict(inputs),
        labels=[o.label for o in options],
        owned=owned,
        totals=totals,
        cheapest=np.broadcast_to(cheapest(evaluation, plan.options.rank_by, plan.options.owned_cost_view), (size,)),
        owned_best=best[owned].min(axis=0) if owned.any() else np.full(size, np.inf),
        rented_best=best[~owned].min(axis=0) if (~owned).any() else np.full(size, np.inf),
        breakeven_labels=labels,
        breakeven_utilisation=utilisations,
    )


PERCENTILES = (5.0, 50.0, 95.0)
# Values a sweep keeps for its percentiles (256 MB of float64), shared by its options and break-even rows: a
# summary's memory is bounded whatever the catalog (ten venues have 108 rows; at 2,000,000 values each they held
# 1.7 GB). The scenarios kept are the budget over the rows, at least SAMPLE_FLOOR.
SAMPLE_VALUES = 32_000_000
SAMPLE_FLOOR = 1_000
_NO_RESERVE = getattr(mmap, "MAP_NORESERVE", 0)  # address space only, where the platform can say so


@dataclass(frozen=True)
class SampledScenarios:
    """Which of a sweep's `scenarios` its percentiles read: every one up to `capacity`, else a uniform random
    sample of `capacity` of them without replacement, drawn once (seeded, so the summary reproduces, with the
    same answer for any number of processes). A sweep's size is known before its first chunk, so every process
    that evaluates chunks can tell which of a chunk's scenarios are kept, and nothing is drawn per value (a
    reservoir drawing per value and per row cost a 1,000,000-scenario sweep on ten venues 1.7 s of its 11)."""

    scenarios: int
    capacity: int
    seed: int

    @property
    def exact(self) -> bool:
        return self.scenarios <= self.capacity

    @cached_property
    def _kept(self) -> Ints:
        generator = np.random.default_rng(np.random.SeedSequence([self.seed, 0x5EED]))
        # Unshuffled, as it is sorted: 8 ms for a 10,000,000-scenario sweep where shuffled took 160 ms.
        return np.sort(generator.choice(self.scenarios, self.capacity, replace=False, shuffle=False))

    def within(self, start: int, size: int) -> slice | Ints:
        """The positions, in the chunk of scenarios [start, start + size), of those kept."""
        if self.exact:
            return slice(None)
        first, last = np.searchsorted(self._kept, (start, start + size))
        return self._kept[first:last] - start

    def before(self, start: int) -> int:
        """How many of the scenarios before the `start`th are kept: where a chunk's values begin in the sample."""
        return start if self.exact else int(np.searchsorted(self._kept, start))


@dataclass(frozen=True)
class ChunkTally:
    """What a sweep's summary reads of one chunk, and all a worker process sends back for it: its counts, and
    each option's total and break-even utilisation at the chunk's scenarios the sample keeps, unless these were
    written into the sample itself (`Tallying.share`). On ten venues a whole chunk's result is about 920 bytes a
    scenario; beyond the sample's capacity most is not kept, and sending it cost a 1,000,000-scenario sweep
    1.5 s of CPU in pickles and pipes; sending the values kept, 0.2-0.3 s more than writing them in place."""

    size: int
    labels: list[str]
    owned: Bools
    breakeven_labels: list[tuple[str, str, str]]
    cheapest: Ints  # per option, the scenarios where it is the cheapest
    feasible: Ints  # per option, the scenarios where it is feasible
    nothing_feasible: int
    owning_wins: int
    breakeven_reachable: Ints  # per break-even row, the scenarios where it is reached
    kept: int  # scenarios the sample keeps
    # (options, scenarios kept), NaN where infeasible; and (rows, scenarios kept), NaN or infinite where there
    # is none. None where they were written into the sample in place.
    totals: Floats | None
    breakeven_utilisation: Floats | None


@dataclass
class Tallying:
    """Reduces a sweep's chunks to their `ChunkTally`, the same in every process: the scenarios kept
    (`SampledScenarios`) follow from the sweep's size, its seed, and the budget over the chunk's rows (its
    options and break-even rows, the same in every chunk), known at the first chunk. It holds the sweep's
    sample (`sample`); once `share`d, the processes forked from this one write each chunk's kept values into
    it where they belong, and send back only the counts."""

    scenarios: int
    values: int
    seed: int
    _sampled: SampledScenarios | None = field(default=None, init=False, repr=False)
    _pages: mmap.mmap | None = field(default=None, init=False, repr=False)  # shared with forked processes
    _sample: "ScenarioSample | None" = field(default=None, init=False, repr=False)

    def sampled(self, rows: int) -> SampledScenarios:
        if self._sampled is None:
            capacity = max(SAMPLE_FLOOR, self.values // max(rows, 1))
            self._sampled = SampledScenarios(self.scenarios, capacity, self.seed)
        return self._sampled

    def share(self) -> None:
        """Map the sample's memory now, before this process forks those that will tally the chunks, so that
        they write into it: as many values as the budget (address space; a page costs memory once written)."""
        if self._pages is None:
            self._pages = mmap.mmap(-1, max(self.values, 1) * 8, flags=mmap.MAP_SHARED | _NO_RESERVE)

    def sample(self, rows: int) -> "ScenarioSample":
        """The sweep's sample of `rows` rows, made at the first call: in the shared memory where it fits."""
        if self._sample is None:
            self._sample = ScenarioSample(rows, self.sampled(rows), self._pages)
        return self._sample

    def __getstate__(self) -> dict[str, object]:
        # A process started afresh (not forked) shares no memory with this one: it sends the values back.
        return {**self.__dict__, "_pages": None, "_sample": None}

    def __call__(self, chunk: ChunkResult, start: int) -> ChunkTally:
        """The tally of `chunk`, whose first scenario is the sweep's `start`th."""
        rows = len(chunk.labels) + len(chunk.breakeven_labels)
        sampled = self.sampled(rows)
        at = sampled.within(start, chunk.size)
        totals, utilisation = chunk.totals[:, at], chunk.breakeven_utilisation[:, at]
        written = self._pages is not None and self.sample(rows).shared
        if written:
            self.sample(rows).put(sampled.before(start), totals, utilisation)
        return ChunkTally(
            size=chunk.size,
            labels=chunk.labels,
            owned=chunk.owned,
            breakeven_labels=chunk.breakeven_labels,
            cheapest=np.bincount(chunk.cheapest[chunk.cheapest >= 0], minlength=len(chunk.labels)),
            feasible=np.isfinite(chunk.totals).sum(axis=1),
            nothing_feasible=int((chunk.cheapest < 0).sum()),
            owning_wins=int((chunk.owned_best < chunk.rented_best).sum()),
            breakeven_reachable=np.isfinite(chunk.breakeven_utilisation).sum(axis=1),
            kept=totals.shape[1],
            totals=None if written else totals,
            breakeven_utilisation=None if written else utilisation,
        )


class ScenarioSample:
    """The values the percentiles read, one row per option's total and per break-even row, at the scenarios
    `sampled` keeps: written in order, chunk after chunk, into one array made at the first, and touched only as
    far as it is filled; in `pages` where they are given and large enough (memory shared with other processes,
    which write chunks into it), else in memory of its own. A row's percentiles read its finite values (NaN or
    infinite where an option is infeasible or a break-even unreachable)."""

    def __init__(self, rows: int, sampled: SampledScenarios, pages: mmap.mmap | None = None) -> None:
        self.sampled = sampled
        kept = min(sampled.scenarios, sampled.capacity)
        self.shared = pages is not None and len(pages) >= rows * kept * 8
        # An anonymous map rather than numpy's memory: numpy asks for huge pages on large arrays, and where the
        # kernel compacts memory to find them on the first touch, filling this one cost 0.3-0.6 s more of system
        # time (a 1,000,000-scenario sweep on ten venues).
        memory = pages if pages is not None and self.shared else mmap.mmap(-1, max(rows * kept, 1) * 8)
        self._values = np.frombuffer(memory, np.float64, rows * kept).reshape(rows, kept)
        self._filled = 0

    def put(self, column: int, *blocks: Floats) -> None:
        """A chunk's values at its scenarios kept, `blocks` of (rows, kept) together the rows, written from
        `column` on (the scenarios kept before the chunk's first)."""
        count = blocks[0].shape[1]
        self._holds(column + count)
        row = 0
        for block in blocks:
            self._values[row:row + len(block), column:column + count] = block
            row += len(block)

    def append(self, *blocks: Floats) -> None:
        """The next chunk's values at its scenarios kept: `blocks` of (rows, kept), together the rows."""
        self.put(self._filled, *blocks)
        self._filled += blocks[0].shape[1]

    def extend(self, count: int) -> None:
        """The next chunk's `count` scenarios kept, written in place by another process (`put`)."""
        self._holds(self._filled + count)
        self._filled += count

    def _holds(self, scenarios: int) -> None:
        if scenarios > self._values.shape[1]:
            raise ValueError(f"more than the {self._values.shape[1]:,} scenarios this sample keeps")

    @property
    def held(self) -> Floats:
        """The values kept so far, (rows, scenarios kept): a view."""
        return self._values[:, :self._filled]

    def percentiles(self, row: int, q: tuple[float, ...]) -> list[float | None]:
        values = self.held[row]
        data = values[np.isfinite(values)]  # a copy, reordered in place below
        if data.size == 0:
            return [None for _ in q]
        return [float(v) for v in percentiles(data, q)]


class SweepSummary:
    """Accumulates chunk results into the sweep's summary (api.md: per option p5/p50/p95 of total
    cost and share cheapest; probability owning beats renting; break-even utilisation percentiles),
    for a sweep of `scenarios` scenarios, given in order: whole (`add`), or as tallies made by `tallying`
    (`add_tally`), in this process or in another."""

    def __init__(self, scenarios: int, *, sample_values: int = SAMPLE_VALUES, seed: int = 0) -> None:
        self.tallying = Tallying(scenarios, sample_values, seed)  # it holds the sweep's size
        self.scenarios = 0
        self.labels: list[str] = []
        self.owned_labels: set[str] = set()
        self._cheapest: Ints | None = None
        self._feasible: Ints | None = None
        self._nothing_feasible = 0
        self._owning_wins = 0
        self._breakeven_labels: list[tuple[str, str, str]] = []
        self._breakeven_reachable: Ints | None = None
        self._sample: ScenarioSample | None = None  # made at the first chunk, which tells how many rows

    def add(self, chunk: ChunkResult) -> None:
        self.add_tally(self.tallying(chunk, self.scenarios))

    def add_tally(self, tally: ChunkTally) -> None:
        if self.scenarios + tally.size > self.tallying.scenarios:
            raise ValueError(f"more than the {self.tallying.scenarios:,} scenarios this summary was made for")
        if self._sample is None:
            self.labels = tally.labels
            self.owned_labels = {label for label, own in zip(tally.labels, tally.owned, strict=True) if own}
            self._sample = self.tallying.sample(len(tally.labels) + len(tally.breakeven_labels))
            self._cheapest = np.zeros(len(tally.labels), np.int64)
            self._feasible = np.zeros(len(tally.labels), np.int64)
            self._breakeven_labels = tally.breakeven_labels
            self._breakeven_reachable = np.zeros(len(tally.breakeven_labels), np.int64)
        assert self._cheapest is not None and self._feasible is not None
        assert self._breakeven_reachable is not None
        if tally.totals is None or tally.breakeven_utilisation is None:
            self._sample.extend(tally.kept)
        else:
            self._sample.append(tally.totals, tally.breakeven_utilisation)
        self.scenarios += tally.size
        self._cheapest += tally.cheapest
        self._feasible += tally.feasible
        self._nothing_feasible += tally.nothing_feasible
        self._owning_wins += tally.owning_wins
        self._breakeven_reachable += tally.breakeven_reachable

    def result(self) -> dict[str, object]:
        n = max(self.scenarios, 1)
        options = []
        for k, label in enumerate(self.labels):
            p5, p50, p95 = self._percentiles(k)
            options.append({
                "option": label,
                "total_p5": p5, "total_p50": p50, "total_p95": p95,
                "cheapest_share": float(self._cheapest[k]) / n if self._cheapest is not None else 0.0,
                "feasible_share": float(self._feasible[k]) / n if self._feasible is not None else 0.0,
            })
        breakeven = []
        for k, (site, offer, term) in enumerate(self._breakeven_labels):
            p5, p50, p95 = self._percentiles(len(self.labels) + k)
            reachable = self._breakeven_reachable[k] if self._breakeven_reachable is not None else 0
            breakeven.append({"site": site, "offer": offer, "term": term, "utilisation_p5": p5,
                              "utilisation_p50": p50, "utilisation_p95": p95,
                              "reachable_share": float(reachable) / n})
        sample = self._sample
        return {
            "scenarios": self.scenarios,
            "options": options,
            "nothing_feasible_share": self._nothing_feasible / n,
            "probability_owning_beats_renting": self._owning_wins / n,
            "breakeven_utilisation": breakeven,
            "percentiles": ("exact" if sample is None or sample.sampled.exact
                            else f"estimated from a seeded sample of {sample.sampled.capacity:,} scenarios"),
        }

    def _percentiles(self, row: int) -> list[float | None]:
        """The row's (the options', then the break-even rows') percentiles."""
        assert self._sample is not None, "a row exists once a chunk has made the sample"
        return self._sample.percentiles(row, PERCENTILES)


def chunk_size(catalog: Catalog, paths: Iterable[str] = ()) -> int:
    """Scenarios per chunk so that the (scenarios × candidate layouts) arrays stay near CHUNK_ELEMENTS.
    A venue's candidates do not grow with its size (layout.py): at most its node type's shapes (the
    divisors of its accelerators per node × MAX_PIPELINE_DEGREES), each at CANDIDATES_PER_SHAPE counts.
    A sweep over ONE_TABLE_PATHS alone (`paths`) has no such arrays: its chunks are bounded by its
    options instead (OPTION_SCENARIOS), up to ONE_TABLE_FACTOR times larger.
    """
    shapes = max((len(divisors(node.accelerators_per_node)) * MAX_PIPELINE_DEGREES
                  for node in catalog.node_types.values()), default=1)
    size = max(64, CHUNK_ELEMENTS // (shapes * CANDIDATES_PER_SHAPE))
    varied = set(paths)
    if not varied or not varied <= ONE_TABLE_PATHS:
        return size
    options = 2 * len(catalog.sites) + sum((offer.on_demand_per_accelerator_hour is not None) + len(offer.committed)
                                           + (offer.interruptible is not None) for offer in catalog.offers)
    return max(size, min(ONE_TABLE_FACTOR * size, OPTION_SCENARIOS // max(options, 1)))


@dataclass(frozen=True)
class TornadoBar:
    path: str
    centre: float
    low: float
    high: float
    gap_low: float  # best owned total − best rented total, input at `low`
    gap_high: float
    gap_centre: float

    @property
    def effect(self) -> float:
        """How far the input moves the gap across its swing (NaN when a side has no feasible option)."""
        return abs(self.gap_high - self.gap_low)


def tornado(catalog: Catalog, plan: SweepPlan, centres: Mapping[str, float],
            ranges: Mapping[str, tuple[float, float]], swing: float) -> list[TornadoBar]:
    """Each varied input moved to centre × (1 ∓ swing), the others held at their centres, and the
    change in the owning-minus-renting gap; largest effect first. All 1 + 2P scenarios run in one
    evaluation. `ranges` clips the moved values to each input's valid range."""
    paths = list(centres)
    count = 1 + 2 * len(paths)
    inputs = {path: np.full(count, centres[path]) for path in paths}
    for k, path in enumerate(paths):
        low, high = ranges[path]
        inputs[path][1 + 2 * k] = np.clip(centres[path] * (1.0 - swing), low, high)
        inputs[path][2 + 2 * k] = np.clip(centres[path] * (1.0 + swing), low, high)
    result = evaluate_chunk(catalog, plan, inputs)
    gap = result.owned_best - result.rented_best
    gap = np.where(np.isfinite(gap), gap, np.nan)
    bars = [TornadoBar(path, centres[path], float(inputs[path][1 + 2 * k]), float(inputs[path][2 + 2 * k]),
                       float(gap[1 + 2 * k]), float(gap[2 + 2 * k]), float(gap[0]))
            for k, path in enumerate(paths)]
    return sorted(bars, key=lambda bar: -np.nan_to_num(bar.effect, nan=-1.0))
