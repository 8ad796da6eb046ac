"""A refused subscription explains itself twice: an ``error`` message (code, message, the parameter) and
a close whose reason names the parameter, since many client libraries show only the close."""
from __future__ import annotations

import asyncio

import httpx
import orjson
import pytest
import websockets

from tests.support.live_match import setup_body
from tests.support.live_server import LiveServer
from tests.support.match_end import schema_problems

LONG_VIEW = "players:" + ",".join(f"nobody_{i:02d}" for i in range(30))


@pytest.fixture(scope="module")
def live(tmp_path_factory):
    """One server and one match for every refusal below."""
    srv = LiveServer(tmp_path_factory.mktemp("refusals") / "data").start()
    try:
        assert httpx.put(f"{srv.http}/api/matches/m_live", json=setup_body(), timeout=30).status_code == 201
        yield srv
    finally:
        srv.stop()


async def refusal(url: str) -> tuple[dict, websockets.frames.Close]:
    async with websockets.connect(url) as ws:
        msg = orjson.loads(await asyncio.wait_for(ws.recv(), 30))
        with pytest.raises(websockets.ConnectionClosed) as closed:
            await asyncio.wait_for(ws.recv(), 30)
    assert closed.value.rcvd is not None
    return msg, closed.value.rcvd


@pytest.mark.parametrize(("query", "param"), [
    ("every=abc", "every"), ("every=0", "every"), ("every=3600", "every"),
    ("view=team:nowhere", "view"), ("view=seats", "view"), (f"view={LONG_VIEW}", "view"),
    ("since=-1", "since"), ("since=later", "since"),
])
def test_a_bad_parameter_is_named_in_the_error_and_the_close_reason(live, query, param):
    msg, close = asyncio.run(refusal(f"{live.ws}/live/m_live?{query}"))
    assert msg["type"] == "error" and msg["code"] == "bad_request" and msg["param"] == param
    assert schema_problems(msg) == []
    assert close.code == 1008
    # RFC 6455 5.5: a close frame's reason holds at most 123 bytes; it starts with the parameter's name
    assert close.reason.startswith(param) and len(close.reason.encode()) <= 123
    assert close.reason == msg["message"] or close.reason.endswith("\u2026")


def test_an_unknown_match_is_named_in_the_close_reason(live):
    msg, close = asyncio.run(refusal(f"{live.ws}/live/m_nowhere"))
    assert msg["code"] == "unknown_match" and close.code == 1008 and "m_nowhere" in close.reason
