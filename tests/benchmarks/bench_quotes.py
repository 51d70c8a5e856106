"""Throughput and latency of POST /v1/quotes against GET /healthz, on one real `berth serve`.

    .venv/bin/python tests/benchmarks/bench_quotes.py [--count 2000] [--clients 20] [--warmup 100] [--workers 1]
                                                     [--floor]

Starts `berth serve` on a temporary SQLite file on a free loopback port, warms up, then sends a fixed
count of each request from concurrent async clients and prints requests/s and p50/p99 latency, the
quote/healthz ratios measured in this one run, and PASS/MISS against the targets:
  - quote throughput >= 0.5 x healthz throughput
  - quote p99 < 50 ms at 20 concurrent clients
The load generator is a minimal HTTP/1.1 client on asyncio streams: one keep-alive connection per
client, every request encoded before the timed run, the response read by its Content-Length. Every
quote carries a different body (the campaign's tokens vary by request index), so no cache could
flatter the figures. Every answer's status is checked; unexpected ones are counted and the first
is shown. The client runs on the same machine and takes CPU from the server; its CPU time is
printed, and so is the server's CPU time per request (all its processes, read from /proc), which
moves less than throughput when something else shares the machine. It reports and does not gate:
it exits 0 whether or not the targets are met (1 only if the server cannot be started, goes away, or
answers in a way this client does not read, e.g. a chunked body). The server is stopped at the end in every case.

With --floor the server is `floor_app.py` (the service plus routes that each do only part of a quote) and
three more rows come between healthz and quotes: the same bodies answered with a canned quote (HTTP and
validation), that quote also stored (plus the database write), and the quote computed but not stored
(plus the model). Their ratios to healthz bound what any quote model could reach on this server."""

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
THROUGHPUT_RATIO_TARGET = 0.5
QUOTE_P99_TARGET_MS = 50.0
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
FLOOR_ROUTES = (("POST floor/validated", "/floor/validated"), ("POST floor/stored", "/floor/stored"),
                ("POST floor/computed", "/floor/computed"))


def start_server(workdir: Path, database_url: str | None = None, workers: int = 1,
                 floor: bool = False) -> tuple[subprocess.Popen[bytes], str]:
    """`berth serve` (or with `floor`, the floor app in one process) on a free port (by default on a
    SQLite file in `workdir`), once /readyz is 200."""
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    env = {k: v for k, v in os.environ.items() if not k.startswith("BERTH_")}
    database = database_url or f"sqlite:///{workdir / 'bench.db'}"
    command = ([sys.executable, str(FLOOR_APP), "--port", str(port), "--database", database] if floor else
               [sys.executable, "-m", "service.cli", "serve", "--host", "127.0.0.1", "--port", str(port),
                "--database", database, "--workers", str(workers)])
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
    raise RuntimeError(f"berth serve did not become ready within {READY_TIMEOUT_S:.0f} s:\n{log_tail}")


def stop_server(process: subprocess.Popen[bytes], timeout: float = 10.0) -> None:
    if process.poll() is None:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            process.kill()
    process.wait(timeout=timeout)


def server_cpu_seconds(pid: int | None) -> float | None:
    """User + system CPU time of the server process and its descendants (the workers), read from
    /proc; None where there is no /proc or no server process to read."""
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
    return sum(seconds.get(member, 0.0) for member in family)


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
    statuses: dict[str, int] = field(default_factory=dict)  # status code (or "transport error") → count
    first_unexpected: str = ""  # the first unexpected answer, for the warning

    @property
    def throughput(self) -> float:
        return self.count / self.wall_s

    def percentile(self, q: float) -> float:
        return float(np.percentile(self.latencies_ms, q))

    @property
    def server_cpu_ms_per_request(self) -> str:
        return "n/a" if self.server_cpu_s is None else f"{self.server_cpu_s * 1000.0 / self.count:.2f}"


async def load(url: str, name: str, requests: list[bytes], expected: int, clients: int,
               server_pid: int | None = None) -> Run:
    """Every request in `requests` once, from `clients` concurrent clients, each on its own keep-alive
    connection opened before the clock starts. A transport error counts as an error and the client
    reconnects; an answer this client cannot read (ProtocolError) ends the benchmark."""
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

    connections = await asyncio.gather(*(connect() for _ in range(clients)))
    server0 = server_cpu_seconds(server_pid)
    cpu0, wall0 = time.process_time(), time.perf_counter()
    await asyncio.gather(*(client_loop(connection) for connection in connections))
    wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
    server1 = server_cpu_seconds(server_pid)
    server = None if server0 is None or server1 is None else server1 - server0
    errors = len(requests) - statuses[str(expected)]
    return Run(name, len(requests), errors, wall, cpu, latencies, server, dict(statuses),
               unexpected[0] if unexpected else "")


def report(runs: list[Run], clients: int) -> None:
    print(f"{'request':<22}{'count':>7}{'errors':>8}{'wall s':>9}{'req/s':>10}{'p50 ms':>9}{'p99 ms':>9}"
          f"{'client CPU s':>14}{'server CPU ms/req':>19}")
    for run in runs:
        print(f"{run.name:<22}{run.count:>7}{run.errors:>8}{run.wall_s:>9.2f}{run.throughput:>10.1f}"
              f"{run.percentile(50):>9.2f}{run.percentile(99):>9.2f}{run.client_cpu_s:>14.2f}"
              f"{run.server_cpu_ms_per_request:>19}")
    health, *floors, quote = runs
    throughput_ratio = quote.throughput / health.throughput
    print()
    for floor in floors:
        print(f"ratio {floor.name[5:]}/healthz throughput: {floor.throughput / health.throughput:.3f} "
              "(a bound: a quote does all of this and more)")
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
    warn_unexpected(runs)


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


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=2000, help="requests of each kind (default %(default)s)")
    parser.add_argument("--clients", type=int, default=20, help="concurrent clients (default %(default)s)")
    parser.add_argument("--warmup", type=int, default=100, help="warm-up requests of each kind")
    parser.add_argument("--workers", type=int, default=1, help="passed to `berth serve --workers`")
    parser.add_argument("--floor", action="store_true", help="also time the floor routes (one worker)")
    args = parser.parse_args()
    if args.floor and args.workers != 1:
        parser.error("--floor runs one worker")
    with tempfile.TemporaryDirectory(prefix="berth-bench-") as workdir:
        try:
            process, url = start_server(Path(workdir), workers=args.workers, floor=args.floor)
        except RuntimeError as error:
            print(error, file=sys.stderr)
            return 1
        try:
            server = "floor app (the service plus floor routes)" if args.floor else "berth serve"
            print(f"{server} at {url} ({args.workers} worker(s)), {args.clients} concurrent clients, "
                  f"{args.count} requests each, {args.warmup} warm-up; {os.cpu_count()} CPUs shared by server "
                  "and clients")
            print(f"quote body: {CAMPAIGN.name}, tokens varied per request")
            print()
            runs = asyncio.run(bench(url, args.count, args.clients, args.warmup, process.pid, args.floor))
        except ProtocolError as error:
            print(f"the server answered in a way this client does not read: {error}", file=sys.stderr)
            return 1
        except OSError as error:  # a client could not reconnect after a transport error: the server is gone
            print(f"lost the server: {error}", file=sys.stderr)
            return 1
        finally:
            stop_server(process)
    report(runs, args.clients)
    return 0


if __name__ == "__main__":
    sys.exit(main())
