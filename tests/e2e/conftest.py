"""Real `berth serve` processes on loopback ports, each on a SQLite file the test chooses (or on a
database URL given as a string, as the PostgreSQL replica tests do).

`berth_factory(database)` starts a server (the same file may be reopened after a stop or a kill) and
returns once `/readyz` answers 200; every server started is stopped at teardown, SIGTERM first and
SIGKILL when it does not exit in time."""

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Protocol

import httpx
import pytest

REPO_ROOT = Path(__file__).resolve().parents[2]
READY_TIMEOUT_S = 30.0
STOP_TIMEOUT_S = 10.0
START_ATTEMPTS = 3  # a free port can be taken between our probe and the server's bind


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _tail(path: Path, lines: int = 40) -> str:
    try:
        return "\n".join(path.read_text(encoding="utf-8", errors="replace").splitlines()[-lines:])
    except FileNotFoundError:
        return "(no output)"


class BerthServer:
    """One `berth serve` subprocess; its stdout and stderr go to files beside the database."""

    def __init__(self, database: Path | str, logs: Path, name: str, *, env: dict[str, str] | None = None,
                 host: str = "127.0.0.1", preexec: Callable[[], None] | None = None, workers: int = 1) -> None:
        self.database = database  # a SQLite file, or a database URL
        self.env = env or {}  # BERTH_* settings of this server
        self.host = host  # the address it listens on; it is reached on loopback
        self.preexec = preexec  # run in the child before exec (resource limits)
        self.workers = workers
        self.stdout_path = logs / f"{name}.out"
        self.stderr_path = logs / f"{name}.err"
        self.port = 0
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    @property
    def database_url(self) -> str:
        return self.database if isinstance(self.database, str) else f"sqlite:///{self.database}"

    @property
    def pid(self) -> int:
        assert self.process is not None
        return self.process.pid

    def start(self) -> None:
        for _attempt in range(START_ATTEMPTS):
            self.port = free_port()
            self._spawn()
            if self._wait_ready():
                return
            if "address already in use" not in _tail(self.stderr_path).lower():
                break
        pytest.fail(f"berth serve did not become ready on {self.url} within {READY_TIMEOUT_S:.0f} s "
                    f"(exit code {self.process.poll() if self.process else None}); its stderr:\n"
                    f"{_tail(self.stderr_path)}")

    def _spawn(self) -> None:
        env = {k: v for k, v in os.environ.items() if not k.startswith("BERTH_")} | self.env
        command = [sys.executable, "-m", "service.cli", "serve", "--host", self.host, "--port", str(self.port),
                   "--database", self.database_url, "--workers", str(self.workers)]
        with open(self.stdout_path, "ab") as out, open(self.stderr_path, "ab") as err:
            self.process = subprocess.Popen(command, cwd=REPO_ROOT, env=env, stdout=out, stderr=err,
                                            stdin=subprocess.DEVNULL, preexec_fn=self.preexec)

    def _wait_ready(self) -> bool:
        assert self.process is not None
        deadline = time.monotonic() + READY_TIMEOUT_S
        with httpx.Client(timeout=2.0) as client:
            while time.monotonic() < deadline:
                if self.process.poll() is not None:
                    return False
                try:
                    if client.get(f"{self.url}/readyz").status_code == 200:
                        return True
                except httpx.TransportError:
                    pass
                time.sleep(0.05)
        self.kill()
        return False

    def stop(self) -> None:
        """SIGTERM, then SIGKILL if the server has not exited within STOP_TIMEOUT_S."""
        if self.process is None or self.process.poll() is not None:
            self._reap()
            return
        self.process.send_signal(signal.SIGTERM)
        try:
            self.process.wait(timeout=STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            self.kill()

    def kill(self) -> None:
        """SIGKILL: the process gets no chance to flush or clean anything up."""
        if self.process is not None and self.process.poll() is None:
            self.process.kill()
        self._reap()

    def _reap(self) -> None:
        if self.process is not None:
            self.process.wait(timeout=STOP_TIMEOUT_S)

    def stderr(self) -> str:
        return _tail(self.stderr_path)


class ServerFactory(Protocol):
    def __call__(self, database: Path | str, *, env: dict[str, str] | None = None, host: str = "127.0.0.1",
                 preexec: Callable[[], None] | None = None) -> BerthServer: ...


@pytest.fixture
def berth_factory(tmp_path: Path) -> Iterator[ServerFactory]:
    started: list[BerthServer] = []
    logs = tmp_path / "logs"
    logs.mkdir()

    def start(database: Path | str, *, env: dict[str, str] | None = None, host: str = "127.0.0.1",
              preexec: Callable[[], None] | None = None) -> BerthServer:
        server = BerthServer(database, logs, f"server-{len(started)}", env=env, host=host, preexec=preexec)
        started.append(server)
        server.start()
        return server

    yield start
    for server in started:
        server.stop()


@pytest.fixture
def database(tmp_path: Path) -> Path:
    return tmp_path / "berth.db"


@pytest.fixture
def berth(berth_factory: ServerFactory, database: Path) -> BerthServer:
    return berth_factory(database)
