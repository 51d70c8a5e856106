"""Throughput and latency of POST /v1/quotes against the floor routes and GET /healthz, on 1 and on
2 workers, each on its own freshly started server.

    .venv/bin/python tests/benchmarks/bench_quotes.py [--count 2000] [--clients 20] [--warmup 100]
                                                     [--workers 1 2]

For each worker count (default: 1, then 2) it starts `floor_app.py` (the service plus routes that each do
only part of a quote) with that many worker processes, on a new SQLite file on a free loopback port, warms
up, and sends a fixed count of each request from concurrent async clients: GET /healthz; the quote bodies
answered with a canned quote (HTTP and validation: floor/validated), that quote also stored (plus the
database write: floor/stored), the quote computed but not stored (plus the model: floor/computed), and
the quote documented and stored from the first body's evaluation (all but the model's evaluation:
floor/documented, a bound on the ratio below for any model, however fast); and POST /v1/quotes, the
service's own route, which the floor app serves unchanged. It prints, per worker count, requests/s,
p50/p99 latency and CPU time, then the ratios to that same server's runs: quote/floor-stored (the target),
floor-documented/floor-stored (the bound), quote/healthz and floor/healthz (information: what any quote
model could reach on this server). Then PASS/MISS against the targets, each with the figure measured:
  - quote throughput >= 0.5 x floor/stored throughput, at 20 clients, on 1 worker and on 2 workers; beside
    each, the server CPU per quote that throughput allows on busy workers, and what floor/documented leaves
    of it to the evaluation (none, where floor/documented alone takes more), against what it takes
  - quote p99 < 150 ms at 20 clients on 2 workers; beside it, the mean latency that run's throughput implies
    (each client sends again only once answered: clients / throughput), which p99 cannot be below
A target whose worker count was not measured says so, and a run with other than 20 clients says that its
figures are not at the targets' load.

The load generator is a minimal HTTP/1.1 client on asyncio streams: one keep-alive connection per
client, every request encoded before the timed run, the response read by its Content-Length. The
connections are opened one after another, 10 ms apart, so that they spread over the workers (opened at
once, they are often all accepted by one worker process); the table's last column is the share of the
server's CPU taken by its busiest process, about 1/N when N workers share the load, and a run on several
workers where one process took over 75% is flagged. Every quote carries a different body (the campaign's
tokens vary by request index), so no cache could flatter the figures. Every answer's status is checked;
unexpected ones are counted and the first is shown. The client runs on the same machine and takes CPU
from the server; its CPU time is printed, and so is the server's CPU time per request (all its
processes, read from /proc), which moves less than throughput when something else shares the machine. It
reports and does not gate: it exits 0 whether or not the targets are met (1 only if a server cannot be
started, goes away, or answers in a way this client does not read, e.g. a chunked body; what was
measured before is still reported). Every server is stopped in every case."""

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
import urllib.error
import urllib.parse
import urllib.request
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

REPO_ROOT = Path(__file__).resolve().parents[2]
CAMPAIGN = REPO_ROOT / "pricing_examples" / "campaign-owned-wins.json"
READY_TIMEOUT_S = 30.0
REQUEST_TIMEOUT_S = 30.0
TARGET_CLIENTS = 20  # the load at which the targets are stated
THROUGHPUT_RATIO_TARGET = 0.5  # quote throughput / floor/stored throughput, on each of RATIO_TARGET_WORKERS
RATIO_TARGET_WORKERS = (1, 2)
QUOTE_P99_TARGET_MS = 150.0  # on P99_TARGET_WORKERS
P99_TARGET_WORKERS = 2
# Connections opened at once are often all accepted by whichever worker process wakes first (asyncio
# accepts every pending connection at each wake-up), leaving the others idle; opened this far apart,
# each is accepted on its own and they spread over the workers as a steady arrival of clients would.
CONNECT_GAP_S = 0.01
UNEVEN_SHARE = 0.75  # on several workers, a run whose busiest process took more of the CPU is flagged
UNEVEN_MIN_CPU_S = 0.2  # below this the share is too coarse to judge (/proc counts in clock ticks)
TOKENS_STEP = 1e-6  # request i quotes tokens x (1 + i x TOKENS_STEP): every body differs, the quote barely


class ProtocolError(Exception):
    """The server answered in a way this minimal client does not read (e.g. a chunked body)."""


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _ready(url: str) -> bool:
    try:
        with urllib.request.urlopen(f"{url}/readyz", timeout=2.0) as response:
            return int(response.status) == 200
    except (urllib.error.URLError, OSError):  # HTTPError (a 503) is a URLError
        return False


FLOOR_APP = Path(__file__).resolve().parent / "floor_app.py"
HEALTHZ, STORED, QUOTES = "GET /healthz", "POST floor/stored", "POST /v1/quotes"  # run names
DOCUMENTED = "POST floor/documented"
FLOOR_ROUTES = (("POST floor/validated", "/floor/validated"), (STORED, "/floor/stored"),
                ("POST floor/computed", "/floor/computed"), (DOCUMENTED, "/floor/documented"))


def start_server(workdir: Path, database_url: str | None = None, workers: int = 1,
                 floor: bool = False) -> tuple[subprocess.Popen[bytes], str]:
    """`berth serve` (or with `floor`, the floor app) with `workers` worker processes on a free port (by
    default on a SQLite file in `workdir`), once /readyz is 200."""
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    env = {k: v for k, v in os.environ.items() if not k.startswith("BERTH_")}
    database = database_url or f"sqlite:///{workdir / 'bench.db'}"
    command = ([sys.executable, str(FLOOR_APP)] if floor else [sys.executable, "-m", "service.cli", "serve"])
    command += ["--host", "127.0.0.1", "--port", str(port), "--database", database, "--workers", str(workers)]
    with open(workdir / "server.log", "wb") as log:
        process = subprocess.Popen(command, cwd=REPO_ROOT, env=env, stdout=log, stderr=subprocess.STDOUT,
                                   stdin=subprocess.DEVNULL)
    deadline = time.monotonic() + READY_TIMEOUT_S
    while time.monotonic() < deadline and process.poll() is None:
        if _ready(url):
            return process, url
        time.sleep(0.05)
    stop_server(process)
    log_tail = (workdir / "server.log").read_text(encoding="utf-8", errors="replace")[-3000:]
    server = "the floor app" if floor else "berth serve"
    raise RuntimeError(f"{server} ({workers} worker(s)) did not become ready within {READY_TIMEOUT_S:.0f} s:\n"
                       f"{log_tail}")


def stop_server(process: subprocess.Popen[bytes], timeout: float = 10.0) -> None:
    if process.poll() is None:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            process.kill()
    process.wait(timeout=timeout)


def server_cpu_seconds(pid: int | None) -> dict[int, float] | None:
    """User + system CPU time of each process of the server: the process and its descendants (the
    workers), by process id, read from /proc; None where there is no /proc or no server process to read."""
    proc = Path("/proc")
    if pid is None or not (proc / str(pid) / "stat").exists():
        return None
    parents: dict[int, int] = {}
    seconds: dict[int, float] = {}
    tick = os.sysconf("SC_CLK_TCK")
    for entry in proc.iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue  # the process ended while we looked
        fields = stat[stat.rindex(")") + 2:].split()  # after the command name, which may hold spaces
        parents[int(entry.name)] = int(fields[1])
        seconds[int(entry.name)] = (int(fields[11]) + int(fields[12])) / tick  # utime + stime
    family, grew = {pid}, True
    while grew:
        children = {child for child, parent in parents.items() if parent in family} - family
        family |= children
        grew = bool(children)
    return {member: seconds.get(member, 0.0) for member in family}


def encode_request(method: str, path: str, host: str, body: bytes | None = None) -> bytes:
    """One HTTP/1.1 request, ready to write on a keep-alive connection."""
    lines = [f"{method} {path} HTTP/1.1", f"Host: {host}", "Accept: application/json"]
    if body is not None:
        lines += ["Content-Type: application/json", f"Content-Length: {len(body)}"]
    return ("\r\n".join(lines) + "\r\n\r\n").encode("ascii") + (body or b"")


def quote_bodies(campaign: dict[str, Any], first: int, count: int) -> list[bytes]:
    """`count` different quote bodies: request `first + i` quotes tokens x (1 + (first + i) x TOKENS_STEP)."""
    tokens = float(campaign["campaign"]["work"]["tokens"])
    bodies = []
    for index in range(first, first + count):
        varied = json.loads(json.dumps(campaign))
        varied["campaign"]["work"]["tokens"] = tokens * (1.0 + index * TOKENS_STEP)
        bodies.append(json.dumps(varied).encode("utf-8"))
    return bodies


async def exchange(reader: asyncio.StreamReader, writer: asyncio.StreamWriter,
                   request: bytes) -> tuple[int, bytes, bool]:
    """Send one request and read its response: (status, body, whether the server closes the connection).
    Only bodies framed by Content-Length are read; anything else is a ProtocolError."""
    writer.write(request)
    await writer.drain()
    head = await reader.readuntil(b"\r\n\r\n")
    status_line, *header_lines = head[:-4].split(b"\r\n")
    version, _, rest = status_line.partition(b" ")
    if not version.startswith(b"HTTP/1.") or not rest[:3].isdigit():
        raise ProtocolError(f"not an HTTP/1.x status line: {status_line[:80]!r}")
    length: int | None = None
    closing = version == b"HTTP/1.0"
    for line in header_lines:
        name, _, value = line.partition(b":")
        name, value = name.strip().lower(), value.strip()
        if name == b"content-length":
            if not value.isdigit():
                raise ProtocolError(f"Content-Length {value!r} is not a number")
            length = int(value)
        elif name == b"transfer-encoding":
            raise ProtocolError(f"Transfer-Encoding {value.decode('latin-1')!r}: this client reads only bodies "
                                "framed by Content-Length")
        elif name == b"connection":
            closing = value.lower() == b"close"
    if length is None:
        raise ProtocolError(f"no Content-Length in the answer to {request.split(b' ', 2)[:2]!r}")
    return int(rest[:3]), await reader.readexactly(length), closing


@dataclass(frozen=True)
class Run:
    name: str
    count: int
    errors: int
    wall_s: float
    client_cpu_s: float
    latencies_ms: np.ndarray
    server_cpu_s: float | None = None  # CPU time of the server (all its processes) during the run
    busiest_share: float | None = None  # the share of that time spent by its busiest process
    statuses: dict[str, int] = field(default_factory=dict)  # status code (or "transport error") → count
    first_unexpected: str = ""  # the first unexpected answer, for the warning

    @property
    def throughput(self) -> float:
        return self.count / self.wall_s

    def percentile(self, q: float) -> float:
        return float(np.percentile(self.latencies_ms, q))

    @property
    def server_cpu_ms(self) -> float | None:
        """The server's CPU time per request, in ms; None where it was not read."""
        return None if self.server_cpu_s is None else self.server_cpu_s * 1000.0 / self.count

    @property
    def server_cpu_ms_per_request(self) -> str:
        return "n/a" if self.server_cpu_ms is None else f"{self.server_cpu_ms:.2f}"

    @property
    def busiest_percent(self) -> str:
        return "n/a" if self.busiest_share is None else f"{self.busiest_share * 100.0:.0f}"


async def load(url: str, name: str, requests: list[bytes], expected: int, clients: int,
               server_pid: int | None = None) -> Run:
    """Every request in `requests` once, from `clients` concurrent clients, each on its own keep-alive
    connection opened before the clock starts, one after another (CONNECT_GAP_S). A transport error
    counts as an error and the client reconnects; an answer this client cannot read (ProtocolError) ends
    the benchmark."""
    target = urllib.parse.urlsplit(url)
    host, port = target.hostname or "127.0.0.1", target.port or 80
    latencies = np.zeros(len(requests))
    statuses: Counter[str] = Counter()
    unexpected: list[str] = []
    next_index = iter(range(len(requests)))

    async def connect() -> tuple[asyncio.StreamReader, asyncio.StreamWriter]:
        return await asyncio.wait_for(asyncio.open_connection(host, port), REQUEST_TIMEOUT_S)

    async def client_loop(connection: tuple[asyncio.StreamReader, asyncio.StreamWriter]) -> None:
        reader, writer = connection
        try:
            for index in next_index:
                began = time.perf_counter()
                try:
                    status, body, closing = await asyncio.wait_for(
                        exchange(reader, writer, requests[index]), REQUEST_TIMEOUT_S)
                except (OSError, asyncio.IncompleteReadError, asyncio.LimitOverrunError, TimeoutError) as error:
                    latencies[index] = (time.perf_counter() - began) * 1000.0
                    statuses["transport error"] += 1
                    unexpected.append(f"{type(error).__name__}: {error}")
                    writer.close()
                    reader, writer = await connect()
                    continue
                latencies[index] = (time.perf_counter() - began) * 1000.0
                statuses[str(status)] += 1
                if status != expected:
                    unexpected.append(f"{status}: {body[:300].decode('utf-8', 'replace')}")
                if closing:
                    writer.close()
                    reader, writer = await connect()
        finally:
            writer.close()

    connections = []
    for _ in range(clients):
        connections.append(await connect())
        await asyncio.sleep(CONNECT_GAP_S)
    server0 = server_cpu_seconds(server_pid)
    cpu0, wall0 = time.process_time(), time.perf_counter()
    await asyncio.gather(*(client_loop(connection) for connection in connections))
    wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
    server1 = server_cpu_seconds(server_pid)
    server = busiest = None
    if server0 is not None and server1 is not None:
        spent = [seconds - server0.get(member, 0.0) for member, seconds in server1.items()]
        server = sum(spent)
        busiest = max(spent) / server if server > 0 else None
    errors = len(requests) - statuses[str(expected)]
    return Run(name, len(requests), errors, wall, cpu, latencies, server, busiest, dict(statuses),
               unexpected[0] if unexpected else "")


def named(runs: list[Run], name: str) -> Run:
    return next(run for run in runs if run.name == name)


def report(workers: int, runs: list[Run]) -> None:
    """One server's runs: the table, then the ratios to its floor/stored and healthz runs."""
    print(f"{workers} worker(s):")
    print(f"{'request':<22}{'count':>7}{'errors':>8}{'wall s':>9}{'req/s':>10}{'p50 ms':>9}{'p99 ms':>9}"
          f"{'client CPU s':>14}{'server CPU ms/req':>19}{'busiest process %':>19}")
    for run in runs:
        print(f"{run.name:<22}{run.count:>7}{run.errors:>8}{run.wall_s:>9.2f}{run.throughput:>10.1f}"
              f"{run.percentile(50):>9.2f}{run.percentile(99):>9.2f}{run.client_cpu_s:>14.2f}"
              f"{run.server_cpu_ms_per_request:>19}{run.busiest_percent:>19}")
    health, stored, quote = named(runs, HEALTHZ), named(runs, STORED), named(runs, QUOTES)
    print()
    print(f"ratio quote/floor-stored throughput: {quote.throughput / stored.throughput:.3f} "
          f"(target >= {THROUGHPUT_RATIO_TARGET})")
    if quote.server_cpu_s is not None and stored.server_cpu_s is not None:
        print(f"ratio quote/floor-stored server CPU per request: {quote.server_cpu_s / stored.server_cpu_s:.2f}")
    print(f"ratio quote/floor-stored p50 latency: {quote.percentile(50) / stored.percentile(50):.1f}, "
          f"p99 latency: {quote.percentile(99) / stored.percentile(99):.1f}")
    print(f"ratio floor-documented/floor-stored throughput: "
          f"{named(runs, DOCUMENTED).throughput / stored.throughput:.3f} (bound: the quote with its evaluation free,"
          f" which no model, however fast, passes; the target is {THROUGHPUT_RATIO_TARGET})")
    print(f"ratio quote/healthz throughput: {quote.throughput / health.throughput:.3f} (information)")
    for route, _ in FLOOR_ROUTES:
        print(f"ratio {route.removeprefix('POST ').replace('/', '-')}/healthz throughput: "
              f"{named(runs, route).throughput / health.throughput:.3f} "
              "(information: a quote does all of this and more)")
    warn_unexpected(runs)
    for run in runs:
        if (workers > 1 and run.busiest_share is not None and run.busiest_share > UNEVEN_SHARE
                and run.server_cpu_s is not None and run.server_cpu_s >= UNEVEN_MIN_CPU_S):
            print(f"WARNING: {run.name}: one server process took {run.busiest_percent}% of the server's CPU: "
                  f"the connections did not spread over the {workers} workers")
    print(flush=True)


def verdicts(results: dict[int, list[Run]], clients: int) -> None:
    """PASS or MISS per target, with the figure measured; NOT MEASURED where its worker count was not run."""
    at_load = f"at {clients} clients" + ("" if clients == TARGET_CLIENTS else
                                         f" (the targets are stated at {TARGET_CLIENTS}: not at their load)")
    for workers in RATIO_TARGET_WORKERS:
        target = f"quote throughput >= {THROUGHPUT_RATIO_TARGET} x floor/stored throughput on {workers} worker(s)"
        if workers not in results:
            print(f"NOT MEASURED {target} (run with --workers {workers})")
            continue
        quote, stored = named(results[workers], QUOTES), named(results[workers], STORED)
        ratio = quote.throughput / stored.throughput
        budget = evaluation_budget(workers, results[workers])
        print(f"{'PASS' if ratio >= THROUGHPUT_RATIO_TARGET else 'MISS'} {target} {at_load} (measured {ratio:.3f} x: "
              f"{quote.throughput:.1f} against {stored.throughput:.1f} req/s{budget})")
    target = f"quote p99 < {QUOTE_P99_TARGET_MS:.0f} ms on {P99_TARGET_WORKERS} worker(s)"
    if P99_TARGET_WORKERS not in results:
        print(f"NOT MEASURED {target} (run with --workers {P99_TARGET_WORKERS})")
        return
    quote = named(results[P99_TARGET_WORKERS], QUOTES)
    p99 = quote.percentile(99)
    # Each client sends again only once answered, so the mean latency is clients / throughput (Little's law,
    # L = λW: J. D. C. Little, 1961, "A proof for the queuing formula: L = λW", Operations Research 9(3),
    # 383-387), and p99 is at least the mean: the p99 target needs that throughput, and beyond it a narrow
    # spread (on 2 workers, a write waiting long for SQLite's write lock once widened it: engine.py).
    print(f"{'PASS' if p99 < QUOTE_P99_TARGET_MS else 'MISS'} {target} {at_load} (measured {p99:.1f} ms; "
          f"the mean is {clients} clients / {quote.throughput:.1f} req/s = {1000 * clients / quote.throughput:.1f} ms, "
          f"and p99 can be under {QUOTE_P99_TARGET_MS:.0f} ms only above "
          f"{1000 * clients / QUOTE_P99_TARGET_MS:.0f} req/s)")


def evaluation_budget(workers: int, runs: list[Run]) -> str:
    """What the throughput target leaves the evaluation, in words: a server whose workers are busy
    answers workers / (CPU per quote) quotes a second, so reaching the target throughput (its share
    of floor/stored's) allows workers × 1000 / that throughput ms of server CPU per quote; floor/documented,
    the quote with its evaluation free, takes its share of that, and the evaluation may take the rest.
    An upper bound: a server is never busier than fully. Empty where a run's server CPU was not read."""
    quote, stored, documented = named(runs, QUOTES), named(runs, STORED), named(runs, DOCUMENTED)
    if quote.server_cpu_ms is None or documented.server_cpu_ms is None:
        return ""
    needed = THROUGHPUT_RATIO_TARGET * stored.throughput
    per_quote = workers * 1000.0 / needed
    floor = documented.server_cpu_ms
    now = quote.server_cpu_ms - floor
    if per_quote <= floor:
        return (f"; {needed:.1f} req/s allows {per_quote:.2f} ms of server CPU per quote, less than floor/documented's "
                f"{floor:.2f} ms: no evaluation, however fast, passes")
    return (f"; {needed:.1f} req/s allows {per_quote:.2f} ms of server CPU per quote, floor/documented takes "
            f"{floor:.2f}: the evaluation may take at most {per_quote - floor:.2f} ms, and takes {now:.2f} ms")


def warn_unexpected(runs: list[Run]) -> None:
    for run in runs:
        if run.errors:
            print(f"WARNING: {run.name}: {run.errors} of {run.count} requests failed or answered an unexpected "
                  f"status (answers: {run.statuses}); first: {run.first_unexpected}; figures include them")


async def bench(url: str, count: int, clients: int, warmup: int, server_pid: int | None = None,
                floor: bool = False) -> list[Run]:
    host = urllib.parse.urlsplit(url).netloc
    campaign = json.loads(CAMPAIGN.read_text(encoding="utf-8"))
    health_request = encode_request("GET", "/healthz", host)
    # Every request is encoded here, before any clock starts; warm-up and timed bodies differ too.
    warmup_bodies, timed_bodies = quote_bodies(campaign, 0, warmup), quote_bodies(campaign, warmup, count)
    await load(url, "warmup healthz", [health_request] * warmup, 200, clients)
    runs = [await load(url, "GET /healthz", [health_request] * count, 200, clients, server_pid)]
    for name, path in (*(FLOOR_ROUTES if floor else ()), ("POST /v1/quotes", "/v1/quotes")):
        await load(url, "warmup", [encode_request("POST", path, host, body) for body in warmup_bodies], 201, clients)
        timed = [encode_request("POST", path, host, body) for body in timed_bodies]
        runs.append(await load(url, name, timed, 201, clients, server_pid))
    return runs


def measure(workdir: Path, workers: int, args: argparse.Namespace) -> list[Run]:
    """Every run on a freshly started floor app with `workers` worker processes and its own database."""
    directory = workdir / f"workers-{workers}"
    directory.mkdir()
    process, url = start_server(directory, workers=workers, floor=True)
    try:
        print(f"floor app (the service plus floor routes) at {url}, {workers} worker(s)", flush=True)
        return asyncio.run(bench(url, args.count, args.clients, args.warmup, process.pid, floor=True))
    finally:
        stop_server(process)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=2000, help="requests of each kind (default %(default)s)")
    parser.add_argument("--clients", type=int, default=TARGET_CLIENTS, help="concurrent clients (default %(default)s)")
    parser.add_argument("--warmup", type=int, default=100, help="warm-up requests of each kind")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2],
                        help="worker counts, each on its own freshly started server (default 1 2)")
    args = parser.parse_args()
    if min(args.workers) < 1 or args.count < 1 or args.clients < 1 or args.warmup < 0:
        parser.error("--workers, --count and --clients must be at least 1, --warmup at least 0")
    print(f"{args.clients} concurrent clients, {args.count} requests of each kind per server, {args.warmup} "
          f"warm-up; {os.cpu_count()} CPUs shared by servers and clients")
    print(f"quote body: {CAMPAIGN.name}, tokens varied per request")
    print()
    results: dict[int, list[Run]] = {}
    failure = ""
    with tempfile.TemporaryDirectory(prefix="berth-bench-") as workdir:
        for workers in dict.fromkeys(args.workers):  # each count once, in the order given
            try:
                results[workers] = measure(Path(workdir), workers, args)
            except RuntimeError as error:  # the server did not start
                failure = str(error)
            except ProtocolError as error:
                failure = f"the server answered in a way this client does not read: {error}"
            except OSError as error:  # a client could not reconnect after a transport error: the server is gone
                failure = f"lost the server: {error}"
            if failure:
                break
            report(workers, results[workers])
    verdicts(results, args.clients)
    if failure:
        print(failure, file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
