"""Sweep benchmark: a standalone script, not a test. Run it from the repository root:

    .venv/bin/python tests/benchmarks/bench_sweeps.py [--quick]

Every figure is measured in this one run, on one core (the BLAS/OpenMP pools are limited to one
thread before numpy loads, and CPU time of this process is what the rates divide by):

1. Core: scenarios per second of the vectorised evaluation (`evaluate_chunk` on 20,000 Monte Carlo
   scenarios in the chunks a sweep cuts, `chunk_size`, and beside it as one chunk) against a
   per-scenario scalar evaluation of the same model (`evaluate_campaign` once per scenario, 200
   scenarios), on a 10-venue catalog built from the demo one by copying its sites and offers under
   new ids. This process keeps the memory of the arrays it frees, as every sweep runner does
   (`keep_freed_arrays`). Targets: ratio ≥ 200×, rate in the sweep's chunks ≥ 150,000 scenarios/s
   per core. Beside them: the same chunks with the compiled pricing and choice off (numpy alone); the
   same chunk with the layout pinned (`fixed_accelerators` = PINNED_ACCELERATORS, one candidate node
   count per venue, so no layout search at all; but its candidates' wall clock, accelerator-hours and
   deadline mask are laid out over every scenario, where the search's deadline candidates are read from
   one table as far as each row keeps, and where the pin misses the deadline the fastest is found in
   numpy: the searched chunk is now the faster, so this is information, no longer a bound); and a
   floor: what a chunk costs whatever its size (a chunk of one scenario) and each scenario beyond it,
   so the rate with no per-chunk cost, searched and pinned, is the most this design's arithmetic
   reaches.
2. End to end: `berth sweep` (the console script where it is installed) of 1,000,000 Monte Carlo scenarios of
   the demo sweep and catalog, as a subprocess with its default worker processes (one per CPU; target < 8 s);
   the section 1 rate target through `berth sweep`: the demo sweep's draws on the 10-venue catalog, 1,000,000
   scenarios per CPU second of the whole process tree (target ≥ 150,000; its start and summary included), with
   the marginal rate between 500,000 and 1,000,000 scenarios beside it; and the peak RSS of a
   10,000,000-scenario sweep streamed as CSV (target < 1 GB = 1e9 bytes). The RSS is that of the whole process
   tree: the command and its workers, sampled together every 0.2 s, and never less than the largest single
   process's peak from the kernel. A run that would pass RUN_LIMIT_SECONDS is stopped, and its full time is then
   an extrapolation from the rows it wrote, printed as such.

2c. The same peak RSS on the 10-venue catalog, each streamed as CSV: the demo sweep's draws
   (TEN_VENUE_CSV_SCENARIOS; one table, but a chunk of twice the demo catalog's options, and rows twice
   as wide), and sweeps whose every scenario has its own step (section 1d's model size and network,
   OWN_STEP_CSV_SCENARIOS each): such a chunk holds far more per scenario than the demo sweep's (a
   search per scenario and venue). The same bound is held to them (target < 1 GB each; a stream's peak
   is its chunks' and those in flight, whatever its length).

1b. Venue size: section 1's chunk and one quote with every offer at 64 nodes and at 100,000 (target:
   within 1.2x; the layout search must not grow with a venue's node limit).

1c. Sweeps over inputs of the step itself (grids over model size, MTBF and network; PUE at random,
   which moves a power-limited node count in whole nodes), where each distinct step's scenarios are
   solved on one table, against the per-scenario search on the same chunks, and a grid whose step does
   not vary beside them (figures and ratios; no target).

1d. Monte Carlo sweeps where every scenario has a step of its own (the network, the node MTBF, the
   utilisation, the model's size, each drawn from a continuous range), which take the per-scenario
   search (`own_step.fewest_meeting`), in the service's chunks (figures; no target).

1e. The compiled kernel (`service/domain/compiled.py`, numba) in a fresh process: importing numba and
   compiling with an empty cache, as after an install, and reading it from numba's cache; and that a
   quote never imports numba (figures; section 1 prints each rate with the kernel off beside it).

It prints PASS or MISS per target and exits 0 whatever the figures. `--core` runs sections 1, 1b, 1c,
1d and 1e only. `--quick` shrinks the end-to-end
runs (100,000 and 1,000,000 scenarios; 10,000 for 2c) to check the script itself; its figures are not the targets'.
"""

import os

for _pool in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_pool] = "1"  # one core, also for the subprocesses, which inherit the environment

import copy  # noqa: E402
import ctypes  # noqa: E402
import dataclasses  # noqa: E402
import json  # noqa: E402
import shutil  # noqa: E402
import signal  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from service.contract.catalog import CatalogIn  # noqa: E402
from service.contract.request import QuoteRequestIn  # noqa: E402
from service.contract.sweep import SweepIn  # noqa: E402
from service.domain import compiled, deadline  # noqa: E402
from service.domain.evaluate import evaluate_campaign  # noqa: E402
from service.domain.sweep import chunk_size, evaluate_chunk, scenario_chunks  # noqa: E402
from service.domain.whatif import apply  # noqa: E402
from service.usecases.chunk_pool import keep_freed_arrays  # noqa: E402
from service.usecases.quoting import quote  # noqa: E402
from service.usecases.sweeps import SweepLimits, prepare_sweep  # noqa: E402

EXAMPLES = ROOT / "pricing_examples"
DEMO_SWEEP = EXAMPLES / "sweep-electricity-and-utilisation.json"
DEMO_CATALOG = EXAMPLES / "catalog.json"

VECTOR_SCENARIOS = 20_000
SCALAR_SCENARIOS = 200
TARGET_RATIO = 200.0
TARGET_RATE = 150_000.0  # per core, on the 10-venue catalog
PINNED_ACCELERATORS = 64  # 8 nodes: within every demo venue's limit
E2E_SCENARIOS = 1_000_000
TARGET_E2E_SECONDS = 8.0
CSV_SCENARIOS = 10_000_000
TARGET_RSS_BYTES = 1.0e9
RUN_LIMIT_SECONDS = 20 * 60
PROGRESS_EVERY_SECONDS = 30.0

results: list[tuple[str, bool, str]] = []
# The compiled pricing and choice, as a sweep process uses it from COMPILED_PAYS_FROM scenarios on (the
# targets are for such sweeps); section 1 also prints each rate without it.
KERNEL = compiled.kernel()


def verdict(name: str, ok: bool, figure: str) -> None:
    results.append((name, ok, figure))
    print(f"  -> {'PASS' if ok else 'MISS'}: {name}: {figure}", flush=True)


def load(path: Path) -> Any:
    return json.loads(path.read_text(encoding="utf-8"))


def ten_venue_catalog() -> dict[str, Any]:
    """The demo catalog's 2 sites and 3 offers, plus a copy of each under a new id: 10 venues."""
    catalog = load(DEMO_CATALOG)
    extra_sites, extra_offers = [], []
    for site in catalog["sites"]:
        twin = copy.deepcopy(site)
        twin["id"], twin["name"] = f"{site['id']}-twin", f"{site['name']} (twin)"
        extra_sites.append(twin)
    for offer in catalog["offers"]:
        twin = copy.deepcopy(offer)
        twin["id"] = f"{offer['id']}-twin"
        extra_offers.append(twin)
    catalog["sites"] += extra_sites
    catalog["offers"] += extra_offers
    catalog["name"] += "-ten-venues"
    return catalog


def service_chunks(prepared: Any) -> list[dict[str, np.ndarray]]:
    """The inputs of each chunk the service cuts the prepared sweep into (`chunk_size`)."""
    return [inputs for _, inputs in scenario_chunks(prepared.plan, chunk_size(prepared.catalog, prepared.plan.paths))]


def timed(function: Any, repeats: int) -> tuple[float, float]:
    """Best CPU seconds and best wall seconds over `repeats` calls."""
    cpu, wall = [], []
    for _ in range(repeats):
        c0, w0 = time.process_time(), time.perf_counter()
        function()
        cpu.append(time.process_time() - c0)
        wall.append(time.perf_counter() - w0)
    return min(cpu), min(wall)


def core_benchmark() -> None:
    print("== 1. Core: vectorised evaluate_chunk against a per-scenario scalar loop", flush=True)
    catalogs = (("10-venue catalog", ten_venue_catalog()), ("demo catalog, 5 venues", load(DEMO_CATALOG)))
    for label, catalog_json in catalogs:
        catalog_in = CatalogIn.model_validate(catalog_json)
        venues = len(catalog_in.sites) + len(catalog_in.offers)
        sweep = load(DEMO_SWEEP)
        sweep["samples"] = VECTOR_SCENARIOS
        prepared = prepare_sweep(catalog_in, SweepIn.model_validate(sweep), SweepLimits())
        plan, catalog = prepared.plan, prepared.catalog
        (_, inputs), = list(scenario_chunks(plan, VECTOR_SCENARIOS))
        result = evaluate_chunk(catalog, plan, inputs, kernel=KERNEL)  # warm-up
        vector_cpu, vector_wall = timed(lambda: evaluate_chunk(catalog, plan, inputs, kernel=KERNEL), 3)  # noqa: B023

        service_chunk = chunk_size(catalog, plan.paths)

        def in_service_chunks(kernel: compiled.Kernel | None = KERNEL) -> None:
            for _, part in scenario_chunks(plan, service_chunk):  # noqa: B023
                evaluate_chunk(catalog, plan, part, kernel=kernel)  # noqa: B023

        chunked_cpu, _ = timed(in_service_chunks, 3)
        numpy_cpu, _ = timed(lambda: in_service_chunks(None), 3)  # pricing and choice in numpy alone

        pinned_plan = dataclasses.replace(plan, options=dataclasses.replace(
            plan.options, fixed_accelerators=PINNED_ACCELERATORS))
        evaluate_chunk(catalog, pinned_plan, inputs, kernel=KERNEL)  # warm-up
        pinned_cpu, _ = timed(lambda: evaluate_chunk(catalog, pinned_plan, inputs, kernel=KERNEL), 3)  # noqa: B023

        def scalar_loop() -> None:
            for s in range(SCALAR_SCENARIOS):
                one = {path: float(values[s]) for path, values in inputs.items()}  # noqa: B023
                campaign, overrides = apply(plan.campaign, plan.overrides, one)  # noqa: B023
                evaluate_campaign(catalog, campaign, plan.options, overrides)  # noqa: B023

        # What a chunk costs whatever its size: a chunk of one scenario, measured alone.
        one = {path: values[:1] for path, values in inputs.items()}
        per_chunk_cpu, _ = timed(lambda: evaluate_chunk(catalog, plan, one, kernel=KERNEL), 5)  # noqa: B023
        pinned_per_chunk_cpu, _ = timed(lambda: evaluate_chunk(catalog, pinned_plan, one, kernel=KERNEL), 5)  # noqa: B023
        chunks = -(-VECTOR_SCENARIOS // service_chunk)
        marginal = (chunked_cpu - chunks * per_chunk_cpu) / VECTOR_SCENARIOS
        pinned_marginal = (pinned_cpu - pinned_per_chunk_cpu) / VECTOR_SCENARIOS

        scalar_loop()  # warm-up
        scalar_cpu, scalar_wall = timed(scalar_loop, 1)

        vector_rate = VECTOR_SCENARIOS / vector_cpu
        chunked_rate = VECTOR_SCENARIOS / chunked_cpu
        pinned_rate = VECTOR_SCENARIOS / pinned_cpu
        scalar_rate = SCALAR_SCENARIOS / scalar_cpu
        ratio = chunked_rate / scalar_rate
        print(f"  {label}: {venues} venues, {len(result.labels)} options, inputs varied: {', '.join(plan.paths)}")
        print(f"    vectorised, one chunk of {VECTOR_SCENARIOS:,}: {vector_cpu:.3f} s CPU ({vector_wall:.3f} s wall)"
              f" = {vector_rate:,.0f} scenarios/s per core")
        print(f"    vectorised, the service's chunks of {service_chunk:,}: {chunked_cpu:.3f} s CPU"
              f" = {chunked_rate:,.0f} scenarios/s per core")
        print(f"    the same chunks with pricing and choice in numpy alone (no kernel):"
              f" {numpy_cpu:.3f} s CPU = {VECTOR_SCENARIOS / numpy_cpu:,.0f} scenarios/s per core;"
              f" compiled {numpy_cpu / chunked_cpu:.2f}x faster ({_compiled_path()})")
        print(f"    beside it: the same chunk with the layout pinned ({PINNED_ACCELERATORS} accelerators, no layout"
              f" search, its candidates laid out over every scenario): {pinned_cpu:.3f} s CPU = {pinned_rate:,.0f}"
              " scenarios/s per core")
        print(f"    floor: a chunk costs {per_chunk_cpu * 1e3:.1f} ms CPU whatever its size (one scenario's chunk;"
              f" pinned {pinned_per_chunk_cpu * 1e3:.1f} ms), then {marginal * 1e6:.2f} µs per scenario"
              f" (pinned {pinned_marginal * 1e6:.2f} µs): without the per-chunk cost {1 / marginal:,.0f}"
              f" scenarios/s per core, and {1 / pinned_marginal:,.0f} with no layout search either")
        print(f"    scalar loop, {SCALAR_SCENARIOS} scenarios one at a time: {scalar_cpu:.3f} s CPU"
              f" ({scalar_wall:.3f} s wall) = {scalar_rate:,.1f} scenarios/s per core")
        print(f"    ratio vectorised (the sweep's chunks) / scalar: {ratio:,.1f}x", flush=True)
        if venues == 10:
            verdict(f"vectorised / scalar ratio ≥ {TARGET_RATIO:.0f}x ({label})", ratio >= TARGET_RATIO,
                    f"{ratio:,.1f}x")
            verdict(f"vectorised rate ≥ {TARGET_RATE:,.0f} scenarios/s per core ({label}, the sweep's chunks)",
                    chunked_rate >= TARGET_RATE,
                    f"{chunked_rate:,.0f} scenarios/s per core ({chunked_rate / TARGET_RATE:.4f} of the target)")


def _compiled_path() -> str:
    """Which path priced the chunks: numba's kernel, or numpy where numba is missing."""
    if KERNEL is None:
        return "numba unavailable here: both runs are numpy"
    import numba  # loaded by the kernel already

    return f"numba {numba.__version__}"


def compile_benchmark() -> None:
    """What the compiled kernel costs a fresh process's first sweep chunk: importing numba and compiling
    the kernel's scans with an empty cache (as after an install), then reading them from numba's cache;
    and that a quote never
    imports numba (its first-quote times are in bench_quote_stages.py, target under 1 s)."""
    print("== 1e. The compiled kernel in a fresh process", flush=True)
    if KERNEL is None:
        print("  numba unavailable here: sweeps run numpy alone", flush=True)
        return
    # The kernel, then a chunk of the demo sweep priced with it: each scan is compiled (or read from the
    # cache) the first time a chunk needs it. Setting the chunk up is done before the clock starts.
    first = ("import json, pathlib, time; from service.contract.catalog import CatalogIn; "
             "from service.contract.sweep import SweepIn; from service.domain.sweep import evaluate_chunk, "
             "scenario_chunks; from service.usecases.sweeps import SweepLimits, prepare_sweep; "
             "examples = pathlib.Path('pricing_examples'); "
             "sweep = json.loads((examples / 'sweep-electricity-and-utilisation.json').read_text()); "
             "sweep['samples'] = 512; prepared = prepare_sweep(CatalogIn.model_validate_json("
             "(examples / 'catalog.json').read_text()), SweepIn.model_validate(sweep), SweepLimits()); "
             "(_, chunk), = scenario_chunks(prepared.plan, 512); start = time.perf_counter(); "
             "from service.domain import compiled; "
             "evaluate_chunk(prepared.catalog, prepared.plan, chunk, kernel=compiled.kernel()); "
             "print(time.perf_counter() - start)")
    quote_only = ("import sys, pathlib; from service.contract.catalog import CatalogIn; "
                  "from service.contract.request import QuoteRequestIn; from service.usecases.quoting import quote; "
                  "examples = pathlib.Path('pricing_examples'); "
                  "quote(CatalogIn.model_validate_json((examples / 'catalog.json').read_text()), "
                  "QuoteRequestIn.model_validate_json((examples / 'campaign-owned-wins.json').read_text())); "
                  "print('numba' in sys.modules)")
    with tempfile.TemporaryDirectory() as cache:
        env = {**os.environ, "NUMBA_CACHE_DIR": cache}

        def run(code: str) -> str:
            return subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True,
                                  check=True).stdout.strip()
        cold, cached = float(run(first)), float(run(first))
        imported = run(quote_only)
    print(f"  first sweep chunk of a fresh process (512 scenarios of the demo sweep): {cold:.2f} s to import numba,"
          f" compile the kernel's scans with an empty cache (once after an install) and price it, {cached:.2f} s to"
          " import numba, read them from the cache and price it", flush=True)
    print(f"  a quote imports numba: {imported}", flush=True)


def venue_size_benchmark() -> None:
    """The same sweep, in the chunks the service would cut, and the same quote with every offer
    limited to 64 nodes and to 100,000: the layout search prices a bounded set of candidates and the
    chunk size follows that bound, so the venue's size must not matter (target: within 1.2x)."""
    print("== 1b. Venue size: every offer at 64 nodes against 100,000", flush=True)
    request = QuoteRequestIn.model_validate(load(EXAMPLES / "campaign-renting-wins.json"))
    figures = {}
    for nodes_max in (64, 100_000):
        catalog_json = ten_venue_catalog()
        for offer in catalog_json["offers"]:
            offer["nodes_max"] = nodes_max
        catalog_in = CatalogIn.model_validate(catalog_json)
        sweep = load(DEMO_SWEEP)
        sweep["samples"] = VECTOR_SCENARIOS
        prepared = prepare_sweep(catalog_in, SweepIn.model_validate(sweep), SweepLimits())
        size = chunk_size(prepared.catalog, prepared.plan.paths)
        chunks = [inputs for _, inputs in scenario_chunks(prepared.plan, size)]

        def in_service_chunks() -> None:
            for inputs in chunks:  # noqa: B023
                evaluate_chunk(prepared.catalog, prepared.plan, inputs, kernel=KERNEL)  # noqa: B023

        in_service_chunks()  # warm-up
        sweep_cpu, _ = timed(in_service_chunks, 3)
        quote(catalog_in, request)  # warm-up
        quote_cpu, _ = timed(lambda: quote(catalog_in, request), 10)  # noqa: B023
        figures[nodes_max] = sweep_cpu, quote_cpu
        print(f"    offers of {nodes_max:,} nodes: {VECTOR_SCENARIOS:,} scenarios in the service's chunks of "
              f"{size:,}: {sweep_cpu:.3f} s CPU ({VECTOR_SCENARIOS / sweep_cpu:,.0f} scenarios/s per core); "
              f"one quote {quote_cpu * 1e3:.1f} ms CPU", flush=True)
    sweep_ratio = figures[100_000][0] / figures[64][0]
    quote_ratio = figures[100_000][1] / figures[64][1]
    verdict("a 100,000-node offer sweeps within 1.2x of a 64-node one", sweep_ratio <= 1.2, f"{sweep_ratio:.2f}x")
    verdict("a 100,000-node offer quotes within 1.2x of a 64-node one", quote_ratio <= 1.2, f"{quote_ratio:.2f}x")


# Sweeps whose scenarios take few distinct steps (grids over the model's size, the network and failure
# rates; PUE drawn at random, which moves a new build's power-limited node count in whole nodes), and
# one whose step does not vary, on the 10-venue catalog and the demo sweep's base campaign.
STEP_SWEEPS: dict[str, dict[str, Any]] = {
    "grid: model size (4) x tokens (50) x deadline (50)": {"grid": {
        "campaign.work.parameters": [7e9, 13e9, 30e9, 70e9],
        "campaign.work.tokens": [float(v) for v in np.linspace(1e11, 1e12, 50)],
        "campaign.deadline_days": [float(v) for v in np.linspace(10.0, 120.0, 50)]}},
    "grid: MTBF (3) x network (4) x electricity (800)": {"grid": {
        "overrides.mtbf_hours": [5000.0, 20000.0, 80000.0], "overrides.network_gbps": [100.0, 200.0, 400.0, 800.0],
        "overrides.electricity_price_per_kwh": [float(v) for v in np.linspace(0.05, 0.3, 800)]}},
    "Monte Carlo: PUE 1.1-3.5 x electricity, 10,000 draws": {"samples": 10_000, "seed": 3, "distributions": {
        "overrides.pue": {"kind": "uniform", "low": 1.1, "high": 3.5},
        "overrides.electricity_price_per_kwh": {"kind": "uniform", "low": 0.05, "high": 0.3}}},
    "grid, step unvaried: tokens (100) x deadline (100)": {"grid": {
        "campaign.work.tokens": [float(v) for v in np.linspace(1e11, 1e12, 100)],
        "campaign.deadline_days": [float(v) for v in np.linspace(10.0, 120.0, 100)]}},
}


def step_grid_benchmark() -> None:
    """Sweeps over inputs of the step itself: each distinct step's scenarios solved on one table
    (`deadline.blocks_by_step`) against every scenario on its own rungs (the same grid with
    `deadline.SCENARIOS_PER_STEP` set beyond the chunk, so the per-scenario search runs), in the
    service's chunks; and a grid whose step does not vary, the one-table path, beside them."""
    print("== 1c. Sweeps over inputs of the step: a table per distinct step against the per-scenario search",
          flush=True)
    catalog_in = CatalogIn.model_validate(ten_venue_catalog())
    base = load(DEMO_SWEEP)["base"]
    grouping = deadline.SCENARIOS_PER_STEP
    for label, varied in STEP_SWEEPS.items():
        prepared = prepare_sweep(catalog_in, SweepIn.model_validate({"base": base, **varied}), SweepLimits())
        chunks = service_chunks(prepared)
        scenarios = prepared.plan.scenarios

        def in_service_chunks() -> list[np.ndarray]:
            return [evaluate_chunk(prepared.catalog, prepared.plan, inputs, kernel=KERNEL).totals for inputs in chunks]  # noqa: B023

        rates = {}
        totals = {}
        for name, per_step in (("a table per step", grouping), ("per scenario", scenarios + 1)):
            deadline.SCENARIOS_PER_STEP = per_step
            totals[name] = np.concatenate(in_service_chunks(), axis=1)  # warm-up, and the answers compared
            cpu, _ = timed(in_service_chunks, 1)
            rates[name] = scenarios / cpu
        deadline.SCENARIOS_PER_STEP = grouping
        same = np.array_equal(*totals.values(), equal_nan=True)
        print(f"  {label}: {scenarios:,} scenarios: a table per step {rates['a table per step']:,.0f} scenarios/s"
              f" per core, per scenario {rates['per scenario']:,.0f}: "
              f"{rates['a table per step'] / rates['per scenario']:.2f}x; totals identical: {same}", flush=True)


# Continuous draws of an input of the step: no two scenarios share a step, so each is searched alone.
OWN_STEP_SWEEPS: dict[str, tuple[str, float, float]] = {
    "network 100-1,000 Gb/s": ("overrides.network_gbps", 100.0, 1000.0),
    "node MTBF 2,000-90,000 h": ("overrides.mtbf_hours", 2000.0, 90000.0),
    "utilisation 0.3-0.6": ("overrides.utilisation", 0.3, 0.6),
    "model size 5-80 billion parameters": ("campaign.work.parameters", 5e9, 80e9),
}
OWN_STEP_SCENARIOS = 10_000
OWN_STEP_CSV = ("model size 5-80 billion parameters", "network 100-1,000 Gb/s")  # section 2c's sweeps
OWN_STEP_CSV_SCENARIOS = 50_000
TEN_VENUE_DRAWS = "the demo sweep's draws"  # on the 10-venue catalog: section 2a's rate, 2c's sweep of one table
TEN_VENUE_CSV_SCENARIOS = 200_000  # enough chunks that as many are in flight as a stream of any length has


def own_step_benchmark() -> None:
    """Monte Carlo sweeps whose every scenario has its own step, on the 10-venue catalog and the demo
    sweep's base campaign, in the service's chunks: the per-scenario search's rate."""
    print(f"== 1d. Monte Carlo over an input of the step, {OWN_STEP_SCENARIOS:,} draws: every scenario"
          " searched on its own", flush=True)
    catalog_in = CatalogIn.model_validate(ten_venue_catalog())
    base = load(DEMO_SWEEP)["base"]
    for label, (path, low, high) in OWN_STEP_SWEEPS.items():
        sweep = {"base": base, "samples": OWN_STEP_SCENARIOS, "seed": 3,
                 "distributions": {path: {"kind": "uniform", "low": low, "high": high}}}
        prepared = prepare_sweep(catalog_in, SweepIn.model_validate(sweep), SweepLimits())
        chunks = service_chunks(prepared)

        def in_service_chunks() -> None:
            for inputs in chunks:  # noqa: B023
                evaluate_chunk(prepared.catalog, prepared.plan, inputs, kernel=KERNEL)  # noqa: B023

        in_service_chunks()  # warm-up
        cpu, _ = timed(in_service_chunks, 1)
        print(f"  {label}: {OWN_STEP_SCENARIOS / cpu:,.0f} scenarios/s per core", flush=True)


def sweep_file(directory: Path, samples: int) -> Path:
    sweep = load(DEMO_SWEEP)
    sweep["samples"] = samples
    path = directory / f"sweep-{samples}.json"
    path.write_text(json.dumps(sweep), encoding="utf-8")
    return path


def ten_venue_files(directory: Path, label: str, samples: int) -> tuple[Path, Path]:
    """Section 1d's sweep `label` (or the demo sweep's draws, TEN_VENUE_DRAWS) of `samples` draws, and the
    10-venue catalog, as files for `berth sweep`."""
    if label == TEN_VENUE_DRAWS:
        sweep = {**load(DEMO_SWEEP), "samples": samples}
    else:
        path, low, high = OWN_STEP_SWEEPS[label]
        sweep = {"base": load(DEMO_SWEEP)["base"], "samples": samples, "seed": 3,
                 "distributions": {path: {"kind": "uniform", "low": low, "high": high}}}
    sweep_path, catalog_path = directory / f"ten-venue-{samples}.json", directory / "ten-venues.json"
    sweep_path.write_text(json.dumps(sweep), encoding="utf-8")
    catalog_path.write_text(json.dumps(ten_venue_catalog()), encoding="utf-8")
    return sweep_path, catalog_path


BERTH_SCRIPT = Path(sys.executable).with_name("berth")


def berth(*args: str) -> list[str]:
    """The command as a user runs it: the `berth` console script beside this Python where it is installed
    (its worker processes import the script as their main module, which `python -m` would spare them)."""
    return [str(BERTH_SCRIPT), *args] if BERTH_SCRIPT.exists() else [sys.executable, "-m", "service.cli", *args]


def stop(process: subprocess.Popen[bytes]) -> None:
    """End the process group this script started (the command, under /usr/bin/time its child, and its
    workers, with any fork server)."""
    try:
        os.killpg(process.pid, signal.SIGTERM)
        process.wait(timeout=30)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        os.killpg(process.pid, signal.SIGKILL)
        process.wait()


PR_SET_CHILD_SUBREAPER = 36  # linux/prctl.h


def adopt_orphans() -> bool:
    """Make this script the subreaper of the commands it starts (Linux): a process of theirs whose parent
    ends first is handed to this one rather than to init. Where `berth sweep`'s workers are forked by a fork
    server (`chunk_pool._workers_context`: a command that holds threads), the server outlives the command a
    moment, so their CPU and memory reach no `wait4` of the command; handed here, `reap` counts them. Workers
    forked from the command itself are its children and counted with it. Returns whether it took."""
    try:
        return ctypes.CDLL("libc.so.6").prctl(PR_SET_CHILD_SUBREAPER, 1, 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def reap(process: subprocess.Popen[bytes]) -> tuple[float, int]:
    """Wait for `process`, then for every process of its tree handed to this script (`adopt_orphans`): the
    CPU seconds (user + system) of them all, each with the processes it waited for (a fork server's workers),
    and the largest peak RSS in bytes of those handed here. The command's own peak is not among them: Linux
    counts in a child's peak this script's memory at the fork before its exec (so `/usr/bin/time -v`, a small
    parent, reports it). Sets the process's exit status; a process already waited for (`stop`, `poll`) adds
    only the processes handed here."""
    cpu, peak = 0.0, 0
    if process.returncode is None:
        _, status, usage = os.wait4(process.pid, 0)
        process.returncode = os.waitstatus_to_exitcode(status)
        cpu = usage.ru_utime + usage.ru_stime
    while True:
        try:
            _, _, usage = os.wait4(-1, 0)
        except ChildProcessError:
            break
        cpu, peak = cpu + usage.ru_utime + usage.ru_stime, max(peak, usage.ru_maxrss)
    return cpu, peak * 1024  # kilobytes on Linux


def tree_rss_bytes(root: int) -> int:
    """Resident memory of a process and all its descendants now, from /proc (0 where unreadable)."""
    parents: dict[int, int] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            parents[int(entry.name)] = int(fields[1])
    tree, frontier = {root}, [root]
    while frontier:
        parent = frontier.pop()
        children = [pid for pid, ppid in parents.items() if ppid == parent and pid not in tree]
        tree.update(children)
        frontier.extend(children)
    total = 0
    for pid in tree:
        try:
            status = Path(f"/proc/{pid}/status").read_text()
        except OSError:
            continue
        for line in status.splitlines():
            if line.startswith("VmRSS:"):
                total += int(line.split()[1]) * 1024
    return total


def end_to_end_json(directory: Path, scenarios: int) -> None:
    print(f"== 2a. End to end: berth sweep of {scenarios:,} Monte Carlo scenarios (JSON summary), "
          f"{os.cpu_count()} worker processes (the command's default)", flush=True)
    path = sweep_file(directory, scenarios)
    command = berth("sweep", str(path), "--catalog", str(DEMO_CATALOG), "--format", "json")
    start = time.perf_counter()
    process = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               start_new_session=True)
    next_report = start + PROGRESS_EVERY_SECONDS
    while process.poll() is None:
        time.sleep(0.05)
        now = time.perf_counter()
        if now >= next_report:
            print(f"    ... {now - start:,.0f} s elapsed", flush=True)
            next_report += PROGRESS_EVERY_SECONDS
        if now - start > RUN_LIMIT_SECONDS:
            stop(process)
            reap(process)
            print(f"    stopped after {RUN_LIMIT_SECONDS} s")
            verdict(f"berth sweep of {scenarios:,} scenarios < {TARGET_E2E_SECONDS:.0f} s", False,
                    f"did not finish in {RUN_LIMIT_SECONDS} s")
            return
    elapsed = time.perf_counter() - start
    stdout, stderr = process.communicate()
    reap(process)  # and any fork server, handed here when the command ended
    if process.returncode != 0:
        print(stderr.decode()[-2000:])
        verdict(f"berth sweep of {scenarios:,} scenarios < {TARGET_E2E_SECONDS:.0f} s", False,
                f"exit status {process.returncode}")
        return
    document = json.loads(stdout)
    print(f"    {elapsed:.2f} s wall for {document['summary']['scenarios']:,} scenarios "
          f"= {scenarios / elapsed:,.0f} scenarios/s end to end (process start included)")
    verdict(f"berth sweep of {scenarios:,} scenarios < {TARGET_E2E_SECONDS:.0f} s", elapsed < TARGET_E2E_SECONDS,
            f"{elapsed:.2f} s ({elapsed / TARGET_E2E_SECONDS:.2f} of the target time)")


def tree_cpu_seconds(command: list[str]) -> tuple[float, float, int, bytes]:
    """Run `command` to its end: wall seconds, CPU seconds (user + system) of its whole process tree (`reap`:
    the command and its workers), its exit status and its standard output."""
    start = time.perf_counter()
    process = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                               start_new_session=True)
    assert process.stdout is not None
    stdout = process.stdout.read()
    cpu, _ = reap(process)
    return time.perf_counter() - start, cpu, process.returncode, stdout


def through_berth_sweep(directory: Path, scenarios: int) -> None:
    """Section 2a's rate target through `berth sweep` on the 10-venue catalog: the demo sweep's draws, JSON
    summary, default worker processes; scenarios per CPU second of the whole process tree (its start, the
    draws, the workers' evaluation, the results' transfer and the summary included), and beside it the
    marginal rate between half of the scenarios and all of them (at half, the sweep is still large enough for
    the compiled kernel, `chunk_pool.COMPILED_PAYS_FROM`). The marginal rate is not what every scenario costs:
    below the summary's sample capacity every scenario's values travel and are kept, beyond it only the
    sampled ones, so on ten venues (capacity 296,296) the scenarios past half cost less than the first ones."""
    print(f"== 2a. Through berth sweep: {scenarios:,} scenarios of the demo sweep's draws on the 10-venue catalog "
          f"(JSON summary), {os.cpu_count()} worker processes", flush=True)
    target = (f"rate through berth sweep ≥ {TARGET_RATE:,.0f} scenarios/s per core (10-venue catalog, "
              f"{scenarios:,} scenarios, CPU of the whole process tree)")
    runs = {}
    for count in (scenarios // 2, scenarios):
        path, catalog = ten_venue_files(directory, TEN_VENUE_DRAWS, count)
        wall, cpu, status, stdout = tree_cpu_seconds(berth("sweep", str(path), "--catalog", str(catalog),
                                                           "--format", "json"))
        if status != 0:
            verdict(target, False, f"berth sweep of {count:,} scenarios exited with status {status}")
            return
        assert json.loads(stdout)["summary"]["scenarios"] == count
        runs[count] = cpu
        print(f"    {count:,} scenarios: {wall:.2f} s wall, {cpu:.2f} s CPU of the process tree = "
              f"{count / cpu:,.0f} scenarios per CPU second", flush=True)
    half = scenarios // 2
    marginal = (scenarios - half) / max(runs[scenarios] - runs[half], 1e-9)
    print(f"    marginal: {marginal:,.0f} scenarios per CPU second (the {scenarios - half:,} scenarios between "
          "the two runs: no process start or other fixed cost, and fewer of them kept for the percentiles)")
    rate = scenarios / runs[scenarios]
    verdict(target, rate >= TARGET_RATE,
            f"{rate:,.0f} scenarios per CPU second ({rate / TARGET_RATE:.4f} of the target; marginal {marginal:,.0f})")


def end_to_end_csv(directory: Path, scenarios: int, ten_venue: str | None = None) -> None:
    """Section 2b, the demo sweep; or with `ten_venue`, section 2c's run of that sweep on the 10-venue catalog."""
    what = "" if ten_venue is None else (
        f" ({ten_venue}{'' if ten_venue == TEN_VENUE_DRAWS else ', each scenario its own step'}, 10-venue catalog)")
    print(f"== {'2b' if ten_venue is None else '2c'}. Peak RSS: berth sweep of {scenarios:,} scenarios{what} streamed "
          f"as CSV (stdout read and discarded), {os.cpu_count()} worker processes", flush=True)
    path, catalog = (sweep_file(directory, scenarios), DEMO_CATALOG) if ten_venue is None else \
        ten_venue_files(directory, ten_venue, scenarios)
    command = berth("sweep", str(path), "--catalog", str(catalog), "--format", "csv")
    time_tool = shutil.which("time", path="/usr/bin")
    report = directory / "time-v.txt"
    if time_tool:
        command = [time_tool, "-v", "-o", str(report), *command]
    print(f"    peak RSS from: {'/usr/bin/time -v' if time_tool else 'the sampled tree alone'}, and the "
          "workers' (and any fork server's) from the kernel")
    start = time.perf_counter()
    process = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                               start_new_session=True)
    assert process.stdout is not None
    lines, next_report, stopped = 0, start + PROGRESS_EVERY_SECONDS, False
    tree_peak, next_sample = 0, start
    while True:
        block = process.stdout.read1(1 << 20)
        if not block:
            break
        lines += block.count(b"\n")
        now = time.perf_counter()
        if now >= next_sample:
            tree_peak = max(tree_peak, tree_rss_bytes(process.pid))
            next_sample = now + 0.2
        if now >= next_report:
            done = max(lines - 1, 0)
            rate = done / (now - start)
            print(f"    ... {now - start:,.0f} s: {done:,} rows ({done / scenarios:.1%}), {rate:,.0f} rows/s, "
                  f"about {(scenarios - done) / max(rate, 1.0):,.0f} s to go", flush=True)
            next_report += PROGRESS_EVERY_SECONDS
        if now - start > RUN_LIMIT_SECONDS:
            stopped = True
            break
    if stopped:
        stop(process)
    _, largest = reap(process)
    elapsed = time.perf_counter() - start
    rows = max(lines - 1, 0)
    if time_tool and report.exists():
        for line in report.read_text().splitlines():
            if "Maximum resident set size" in line:
                largest = max(largest, int(line.split(":")[1]) * 1024)
    print(f"    largest single process {largest / 1e6:,.0f} MB; whole tree sampled {tree_peak / 1e6:,.0f} MB")
    peak = max(largest, tree_peak)
    print(f"    {rows:,} rows in {elapsed:,.1f} s wall ({rows / elapsed:,.0f} rows/s), "
          f"exit status {process.returncode}")
    if stopped:
        print(f"    STOPPED at the {RUN_LIMIT_SECONDS} s limit; EXTRAPOLATED full time at the same rate: "
              f"{scenarios / max(rows, 1) * elapsed:,.0f} s (an extrapolation, not a measurement)")
    target = f"peak RSS of a {scenarios:,}-scenario CSV sweep{what} < {TARGET_RSS_BYTES / 1e9:.1f} GB"
    complete = rows == scenarios and process.returncode == 0
    print(f"    peak RSS {peak / 1e6:,.0f} MB{'' if complete else ' (of an incomplete run)'}")
    verdict(target,
            peak < TARGET_RSS_BYTES and complete,
            f"{peak / 1e6:,.0f} MB ({peak / TARGET_RSS_BYTES:.3f} of the limit), {rows:,} of {scenarios:,} rows, "
            f"{elapsed:,.0f} s")


def main() -> None:
    quick = "--quick" in sys.argv[1:]
    kept = keep_freed_arrays()  # as `berth sweep`, its workers and the service's sweep runner do
    adopted = adopt_orphans()
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}, {os.cpu_count()} CPUs seen; "
          f"BLAS/OpenMP pools limited to 1 thread; freed arrays kept: {kept}; the commands' orphans (a fork "
          f"server's workers, where a sweep's are forked by one) counted: {adopted}", flush=True)
    core_benchmark()
    venue_size_benchmark()
    step_grid_benchmark()
    own_step_benchmark()
    compile_benchmark()
    if "--core" not in sys.argv[1:]:
        with tempfile.TemporaryDirectory(prefix="bench-sweeps-") as scratch:
            end_to_end_json(Path(scratch), E2E_SCENARIOS // 10 if quick else E2E_SCENARIOS)
            through_berth_sweep(Path(scratch), E2E_SCENARIOS // 10 if quick else E2E_SCENARIOS)
            end_to_end_csv(Path(scratch), CSV_SCENARIOS // 10 if quick else CSV_SCENARIOS)
            for label, scenarios in ((TEN_VENUE_DRAWS, TEN_VENUE_CSV_SCENARIOS),
                                     *((label, OWN_STEP_CSV_SCENARIOS) for label in OWN_STEP_CSV)):
                end_to_end_csv(Path(scratch), scenarios // 10 if quick else scenarios, ten_venue=label)
    print("== Summary" + (" (--quick: the end-to-end sizes are not the targets')" if quick else ""))
    for name, ok, figure in results:
        print(f"  {'PASS' if ok else 'MISS'}  {name}: {figure}")


if __name__ == "__main__":
    main()
    sys.exit(0)
