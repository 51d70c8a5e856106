"""Load on `berth serve` by database and worker count: SQLite and PostgreSQL, --workers 1 and 2.

    .venv/bin/python tests/benchmarks/bench_load.py [--count 1000] [--clients 20] [--warmup 100]
        [--postgresql URL | --no-postgresql] [--workers 1 2]

For each database and worker count: a fresh database (a SQLite file in a temporary directory, or a
new PostgreSQL database created on the server and dropped afterwards), `berth serve` on a free
loopback port, a warm-up, then a fixed count of GET /healthz and of POST /v1/quotes from concurrent
clients (the client code of bench_quotes.py). It prints requests/s, p50, p99 and the server's CPU
time per request for each, then the ratios measured in this run: quote/healthz, 2 workers/1 worker,
PostgreSQL/SQLite.

PostgreSQL: the server named by --postgresql, else by BERTH_TEST_DATABASE_URL, else the local
cluster on /var/run/postgresql when one answers; otherwise only SQLite is measured. The role needs
CREATEDB. The load generator shares the machine's CPUs with the server: figures are relative. It
reports and does not gate (exit 0; 1 only if a server cannot be started)."""

import argparse
import asyncio
import os
import sys
import tempfile
from contextlib import AbstractContextManager, nullcontext
from pathlib import Path

from sqlalchemy import create_engine
from sqlalchemy.engine import URL, make_url
from sqlalchemy.exc import OperationalError
from sqlalchemy.pool import NullPool

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the repository, for tests.databases

from bench_quotes import ProtocolError, Run, bench, start_server, stop_server, warn_unexpected

from tests.databases import ENVIRONMENT, fresh_postgresql_database

LOCAL_CLUSTER = "postgresql+psycopg://@/postgres?host=/var/run/postgresql"


def postgresql_server(given: str | None, disabled: bool) -> URL | None:
    if disabled:
        return None
    for candidate in (given, os.environ.get(ENVIRONMENT), LOCAL_CLUSTER):
        if not candidate:
            continue
        url = make_url(candidate)
        engine = create_engine(url, poolclass=NullPool, connect_args={"connect_timeout": 3})
        try:
            with engine.connect():
                return url
        except OperationalError as error:
            if candidate is given:
                raise SystemExit(f"cannot connect to {url.render_as_string()}: {error}") from error
        finally:
            engine.dispose()
    return None


def measure(database: str, workers: int, server: URL | None, args: argparse.Namespace,
            workdir: Path) -> list[Run]:
    directory = workdir / f"{database}-{workers}"
    directory.mkdir()
    creating: AbstractContextManager[str | None] = (
        nullcontext(None) if server is None else fresh_postgresql_database(server))
    with creating as database_url:
        process, url = start_server(directory, database_url=database_url, workers=workers)
        try:
            return asyncio.run(bench(url, args.count, args.clients, args.warmup, process.pid))
        finally:
            stop_server(process)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=1000, help="requests of each kind (default %(default)s)")
    parser.add_argument("--clients", type=int, default=20, help="concurrent clients (default %(default)s)")
    parser.add_argument("--warmup", type=int, default=100, help="warm-up requests of each kind")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2], help="worker counts (default 1 2)")
    parser.add_argument("--postgresql", help="a PostgreSQL URL to create the benchmark databases through")
    parser.add_argument("--no-postgresql", action="store_true", help="measure SQLite only")
    args = parser.parse_args()

    server = postgresql_server(args.postgresql, args.no_postgresql)
    databases: list[tuple[str, URL | None]] = [("sqlite", None)] + ([] if server is None else [("postgresql", server)])
    print(f"{args.clients} concurrent clients, {args.count} requests of each kind per run, {args.warmup} warm-up; "
          f"{os.cpu_count()} CPUs shared by server and clients")
    if server is None:
        print("PostgreSQL: none given and no local cluster answers; SQLite only")
    else:
        print(f"PostgreSQL: a fresh database per run on {server.render_as_string()}")
    print()

    results: dict[tuple[str, int], list[Run]] = {}
    with tempfile.TemporaryDirectory(prefix="berth-bench-load-") as workdir:
        for database, url in databases:
            for workers in args.workers:
                try:
                    results[(database, workers)] = measure(database, workers, url, args, Path(workdir))
                except (RuntimeError, ProtocolError, OSError) as error:
                    print(error, file=sys.stderr)
                    return 1
                print(f"measured {database} with {workers} worker(s)", file=sys.stderr)

    print(f"{'database':<11}{'workers':>8}  {'request':<16}{'count':>7}{'errors':>8}{'req/s':>10}"
          f"{'p50 ms':>9}{'p99 ms':>9}{'client CPU s':>14}{'server CPU ms/req':>19}")
    for (database, workers), runs in results.items():
        for run in runs:
            print(f"{database:<11}{workers:>8}  {run.name:<16}{run.count:>7}{run.errors:>8}{run.throughput:>10.1f}"
                  f"{run.percentile(50):>9.2f}{run.percentile(99):>9.2f}{run.client_cpu_s:>14.2f}"
                  f"{run.server_cpu_ms_per_request:>19}")
    print()

    def row(label: str, numerator: Run, denominator: Run) -> None:
        print(f"{label:<58}{numerator.throughput / denominator.throughput:>10.2f}"
              f"{numerator.percentile(50) / denominator.percentile(50):>10.2f}"
              f"{numerator.percentile(99) / denominator.percentile(99):>10.2f}")

    print(f"{'ratio':<58}{'req/s':>10}{'p50':>10}{'p99':>10}")
    for (database, workers), (health, quote) in results.items():
        row(f"{database}, {workers} worker(s): quote / healthz", quote, health)
    low, *higher = args.workers
    for database, _ in databases:
        for workers in higher:
            for index, name in enumerate(("healthz", "quote")):
                row(f"{database}, {name}: {workers} workers / {low} worker",
                    results[(database, workers)][index], results[(database, low)][index])
    if server is not None:
        for workers in args.workers:
            for index, name in enumerate(("healthz", "quote")):
                row(f"{workers} worker(s), {name}: PostgreSQL / SQLite",
                    results[("postgresql", workers)][index], results[("sqlite", workers)][index])
    warn_unexpected([run for runs in results.values() for run in runs])
    return 0


if __name__ == "__main__":
    sys.exit(main())
