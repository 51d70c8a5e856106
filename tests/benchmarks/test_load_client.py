"""The benchmarks' HTTP/1.1 client reads bodies framed by Content-Length on a keep-alive connection,
refuses anything else by name, and sends every quote a different body."""

import asyncio
import json

import pytest
from bench_quotes import CAMPAIGN, ProtocolError, encode_request, exchange, quote_bodies

LENGTH_FRAMED = b"HTTP/1.1 201 Created\r\ncontent-type: application/json\r\ncontent-length: 10\r\n\r\n{\"id\":\"q\"}"
CHUNKED = b"HTTP/1.1 200 OK\r\ntransfer-encoding: chunked\r\n\r\n2\r\nok\r\n0\r\n\r\n"
CLOSING = b"HTTP/1.1 200 OK\r\nconnection: close\r\ncontent-length: 2\r\n\r\nok"


async def answer_with(canned: bytes, request: bytes, times: int = 1) -> list[tuple[int, bytes, bool]]:
    """Send `request` `times` on one connection to a server that answers each with `canned`."""
    received: list[bytes] = []

    async def serve(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        for _ in range(times):
            received.append(await reader.readexactly(len(request)))
            writer.write(canned)
            await writer.drain()
        writer.close()

    server = await asyncio.start_server(serve, "127.0.0.1", 0)
    port = server.sockets[0].getsockname()[1]
    reader, writer = await asyncio.open_connection("127.0.0.1", port)
    try:
        return [await asyncio.wait_for(exchange(reader, writer, request), 5.0) for _ in range(times)]
    finally:
        writer.close()
        server.close()
        await server.wait_closed()
        assert received == [request] * len(received)


@pytest.mark.anyio
async def test_bodies_framed_by_content_length_are_read_on_one_kept_alive_connection() -> None:
    request = encode_request("POST", "/v1/quotes", "127.0.0.1:1", b"{}")
    assert await answer_with(LENGTH_FRAMED, request, times=3) == [(201, b'{"id":"q"}', False)] * 3


@pytest.mark.anyio
async def test_a_chunked_body_is_refused_by_name() -> None:
    with pytest.raises(ProtocolError, match="Transfer-Encoding 'chunked'"):
        await answer_with(CHUNKED, encode_request("GET", "/healthz", "127.0.0.1:1"))


@pytest.mark.anyio
async def test_a_server_closing_the_connection_is_noticed() -> None:
    assert await answer_with(CLOSING, encode_request("GET", "/healthz", "127.0.0.1:1")) == [(200, b"ok", True)]


def test_every_quote_body_differs_and_only_in_the_tokens() -> None:
    campaign = json.loads(CAMPAIGN.read_text(encoding="utf-8"))
    bodies = [json.loads(body) for body in quote_bodies(campaign, 0, 50)]
    assert len({body["campaign"]["work"]["tokens"] for body in bodies}) == 50
    for body in bodies:
        body["campaign"]["work"]["tokens"] = campaign["campaign"]["work"]["tokens"]
        assert body == campaign
