"""Throughput and latency of POST /v1/quotes against GET /healthz, on one real `berth serve`.

    .venv/bin/python tests/benchmarks/bench_quotes.py [--count 2000] [--clients 20] [--warmup 100]

Starts `berth serve` on a temporary SQLite file on a free loopback port, warms up, then sends a fixed
count of each request from concurrent async clients and prints requests/s and p50/p99 latency, the
quote/healthz ratios measured in this one run, and PASS/MISS against the targets:
  - quote throughput >= 0.5 x healthz throughput
  - quote p99 < 50 ms at 20 concurrent clients
The load generator runs on the same machine and takes CPU from the server; its CPU time is printed.
It reports and does not gate: it exits 0 whether or not the targets are met (1 only if the server
cannot be started). The server is stopped at the end in every case."""

import argparse
import asyncio
import json
import os
import signal
import socket
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
import numpy as np

REPO_ROOT = Path(__file__).resolve().parents[2]
CAMPAIGN = REPO_ROOT / "pricing_examples" / "campaign-owned-wins.json"
READY_TIMEOUT_S = 30.0
REQUEST_TIMEOUT_S = 30.0
THROUGHPUT_RATIO_TARGET = 0.5
QUOTE_P99_TARGET_MS = 50.0


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def start_server(workdir: Path, database_url: str | None = None,
                 workers: int = 1) -> tuple[subprocess.Popen[bytes], str]:
    """`berth serve` on a free port (by default on a SQLite file in `workdir`), once /readyz is 200."""
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    env = {k: v for k, v in os.environ.items() if not k.startswith("BERTH_")}
    command = [sys.executable, "-m", "service.cli", "serve", "--host", "127.0.0.1", "--port", str(port),
               "--database", database_url or f"sqlite:///{workdir / 'bench.db'}", "--workers", str(workers)]
    with open(workdir / "server.log", "wb") as log:
        process = subprocess.Popen(command, cwd=REPO_ROOT, env=env, stdout=log, stderr=subprocess.STDOUT,
                                   stdin=subprocess.DEVNULL)
    deadline = time.monotonic() + READY_TIMEOUT_S
    with httpx.Client(timeout=2.0) as client:
        while time.monotonic() < deadline and process.poll() is None:
            try:
                if client.get(f"{url}/readyz").status_code == 200:
                    return process, url
            except httpx.TransportError:
                pass
            time.sleep(0.05)
    stop_server(process)
    log_tail = (workdir / "server.log").read_text(encoding="utf-8", errors="replace")[-3000:]
    raise RuntimeError(f"berth serve did not become ready within {READY_TIMEOUT_S:.0f} s:\n{log_tail}")


def stop_server(process: subprocess.Popen[bytes], timeout: float = 10.0) -> None:
    if process.poll() is None:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            process.kill()
    process.wait(timeout=timeout)


@dataclass(frozen=True)
class Run:
    name: str
    count: int
    errors: int
    wall_s: float
    client_cpu_s: float
    latencies_ms: np.ndarray

    @property
    def throughput(self) -> float:
        return self.count / self.wall_s

    def percentile(self, q: float) -> float:
        return float(np.percentile(self.latencies_ms, q))


async def load(url: str, name: str, method: str, path: str, body: dict[str, Any] | None, expected: int,
               count: int, clients: int) -> Run:
    """`count` requests from `clients` concurrent clients, each with its own connection."""
    latencies = np.zeros(count)
    errors = 0
    next_index = iter(range(count))

    async def client_loop() -> None:
        nonlocal errors
        async with httpx.AsyncClient(base_url=url, timeout=REQUEST_TIMEOUT_S) as client:
            for index in next_index:
                began = time.perf_counter()
                try:
                    response = await client.request(method, path, json=body)
                    ok = response.status_code == expected
                except httpx.TransportError:
                    ok = False
                latencies[index] = (time.perf_counter() - began) * 1000.0
                errors += not ok

    cpu0, wall0 = time.process_time(), time.perf_counter()
    await asyncio.gather(*(client_loop() for _ in range(clients)))
    wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
    return Run(name, count, errors, wall, cpu, latencies)


def report(runs: list[Run], clients: int) -> None:
    print(f"{'request':<16}{'count':>7}{'errors':>8}{'wall s':>9}{'req/s':>10}{'p50 ms':>9}{'p99 ms':>9}"
          f"{'client CPU s':>14}")
    for run in runs:
        print(f"{run.name:<16}{run.count:>7}{run.errors:>8}{run.wall_s:>9.2f}{run.throughput:>10.1f}"
              f"{run.percentile(50):>9.2f}{run.percentile(99):>9.2f}{run.client_cpu_s:>14.2f}")
    health, quote = runs
    throughput_ratio = quote.throughput / health.throughput
    print()
    print(f"ratio quote/healthz throughput: {throughput_ratio:.3f}")
    print(f"ratio quote/healthz p50 latency: {quote.percentile(50) / health.percentile(50):.1f}")
    print(f"ratio quote/healthz p99 latency: {quote.percentile(99) / health.percentile(99):.1f}")
    print()
    verdict = "PASS" if throughput_ratio >= THROUGHPUT_RATIO_TARGET else "MISS"
    print(f"{verdict} quote throughput >= {THROUGHPUT_RATIO_TARGET} x healthz throughput "
          f"(measured {throughput_ratio:.3f} x)")
    verdict = "PASS" if quote.percentile(99) < QUOTE_P99_TARGET_MS else "MISS"
    print(f"{verdict} quote p99 < {QUOTE_P99_TARGET_MS:.0f} ms at {clients} concurrent clients "
          f"(measured {quote.percentile(99):.1f} ms)")
    if any(run.errors for run in runs):
        print("WARNING: some requests failed or answered an unexpected status; figures include them")


async def bench(url: str, count: int, clients: int, warmup: int) -> list[Run]:
    body = json.loads(CAMPAIGN.read_text(encoding="utf-8"))
    await load(url, "warmup healthz", "GET", "/healthz", None, 200, warmup, clients)
    await load(url, "warmup quote", "POST", "/v1/quotes", body, 201, warmup, clients)
    health = await load(url, "GET /healthz", "GET", "/healthz", None, 200, count, clients)
    quote = await load(url, "POST /v1/quotes", "POST", "/v1/quotes", body, 201, count, clients)
    return [health, quote]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=2000, help="requests of each kind (default %(default)s)")
    parser.add_argument("--clients", type=int, default=20, help="concurrent clients (default %(default)s)")
    parser.add_argument("--warmup", type=int, default=100, help="warm-up requests of each kind")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="berth-bench-") as workdir:
        try:
            process, url = start_server(Path(workdir))
        except RuntimeError as error:
            print(error, file=sys.stderr)
            return 1
        try:
            print(f"berth serve at {url}, {args.clients} concurrent clients, {args.count} requests each, "
                  f"{args.warmup} warm-up; {os.cpu_count()} CPUs shared by server and clients")
            print(f"quote body: {CAMPAIGN.name}")
            print()
            runs = asyncio.run(bench(url, args.count, args.clients, args.warmup))
        finally:
            stop_server(process)
    report(runs, args.clients)
    return 0


if __name__ == "__main__":
    sys.exit(main())
