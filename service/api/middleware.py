"""ASGI middleware: request ids, body-size limits and time limits, each answering with an RFC 9457
problem of its own, and HEAD answered as GET. Pure ASGI (no BaseHTTPMiddleware) so streaming
responses pass through."""

import asyncio
import contextvars
import json
import logging
import time
import uuid
from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any

from service.storage.gate import COMMIT_GATE, CommitGate

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

REQUEST_ID = contextvars.ContextVar("request_id", default="-")
log = logging.getLogger("berth.http")


async def send_problem(send: Send, status: int, title: str, detail: str,
                       headers: list[tuple[bytes, bytes]] | None = None) -> None:
    body = json.dumps({"type": f"/problems/{title.lower().replace(' ', '-')}", "title": title, "status": status,
                       "detail": detail}).encode("utf-8")
    await send({"type": "http.response.start", "status": status, "headers": [
        (b"content-type", b"application/problem+json"), (b"content-length", str(len(body)).encode()),
        *(headers or [])]})
    await send({"type": "http.response.body", "body": body})


class RequestContext:
    """Gives every request an id (the caller's X-Request-ID, or a new one), echoes it in the
    response, and logs one structured line per request."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        given = dict(scope.get("headers", [])).get(b"x-request-id", b"").decode("latin-1")
        request_id = given if 0 < len(given) <= 128 and given.isprintable() else uuid.uuid4().hex
        token = REQUEST_ID.set(request_id)
        started = time.perf_counter()
        status = [500]
        responding = [False]

        async def send_with_id(message: Message) -> None:
            if message["type"] == "http.response.start":
                status[0] = message["status"]
                responding[0] = True
                message["headers"] = [*message.get("headers", []), (b"x-request-id", request_id.encode("latin-1"))]
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        except Exception:
            # Caught here, inside the request's context, rather than by Starlette's outermost handler:
            # the log line and the answer carry the request id, and the exception stops here, so the
            # server keeps the connection instead of resetting it.
            log.exception("unhandled error on %s %s", scope["method"], scope["path"])
            from service.api.observability import domain_metrics  # it imports REQUEST_ID from here

            domain_metrics().errors.labels(type="internal-error").inc()
            if responding[0]:
                raise  # a streamed body broke off: the connection cannot carry a problem any more
            await send_problem(send_with_id, 500, "Internal error",
                               "the service failed to answer; the error was logged")
        finally:
            log.info("request", extra={"method": scope["method"], "path": scope["path"], "status": status[0],
                                       "duration_ms": round((time.perf_counter() - started) * 1000, 2)})
            REQUEST_ID.reset(token)


SOCKET_PEER = "berth.socket_peer"


class SocketPeer:
    """Keeps the address of the socket's other end in the scope, before any proxy header rewrites
    `client`: local mode judges that, and only that."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] in ("http", "websocket"):
            scope[SOCKET_PEER] = scope.get("client")
        await self.app(scope, receive, send)


class HeadAsGet:
    """Answers HEAD as the same GET without its body: the same status and header fields, Content-Length
    included (RFC 9110 §9.3.2, which also says every general-purpose server supports HEAD)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] != "HEAD":
            await self.app(scope, receive, send)
            return

        async def without_body(message: Message) -> None:
            if message["type"] == "http.response.body":
                if message.get("more_body", False):
                    return  # a streamed body's parts are dropped; its end is sent, empty
                message = {"type": "http.response.body", "body": b""}
            await send(message)

        await self.app({**scope, "method": "GET"}, receive, without_body)


class BodyLimit:
    """Refuses request bodies over `limit` bytes with 413, by Content-Length when it is given and
    by counting otherwise, before the application reads more than the limit."""

    def __init__(self, app: ASGIApp, *, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers", [])).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await send_problem(send, 413, "Payload too large", f"request bodies are limited to {self.limit:,} bytes")
            return
        seen = 0
        refused = False

        async def counting_receive() -> Message:
            nonlocal seen, refused
            if refused:
                return {"type": "http.disconnect"}
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    # Answer now, while the application is still reading, and tell it the client left.
                    refused = True
                    await send_problem(send, 413, "Payload too large",
                                       f"request bodies are limited to {self.limit:,} bytes")
                    return {"type": "http.disconnect"}
            return message

        async def guarded_send(message: Message) -> None:
            if not refused:
                await send(message)

        try:
            await self.app(scope, counting_receive, guarded_send)
        except Exception:
            if not refused:
                raise  # after a refusal the application only learns the client left: nothing to report


class TimeLimit:
    """Answers 503 when a request has not started its response within `seconds`. A streaming
    response that has started may run on (a large CSV takes as long as it takes). One task and one
    timer per request: the application runs in the task, and whichever comes first of the response
    starting, the task ending and the timer firing decides. The request's `CommitGate` makes the 503
    and a stored write exclusive: after the 503 nothing commits, and once what the request creates
    has committed, the caller waits for the answer naming it instead of getting a 503."""

    def __init__(self, app: ASGIApp, *, seconds: float) -> None:
        self.app = app
        self.seconds = seconds

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        loop = asyncio.get_running_loop()
        decided: asyncio.Future[None] = loop.create_future()
        started = timed_out = False

        def decide(_: object = None) -> None:
            if not decided.done():
                decided.set_result(None)

        async def guarded_send(message: Message) -> None:
            nonlocal started
            if timed_out:
                return  # the caller already has its 503
            if message["type"] == "http.response.start":
                started = True
                decide()
            await send(message)

        gate = CommitGate()
        token = COMMIT_GATE.set(gate)  # copied into the task, and from it into worker threads
        try:
            task = asyncio.ensure_future(self.app(scope, receive, guarded_send))
        finally:
            COMMIT_GATE.reset(token)
        task.add_done_callback(decide)
        timer = loop.call_later(self.seconds, decide)
        try:
            await decided
        except asyncio.CancelledError:
            task.cancel()  # the server gave up on this request: so does the application
            raise
        finally:
            timer.cancel()
        if not started and not task.done() and gate.expire():
            timed_out = True
            task.cancel()
            await send_problem(send, 503, "Timed out", f"the request took longer than {self.seconds:g} s; "
                               "large what-ifs belong in a background sweep", headers=[(b"retry-after", b"5")])
            return
        await task
