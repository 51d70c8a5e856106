"""The HTTP connection itself: a client that opens a connection and stalls before its request's
headers are complete is cut off after `BERTH_HEADER_TIMEOUT_SECONDS`. uvicorn arms no timer until a
first response has been sent, so 2,000 stalled connections used to hold 2,000 descriptors for ever
(and with 1,024 the probes failed). Keep-alive idleness after a response stays uvicorn's own timer."""

import asyncio
import functools
import resource

from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol

from service.config import Settings


@functools.cache
def header_timeout_seconds() -> float:
    return Settings().header_timeout_seconds


class HeaderTimeoutProtocol(HttpToolsProtocol):
    """uvicorn's httptools protocol with a deadline on each request's headers."""

    _header_timer: asyncio.TimerHandle | None = None

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._arm_header_timer()

    def on_message_begin(self) -> None:
        super().on_message_begin()
        if self._header_timer is None:
            self._arm_header_timer()

    def on_headers_complete(self) -> None:
        self._disarm_header_timer()
        super().on_headers_complete()

    def connection_lost(self, exc: Exception | None) -> None:
        self._disarm_header_timer()
        super().connection_lost(exc)

    def _arm_header_timer(self) -> None:
        self._header_timer = self.loop.call_later(header_timeout_seconds(), self._headers_too_slow)

    def _disarm_header_timer(self) -> None:
        if self._header_timer is not None:
            self._header_timer.cancel()
            self._header_timer = None

    def _headers_too_slow(self) -> None:
        self._header_timer = None
        if not self.transport.is_closing():
            self.transport.close()


def raise_open_file_limit() -> tuple[int, int]:
    """Lift the soft limit on open files to the hard one (every connection holds a descriptor); the
    limits as they are afterwards."""
    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    if soft != hard:
        try:
            resource.setrlimit(resource.RLIMIT_NOFILE, (hard, hard))
        except (ValueError, OSError):
            return soft, hard
    return resource.getrlimit(resource.RLIMIT_NOFILE)
