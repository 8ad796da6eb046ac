"""How a match ends in the Redis deployment: the same status, health and refusals as the single process,
through real ingest, aggregator and gateway processes over a real Redis; the end survives the
aggregator's death; frames resent through another ingest node count as resent."""
from __future__ import annotations

import asyncio

import httpx
import orjson
import pytest
import websockets

from tests.support.cluster import CONFIG as SCALE_CONFIG, Cluster, holder
from tests.support.live_match import frames, setup_body
from tests.support.match_end import CONFIG, Follower, half, post_event, post_frames, schema_problems, status_is
from tests.support.redis_server import require_redis

require_redis("scale tests")
MID = "m_end"


@pytest.fixture
def cluster(tmp_path, redis):
    c = Cluster(tmp_path, redis, config=SCALE_CONFIG + CONFIG)
    yield c
    c.stop()


def get(url: str) -> dict:
    return httpx.get(url, timeout=30).json()


def test_the_match_ends_and_stays_ended_in_the_redis_deployment(cluster):
    ing, ing2 = cluster.start("ingest"), cluster.start("ingest")
    aggs = [cluster.start("aggregator"), cluster.start("aggregator")]
    gw = cluster.start("gateway")
    assert httpx.put(f"{ing.http}/api/matches/{MID}", json=setup_body(MID), timeout=30).status_code == 201
    out: dict = {}

    async def run() -> None:
        first, second = half("first_half", MID), half("second_half", MID, seed=1)
        await asyncio.to_thread(holder, aggs, MID)
        async with Follower(f"{gw.ws}/live/{MID}?every=0.5") as f:
            assert (await asyncio.to_thread(post_frames, ing.http, MID, first)).status_code == 200
            # another ingest node, which never saw these frames, is told they were sent before
            r = await asyncio.to_thread(post_frames, ing2.http, MID, first[:100])
            out["resent"] = r.json()
            await f.until(status_is("break"), 90)
            assert (await asyncio.to_thread(post_frames, ing.http, MID, second)).status_code == 200
            await f.until(status_is("ended"), 90)
            await asyncio.sleep(2.5)  # the gateway's REST copy is written once a second
            out["listed"] = await asyncio.to_thread(get, f"{gw.http}/api/matches")
            out["feed"] = await asyncio.to_thread(get, f"{ing.http}/api/matches/{MID}/feed")
            late = frames(2, match_id=MID, period="second_half", t0=2 * 62 + 905.0, frame0=2 * len(first))
            out["post_after_end"] = await asyncio.to_thread(post_frames, ing2.http, MID, late[:30])
            async with websockets.connect(f"{ing.ws}/ingest/{MID}") as ws:
                await ws.send(orjson.dumps(late[30:40]).decode())
                out["ws_after_end"] = orjson.loads(await asyncio.wait_for(ws.recv(), 30))
            await asyncio.sleep(2.5)
            out["ended"] = await asyncio.to_thread(get, f"{gw.http}/api/matches/{MID}/snapshot")
            # the aggregator dies: its successor rebuilds the match from Redis, still ended
            (await asyncio.to_thread(holder, aggs, MID)).kill9()
            await asyncio.sleep(1.0)
            out["post_to_successor"] = await asyncio.to_thread(post_frames, ing.http, MID, late[:5])
            await asyncio.to_thread(holder, [a for a in aggs if a.proc and a.proc.poll() is None], MID, 60)
            await asyncio.sleep(2.5)
            out["rebuilt"] = await asyncio.to_thread(get, f"{gw.http}/api/matches/{MID}/snapshot")
            # a period_start event reopens it: the frames are taken
            mark = len(f.msgs)
            ev = {"type": "period_start", "period": "second_half", "frame_id": late[0]["frame_id"]}
            assert (await asyncio.to_thread(post_event, ing.http, MID, ev)).status_code == 200
            out["reopened"] = await asyncio.to_thread(post_frames, ing.http, MID, late)
            out["late"] = len(late)
            await f.until(status_is("live"), 60, after=mark)
            out["msgs"] = list(f.msgs)
        async with websockets.connect(f"{gw.ws}/live/{MID}?every=nope") as ws:
            out["refusal"] = orjson.loads(await ws.recv())
            try:
                await ws.recv()
            except websockets.ConnectionClosed as exc:
                out["close"] = exc.rcvd

    asyncio.run(run())
    assert out["resent"]["resent"] == 100 and out["resent"]["late"] == 0
    statuses = [(m["match_status"], m["cause"]) for m in out["msgs"] if m["type"] == "status"]
    assert statuses[:4] == [("live", "frames"), ("break", "timeout"), ("live", "frames"), ("ended", "timeout")]
    assert statuses[-1][0] == "live"
    listed = next(m for m in out["listed"]["matches"] if m["match_id"] == MID)
    assert listed["status"] == "ended" and listed["health"] == "finished"
    assert out["feed"]["match_status"] == "ended" and out["feed"]["last_frame_id"] == 2 * 62 * 25 - 1
    r = out["post_after_end"]
    assert r.status_code == 409 and r.json()["error"]["code"] == "match_ended" and r.json()["error"]["after_end"] == 30
    assert out["ws_after_end"]["code"] == "match_ended"
    snap = out["ended"]
    assert snap["match_status"] == "ended" and snap["health"]["state"] == "finished"
    assert snap["health"]["after_end"] == 40 and snap["health"]["resent"] == 100
    assert not any(p["on_pitch"] for p in snap["players"].values())
    assert out["post_to_successor"].status_code == 409
    rebuilt = out["rebuilt"]
    assert rebuilt["match_status"] == "ended" and rebuilt["health"]["state"] == "finished"
    assert out["reopened"].status_code == 200 and out["reopened"].json()["accepted"] == out["late"]
    # the refused subscription names its parameter in the close reason too
    assert out["refusal"]["param"] == "every" and out["close"].code == 1008 and "every" in out["close"].reason
    for m in out["msgs"]:
        assert schema_problems(m) == [], (m["type"], m["seq"])
