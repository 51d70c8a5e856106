"""Fleet-plan speed: 200 candidate sizes × 2,000 demand samples × 48 months (target under 2 s on
this machine), against the same plan evaluated one size at a time in the same run; and the demo
plan (pricing_examples/fleet-plan.json: 48 months, yearly decisions, staged by dynamic programming)
through the use case, against the same plan with a single decision.

Run: .venv/bin/python tests/benchmarks/bench_fleet.py
"""

import json
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from service.contract.catalog import CatalogIn
from service.contract.fleet import FleetPlanIn
from service.domain.fleet import FleetEconomics, monthly_demand, plan_fleet
from service.usecases.fleet_plans import FleetLimits, fleet_plan

EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"

ECONOMICS = FleetEconomics(accelerators_per_node=8, fixed_per_node_month=11_668.0, variable_per_accelerator_hour=0.067,
                           rented_per_accelerator_hour=4.10, max_utilisation=0.85, monthly_rate=0.08 / 12)


def best_of(repeats: int, run: Callable[[], object]) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    demand = monthly_demand(first_month_hours=60_000, months=48, doubling_months=10, spread=0.25, samples=2_000,
                            generator=np.random.default_rng(7))
    sizes = np.arange(0, 800, 4)  # 200 sizes
    vectorised = best_of(3, lambda: plan_fleet(sizes=sizes, demand=demand, economics=ECONOMICS))
    one_at_a_time = best_of(1, lambda: [plan_fleet(sizes=sizes[k:k + 1], demand=demand, economics=ECONOMICS)
                                        for k in range(sizes.size)])
    cells = sizes.size * demand.size
    print(f"fleet plan: {sizes.size} sizes × {demand.shape[0]:,} samples × {demand.shape[1]} months "
          f"= {cells:,} cells")
    print(f"  all sizes at once: {vectorised:.3f} s ({cells / vectorised / 1e6:,.0f} M cells/s)")
    print(f"  one size per call: {one_at_a_time:.3f} s; ratio {one_at_a_time / vectorised:.1f}×")
    print(f"  target under 2 s: {'PASS' if vectorised < 2.0 else 'MISS'}")
    staged = best_of(3, lambda: plan_fleet(sizes=sizes, demand=demand, economics=ECONOMICS,
                                           decision_every_months=12))
    print(f"  staged, yearly decisions (4 stages, 200² moves each): {staged:.3f} s; "
          f"{staged / vectorised:.2f}× the single decision")

    catalog = CatalogIn.model_validate_json((EXAMPLES / "catalog.json").read_text(encoding="utf-8"))
    request = FleetPlanIn.model_validate_json((EXAMPLES / "fleet-plan.json").read_text(encoding="utf-8"))
    once = request.model_copy(update={"decision_every_months": request.horizon_months})
    demo = best_of(5, lambda: fleet_plan(catalog, request, limits=FleetLimits()))
    single = best_of(5, lambda: fleet_plan(catalog, once, limits=FleetLimits()))
    answer = fleet_plan(catalog, request, limits=FleetLimits())
    print(f"demo plan ({len(answer['candidates'])} sizes × {request.samples:,} samples × "
          f"{request.horizon_months} months, decisions every {request.decision_every_months} months): "
          f"{demo:.3f} s for the whole answer; {demo / single:.2f}× the same plan with one decision")
    print("  stages: " + json.dumps([(st["month"], st["nodes"]) for st in answer["stages"]]))


if __name__ == "__main__":
    main()
