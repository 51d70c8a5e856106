"""What one quote costs, stage by stage, in process, and as the catalog grows; and what the first quote of
a fresh command and of a fresh server takes.

    .venv/bin/python tests/benchmarks/bench_quote_stages.py [--repeats 30] [--warmup 3] [--no-growth] [--no-cold]

1. In process, on one core (the BLAS/OpenMP pools are limited to one thread before numpy loads): for
   each demo campaign (`pricing_examples/campaign-*.json`, against `pricing_examples/catalog.json`), the
   best CPU time (time.process_time) over --repeats calls, after --warmup untimed ones, of
   `service.usecases.quoting.quote` and of each of its stages, computed by the functions quote() calls,
   in its order: the request checked against the catalog (`request_problems`), `catalog.to_domain()`,
   `request.to_domain()`, `evaluate_with_splits` (the campaign and, for a campaign of several runs, its
   split points as scenarios of one evaluation, and the splits made of them), `quote_document`. Each repeat
   runs the
   whole quote, then the stages, so both meet the same machine; the sum of the stages' best times is
   printed beside the whole's best (each stage's best may come from another repeat, so the sum may be a
   little less). Then what POST /v1/quotes does with the body after quote(), timed the same way:
   `envelope` (identity and provenance) and the answer encoded as the API encodes it
   (`FastJSONResponse`: orjson). Beside them, the CPU time of the layout search within the stages
   (`layout_search` and the step figures its searches ask for, every venue's physics, split points
   included) and of the stages without it: a bound, what a quote would still take were the search
   free; and the stages but `evaluate`: what it
   would take were the whole evaluation free, a bound for any model, however fast. Targets: quote() at
   most 4 ms CPU per campaign, 8 ms for campaign-split.json.
2. Growth (information), timed the same way: what a quote of campaign-owned-wins.json costs as the
   catalog grows, its rented offers replaced by 1, 2, 4 and 8 copies of its first offer (each its own
   id, the sites kept): once with every term of that offer (on demand, two committed terms and an
   interruptible one, which searches layouts on its own), once with the request's rented terms cut to on
   demand. A least-squares line through each series gives what one more offer adds to quote(), to its
   evaluation (and of it, to the layout search) and to its document, and the intercept: what the quote
   costs before any offer.
3. Cold (skipped with --no-cold): the wall time of a fresh `python -m service.cli quote CAMPAIGN
   --catalog catalog.json --format json` from its start to its exit, the answer written, for each demo
   campaign; and of the first POST /v1/quotes (campaign-owned-wins.json) that a freshly started
   `berth serve` answers once its /readyz is 200 (bench_quotes.start_server). Target: under 1 s each.
   These processes run in the environment this script was started in (their thread pools are not
   limited), with the bytecode caches and the OS file cache as earlier runs left them.

It prints PASS or MISS per target with the figure measured, and exits 0 whatever the figures (1 if a
quote, the command or the server fails, which is no figure at all).
"""

import os

# One core for the in-process figures; the pools are sized when numpy loads. The environment is given
# back once it has (below), so the cold subprocesses start as a user would start them.
POOLS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
USER_POOLS = {pool: os.environ.get(pool) for pool in POOLS}
os.environ.update(dict.fromkeys(POOLS, "1"))

import argparse  # noqa: E402
import json  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import urllib.request  # noqa: E402
from collections.abc import Callable, Sequence  # noqa: E402
from datetime import UTC, datetime  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from bench_quotes import CAMPAIGN, start_server, stop_server  # noqa: E402

from service.api.responses import FastJSONResponse  # noqa: E402
from service.contract.catalog import CatalogIn  # noqa: E402
from service.contract.document import quote_document  # noqa: E402
from service.contract.request import QuoteRequestIn  # noqa: E402
from service.domain import evaluate as evaluate_module  # noqa: E402
from service.domain import lockstep  # noqa: E402
from service.domain.campaign import OWNED_TERMS  # noqa: E402
from service.domain.layout import layout_search  # noqa: E402
from service.domain.lockstep import evaluate_together  # noqa: E402
from service.domain.split import evaluate_with_splits  # noqa: E402
from service.errors import InvalidInput  # noqa: E402
from service.storage.repository import new_id  # noqa: E402
from service.usecases.quoting import catalog_hash, envelope, quote, request_problems  # noqa: E402

for _pool, _value in USER_POOLS.items():
    if _value is None:
        del os.environ[_pool]
    else:
        os.environ[_pool] = _value

EXAMPLES = ROOT / "pricing_examples"
CATALOG = EXAMPLES / "catalog.json"
QUOTE_STAGES = ("request_problems", "catalog.to_domain", "request.to_domain", "evaluate_with_splits", "quote_document")
ANSWER_STAGES = ("envelope", "FastJSONResponse")
SEARCH_FIGURES = ("search", "without search")
TARGET_CPU_MS = 4.0
TARGET_CPU_MS_BY_CAMPAIGN = {"campaign-split.json": 8.0}
TARGET_COLD_S = 1.0
COLD_TIMEOUT_S = 60.0
GROWTH_COPIES = (1, 2, 4, 8)


class Laps:
    """CPU seconds between successive marks, by the name of the stage each mark ends."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self._last = time.process_time()

    def mark(self, stage: str) -> None:
        now = time.process_time()
        self.seconds[stage] = now - self._last
        self._last = now


def quote_in_stages(catalog: CatalogIn, request: QuoteRequestIn, laps: Laps) -> dict[str, Any]:
    """What `quote(catalog, request)` returns, computed by the functions it calls in the order it calls
    them, each stage marked in `laps` (QUOTE_STAGES). tests/benchmarks/test_quote_stages.py checks that
    the body is quote()'s own: if quote() changes, this must follow."""
    problems = request_problems(catalog, request)
    if problems:
        raise InvalidInput("the request does not match the catalog", problems)
    laps.mark("request_problems")
    domain_catalog = catalog.to_domain()
    laps.mark("catalog.to_domain")
    campaign, options, overrides = request.to_domain()
    laps.mark("request.to_domain")
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        evaluation = evaluate_with_splits(domain_catalog, campaign, options, overrides)
        laps.mark("evaluate_with_splits")
        body = quote_document(domain_catalog, request, evaluation)
        laps.mark("quote_document")
    return body


def answer_in_stages(body: dict[str, Any], content_hash: str, laps: Laps) -> bytes:
    """The bytes POST /v1/quotes answers for a quote body (full view), built as the service builds them
    (`create_quote`, then `created_response`), each stage marked in `laps` (ANSWER_STAGES)."""
    document = envelope(body, catalog_hash=content_hash, quote_id=new_id("q"), catalog_id=new_id("cat"),
                        created_at=datetime.now(UTC))
    laps.mark("envelope")
    answer = FastJSONResponse(document, status_code=201).body
    laps.mark("FastJSONResponse")
    return bytes(answer)


class SearchTally:
    """CPU seconds spent in the layout search while it is installed in `service.domain`: each venue's
    search (`layout_search`: its candidate layouts, their step, failures and deadline search), timed
    at each resumption, and what the searches ask for (step figures, whole deadline tables), which
    `lockstep.drive` answers together (`evaluate_together`) between resumptions."""

    def __init__(self) -> None:
        self.seconds = 0.0
        self._search = layout_search
        self._together = evaluate_together
        self._depth = 0  # a question answered alone asks its own (deadline_together): timed once, outermost

    def _timed_search(self, *args: Any, **kwargs: Any) -> Any:
        search, reply = self._search(*args, **kwargs), None
        while True:
            began = time.process_time()
            try:
                asked = search.send(reply)
            except StopIteration as finished:
                return finished.value
            finally:
                self.seconds += time.process_time() - began
            reply = yield asked

    def _timed_together(self, *args: Any, **kwargs: Any) -> Any:
        began = time.process_time()
        self._depth += 1
        try:
            return self._together(*args, **kwargs)
        finally:
            self._depth -= 1
            if self._depth == 0:
                self.seconds += time.process_time() - began

    def __enter__(self) -> "SearchTally":
        vars(evaluate_module)["layout_search"] = self._timed_search  # the names evaluate.py and drive call
        vars(lockstep)["evaluate_together"] = self._timed_together
        return self

    def __exit__(self, *_: object) -> None:
        vars(evaluate_module)["layout_search"] = self._search
        vars(lockstep)["evaluate_together"] = self._together


def cpu_seconds(function: Callable[[], object]) -> float:
    began = time.process_time()
    function()
    return time.process_time() - began


def measure_campaign(catalog: CatalogIn, content_hash: str, request: QuoteRequestIn, repeats: int,
                     warmup: int) -> tuple[float, dict[str, float]]:
    """The best CPU seconds of quote() and of each stage (QUOTE_STAGES, then ANSWER_STAGES), and of the
    layout search within them ("search") and of the quote's stages without it ("without search", the
    least the quote could take were the search free)."""
    wholes: list[float] = []
    stages: dict[str, list[float]] = {stage: [] for stage in (*QUOTE_STAGES, *ANSWER_STAGES, *SEARCH_FIGURES)}
    for repeat in range(warmup + repeats):
        whole = cpu_seconds(lambda: quote(catalog, request))
        laps = Laps()
        with SearchTally() as search:
            body = quote_in_stages(catalog, request, laps)
        answer_in_stages(body, content_hash, laps)
        if repeat >= warmup:
            wholes.append(whole)
            for stage, seconds in laps.seconds.items():
                stages[stage].append(seconds)
            stages["search"].append(search.seconds)
            stages["without search"].append(sum(laps.seconds[stage] for stage in QUOTE_STAGES) - search.seconds)
    return min(wholes), {stage: min(seconds) for stage, seconds in stages.items()}


def in_process(repeats: int, warmup: int) -> list[tuple[str, bool, str]]:
    catalog = CatalogIn.model_validate_json(CATALOG.read_bytes())
    content_hash = catalog_hash(catalog)
    print(f"== 1. In process, one core: best CPU ms of {repeats} repeats after {warmup} warm-up, catalog "
          f"{CATALOG.name}")
    heads = ("problems", "catalog", "request", "evaluate", "document")
    print(f"{'campaign':<33}" + "".join(f"{head:>10}" for head in heads)
          + f"{'sum':>9}{'quote()':>9}{'envelope':>10}{'orjson':>8}{'search':>8}{'rest':>8}{'no eval':>9}")
    verdicts = []
    for path in sorted(EXAMPLES.glob("campaign-*.json")):
        request = QuoteRequestIn.model_validate_json(path.read_bytes())
        whole, best = measure_campaign(catalog, content_hash, request, repeats, warmup)
        ms = {stage: seconds * 1e3 for stage, seconds in best.items()}
        stage_sum = sum(ms[stage] for stage in QUOTE_STAGES)
        without_evaluate = stage_sum - ms["evaluate_with_splits"]
        print(f"{path.name:<33}" + "".join(f"{ms[stage]:>10.2f}" for stage in QUOTE_STAGES)
              + f"{stage_sum:>9.2f}{whole * 1e3:>9.2f}{ms['envelope']:>10.2f}{ms['FastJSONResponse']:>8.2f}"
              + f"{ms['search']:>8.2f}{ms['without search']:>8.2f}{without_evaluate:>9.2f}", flush=True)
        target = TARGET_CPU_MS_BY_CAMPAIGN.get(path.name, TARGET_CPU_MS)
        verdicts.append((f"quote() at most {target:.0f} ms CPU on {path.name}", whole * 1e3 <= target,
                         f"{whole * 1e3:.2f} ms"))
    print("(problems: request_problems; catalog, request: their to_domain(); evaluate: evaluate_with_splits, the")
    print(" campaign and its split points in one evaluation, and the splits; document: quote_document; sum: of")
    print(" those five, beside quote() timed whole;")
    print(" envelope and orjson: what POST /v1/quotes adds to the body, envelope() and FastJSONResponse;")
    print(" search: the layout search within evaluate (layout_search and its step figures, every venue's physics);")
    print(" rest: the five stages without it, a bound: what the quote would still take were the search free;")
    print(" no eval: the four stages but evaluate, a bound: what it would take were the whole evaluation free)")
    print()
    return verdicts


def with_offer_copies(catalog: dict[str, Any], copies: int) -> CatalogIn:
    """The catalog (as JSON) with its rented offers replaced by `copies` of its first, `-1`, `-2`, ...
    appended to its id; everything else as it is."""
    first = catalog["offers"][0]
    return CatalogIn.model_validate({**catalog, "offers": [{**first, "id": f"{first['id']}-{copy + 1}"}
                                                          for copy in range(copies)]})


def per_offer(copies: Sequence[int], ms: Sequence[float]) -> tuple[float, float]:
    """The least-squares line through (copies, ms): what one more offer adds, and the intercept."""
    slope, intercept = np.polyfit(np.asarray(copies, dtype=float), np.asarray(ms, dtype=float), 1)
    return float(slope), float(intercept)


def growth(repeats: int, warmup: int) -> None:
    raw = json.loads(CATALOG.read_bytes())
    request = json.loads(CAMPAIGN.read_bytes())
    on_demand_only = {**request, "options": {**request.get("options", {}), "terms": [*OWNED_TERMS, "on_demand"]}}
    first = raw["offers"][0]["id"]
    print(f"== 2. Growth: quote() of {CAMPAIGN.name} as the catalog's rented offers are copies of {first}, "
          f"best CPU ms of {repeats} repeats")
    print(f"{'terms':<24}{'figure':<10}" + "".join(f"{f'{copies} offer(s)':>12}" for copies in GROWTH_COPIES)
          + f"{'per offer':>11}{'intercept':>11}")
    for label, body in (("all the offer's", request), ("on demand only", on_demand_only)):
        parsed = QuoteRequestIn.model_validate(body)
        series: dict[str, list[float]] = {"quote()": [], "evaluate": [], "search": [], "document": []}
        for copies in GROWTH_COPIES:
            catalog = with_offer_copies(raw, copies)
            whole, best = measure_campaign(catalog, catalog_hash(catalog), parsed, repeats, warmup)
            series["quote()"].append(whole * 1e3)
            series["evaluate"].append(best["evaluate_with_splits"] * 1e3)
            series["search"].append(best["search"] * 1e3)
            series["document"].append(best["quote_document"] * 1e3)
        for figure, ms in series.items():
            slope, intercept = per_offer(GROWTH_COPIES, ms)
            print(f"{label:<24}{figure:<10}" + "".join(f"{value:>12.2f}" for value in ms)
                  + f"{slope:>11.2f}{intercept:>11.2f}", flush=True)
    print("(per offer: what one more offer adds, the slope of a least-squares line; intercept: the quote before")
    print(" any offer, its sites' options and what every quote does; search: the layout search within evaluate)")
    print()


def cold_command(campaign: Path) -> float:
    """Wall seconds of a fresh `python -m service.cli quote` from its start to its exit, the answer read."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("BERTH_")}
    began = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "service.cli", "quote", str(campaign), "--catalog", str(CATALOG),
                           "--format", "json"], cwd=ROOT, env=env, capture_output=True, timeout=COLD_TIMEOUT_S)
    seconds = time.perf_counter() - began
    if done.returncode != 0 or "options" not in json.loads(done.stdout or b"{}"):
        raise RuntimeError(f"`berth quote {campaign.name}` failed ({done.returncode}): "
                           f"{done.stderr.decode('utf-8', 'replace')[-2000:]}")
    return seconds


def cold_server() -> tuple[float, float]:
    """Wall seconds from starting `berth serve` to /readyz 200, and of its first POST /v1/quotes."""
    with tempfile.TemporaryDirectory(prefix="berth-bench-cold-") as workdir:
        began = time.perf_counter()
        process, url = start_server(Path(workdir))
        ready = time.perf_counter() - began
        try:
            post = urllib.request.Request(f"{url}/v1/quotes", data=CAMPAIGN.read_bytes(), method="POST",
                                          headers={"Content-Type": "application/json"})
            began = time.perf_counter()
            with urllib.request.urlopen(post, timeout=COLD_TIMEOUT_S) as response:
                status, answer = int(response.status), response.read()
            first = time.perf_counter() - began
        finally:
            stop_server(process)
    if status != 201 or "options" not in json.loads(answer):
        raise RuntimeError(f"the first POST /v1/quotes answered {status}: {answer[:300]!r}")
    return ready, first


def cold() -> list[tuple[str, bool, str]]:
    print(f"== 3. Cold: a fresh process's first quote, wall time (target under {TARGET_COLD_S:.0f} s)")
    verdicts = []
    for path in sorted(EXAMPLES.glob("campaign-*.json")):
        seconds = cold_command(path)
        print(f"  python -m service.cli quote {path.name} --format json: {seconds:.2f} s, start to answer", flush=True)
        verdicts.append((f"a fresh `berth quote {path.name}` answers in under {TARGET_COLD_S:.0f} s",
                         seconds < TARGET_COLD_S, f"{seconds:.2f} s"))
    ready, first = cold_server()
    print(f"  berth serve: {ready:.2f} s from start to /readyz 200 (information), then its first POST /v1/quotes "
          f"({CAMPAIGN.name}) {first:.3f} s")
    verdicts.append((f"a fresh server's first POST /v1/quotes after /readyz in under {TARGET_COLD_S:.0f} s",
                     first < TARGET_COLD_S, f"{first:.3f} s"))
    print()
    return verdicts


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--repeats", type=int, default=30, help="timed repeats per campaign (default %(default)s)")
    parser.add_argument("--warmup", type=int, default=3, help="untimed repeats first (default %(default)s)")
    parser.add_argument("--no-growth", action="store_true", help="skip the growth with the catalog's offers")
    parser.add_argument("--no-cold", action="store_true", help="skip the fresh command and server")
    args = parser.parse_args()
    if args.repeats < 1 or args.warmup < 0:
        parser.error("--repeats must be at least 1, --warmup at least 0")
    try:
        verdicts = in_process(args.repeats, args.warmup)
        if not args.no_growth:
            growth(args.repeats, args.warmup)
        if not args.no_cold:
            verdicts += cold()
    except (InvalidInput, RuntimeError, OSError, ValueError, subprocess.TimeoutExpired) as error:
        print(f"could not measure: {error}", file=sys.stderr)
        return 1
    for name, ok, figure in verdicts:
        print(f"{'PASS' if ok else 'MISS'} {name} (measured {figure})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
