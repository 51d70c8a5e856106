"""Who may do what: `Authorization: Bearer <key>`, roles, teams, local mode and rate limits.

No key → 401 with WWW-Authenticate; a known key without the role → 403; another team's quote is
a 404 (handled where quotes are read); too many unknown keys from one client address → 429. With no
keys configured at all, berth runs in local mode: it answers callers whose socket is on loopback
only (whatever a proxy header says), as the local operator, without rate limits.
"""

import ipaddress
import math
import threading
import time
from collections import OrderedDict
from collections.abc import Awaitable, Callable
from typing import Annotated

from fastapi import Depends, Request
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException

from service.api.middleware import SOCKET_PEER
from service.storage.repository import Storage
from service.usecases.access import LOCAL, Principal, Role, keys_configured, resolve

CHALLENGE = {"WWW-Authenticate": 'Bearer realm="berth"'}
LOCAL_MODE_RECHECK_SECONDS = 5.0


class LocalMode:
    """Whether any key exists, checked at most every few seconds (keys are added by another process)."""

    def __init__(self, storage: Storage) -> None:
        self._storage = storage
        self._checked = -math.inf
        self._local = True
        self._lock = threading.Lock()

    def known(self) -> bool | None:
        """The last answer while it is fresh, else None. It never waits on the database or on a check
        in progress, so the event loop may call it; `active()` does the checking."""
        checked = self._checked  # read before the answer, which `active()` writes before the time
        local = self._local
        return local if time.monotonic() - checked < LOCAL_MODE_RECHECK_SECONDS else None

    def active(self) -> bool:
        with self._lock:
            now = time.monotonic()
            if now - self._checked >= LOCAL_MODE_RECHECK_SECONDS:
                self._local = not keys_configured(self._storage)
                self._checked = now
            return self._local


class RateLimiter:
    """A token bucket per key, in this process's memory: `burst` requests at once, refilled at
    `per_second`. Several replicas each keep their own buckets (see the README). At most `remember`
    keys are kept, the least recently seen forgotten first (a full bucket, as a new key gets)."""

    def __init__(self, *, per_second: float, burst: int, remember: int = 100_000) -> None:
        self.per_second, self.burst, self.remember = per_second, burst, remember
        self._buckets: OrderedDict[str, tuple[float, float]] = OrderedDict()
        self._lock = threading.Lock()

    def retry_after(self, key: str, *, take: bool = True) -> float:
        """0 when a token is free (taken unless `take` is False), else seconds until one is."""
        now = time.monotonic()
        with self._lock:
            tokens, last = self._buckets.pop(key, (float(self.burst), now))
            tokens = min(float(self.burst), tokens + (now - last) * self.per_second)
            free = tokens >= 1.0
            self._buckets[key] = (tokens - 1.0 if free and take else tokens, now)
            while len(self._buckets) > self.remember:
                self._buckets.popitem(last=False)
            return 0.0 if free else (1.0 - tokens) / self.per_second


class KeylessOnNetwork(RuntimeError):
    """Refused at start: no keys, and a non-loopback address to listen on."""


def is_loopback_host(host: str) -> bool:
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return host == "localhost"


def _loopback(request: Request) -> bool:
    """Whether the socket's peer is this machine; forwarded headers are never believed here."""
    peer = request.scope.get(SOCKET_PEER, request.scope.get("client"))
    host = peer[0] if peer else ""
    return is_loopback_host(host) or host == "testclient"


async def principal(request: Request) -> Principal:
    # Async, so a request whose answer is already known (local mode, checked in the last few
    # seconds) costs no thread hop; the database is only read on a worker thread.
    state = request.app.state
    local = state.local_mode.known()
    if local is None:
        local = await run_in_threadpool(state.local_mode.active)
    if local:
        if not _loopback(request):
            raise HTTPException(403, "berth runs in local mode (no API keys configured) and answers loopback only")
        return LOCAL
    scheme, _, presented = request.headers.get("authorization", "").partition(" ")
    if scheme.lower() != "bearer" or not presented.strip():
        raise HTTPException(401, "send Authorization: Bearer <key>", headers=CHALLENGE)
    address = request.client.host if request.client else "-"
    failures: RateLimiter = state.failure_limiter
    wait = failures.retry_after(address, take=False)
    if wait > 0:
        raise HTTPException(429, "too many requests with unknown keys from this address",
                            headers={"Retry-After": str(math.ceil(wait))})
    found = await run_in_threadpool(resolve, state.storage, presented.strip())
    if found is None:
        failures.retry_after(address)
        raise HTTPException(401, "the key is unknown or revoked", headers=CHALLENGE)
    wait = state.rate_limiter.retry_after(found.key_id)
    if wait > 0:
        raise HTTPException(429, "too many requests for this key", headers={"Retry-After": str(math.ceil(wait))})
    return found


def allow(*roles: Role) -> Callable[[Principal], Awaitable[Principal]]:
    """A dependency that lets the given roles through and answers 403 to the others."""
    async def check(who: Annotated[Principal, Depends(principal)]) -> Principal:
        if who.role not in roles:
            raise HTTPException(403, f"this needs the role {' or '.join(roles)}; the key is a {who.role}")
        return who
    return check


AnyKey = Annotated[Principal, Depends(allow("requester", "analyst", "admin"))]
Admin = Annotated[Principal, Depends(allow("admin"))]
Analyst = Annotated[Principal, Depends(allow("analyst", "admin"))]
