"""Scale-out over a real Redis: ingest → stream → aggregator → pub/sub → gateways (README, "Running
at league scale").

Every test starts its own ``redis-server`` on a free loopback port and real
``pacewire serve --role ...`` processes; nothing is mocked.
"""
from __future__ import annotations

import asyncio
import time

import httpx
import orjson
import pytest
import websockets

from pacewire.analyze import analyze_folder
from tests.support import cdf_build as cb
from tests.support.cluster import Cluster, holder
from tests.support.live_match import IDS, frames, setup_body
from tests.support.live_server import LiveServer
from tests.support.redis_server import RedisServer, added, require_redis
from tests.support.sockets import collect, replay_state, stream
from tests.support.trajectories import FPS

require_redis("scale tests")


@pytest.fixture
def cluster(tmp_path, redis):
    c = Cluster(tmp_path, redis)
    yield c
    c.stop()


@pytest.fixture(scope="module")
def league(tmp_path_factory):
    """One deployment shared by the tests below (each uses its own match): Redis, an ingest node,
    two aggregators (one stands by), a recorder and two gateways."""
    tmp = tmp_path_factory.mktemp("league")
    redis = RedisServer(tmp / "redis").start()
    c = Cluster(tmp, redis)
    try:
        from concurrent.futures import ThreadPoolExecutor

        roles = [("ingest", None), ("aggregator", None), ("aggregator", None), ("recorder", "recorder"),
                 ("gateway", None), ("gateway", None)]
        with ThreadPoolExecutor(len(roles)) as pool:  # start together: each is a Python start-up
            procs = list(pool.map(lambda rd: c.start(rd[0], data=rd[1] or f"{rd[0]}-{id(rd)}"), roles))
        c.ingest, c.aggs, c.recorder, c.gateways = procs[0], procs[1:3], procs[3], procs[4:]
        yield c
    finally:
        c.stop()
        redis.stop()


def put(srv: LiveServer, match_id: str = "m_live") -> httpx.Response:
    return httpx.put(f"{srv.http}/api/matches/{match_id}", json=setup_body(match_id), timeout=10)


def stalled_after(feeder: asyncio.Task):
    return lambda m: m["type"] == "health" and m["health"]["state"] == "stalled" and feeder.done()


def assert_equal_offline(state: dict, folder) -> None:
    offline = analyze_folder(folder).snapshot()
    for pid in IDS:
        assert state["players"][pid]["distance_m"] == pytest.approx(offline["players"][pid]["distance_m"], abs=0.05)
        assert state["players"][pid]["hsr_m"] == offline["players"][pid]["hsr_m"]
        assert state["players"][pid]["accels"] == offline["players"][pid]["accels"]
    assert state["teams"][cb.HOME]["outfield"]["distance_m"] == pytest.approx(
        offline["teams"][cb.HOME]["outfield"]["distance_m"], abs=0.2)


def test_two_gateways_same_bytes_and_figures_equal_single_process(league, tmp_path):
    ing, rec, (gw1, gw2) = league.ingest, league.recorder, league.gateways
    mid = "m_two"
    assert put(ing, mid).status_code == 201
    objs = frames(12, match_id=mid)

    async def run():
        a: list[str] = []
        b: list[str] = []
        feeder = asyncio.Event()
        done = lambda m: m["type"] == "health" and m["health"]["state"] == "stalled" and feeder.is_set()  # noqa: E731
        ta = asyncio.create_task(collect(f"{gw1.ws}/live/{mid}?every=0.2", a, done))
        tb = asyncio.create_task(collect(f"{gw2.ws}/live/{mid}?every=0.2", b, done))
        await asyncio.sleep(1.5)  # both subscribed before the first frame
        await stream(f"{ing.ws}/ingest/{mid}", objs, rate=100, batch=5)
        feeder.set()
        await asyncio.gather(ta, tb)
        return a, b

    a, b = asyncio.run(run())
    by_seq_a = {orjson.loads(t)["seq"]: t for t in a[1:]}
    by_seq_b = {orjson.loads(t)["seq"]: t for t in b[1:]}
    common = sorted(set(by_seq_a) & set(by_seq_b))
    assert len(common) >= 10, "both gateways carried the match"
    assert all(by_seq_a[s] == by_seq_b[s] for s in common), "same seq, same bytes on both gateways"
    state_a, seqs_a = replay_state(a)
    state_b, _ = replay_state(b)
    assert {orjson.loads(t)["type"] for t in a} >= {"snapshot", "delta", "period", "health"}
    assert state_a == state_b
    assert state_a["health"]["frames"] == len(objs)
    # the recorder's CDF folder holds every frame once; figures equal the offline pass over it
    folder = rec.data / "matches" / mid
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and len((folder / "tracking.jsonl").read_bytes().splitlines()) < len(objs):
        time.sleep(0.1)
    assert (folder / "tracking.jsonl").read_bytes().splitlines() == cb.lines(objs)
    assert_equal_offline(state_a, folder)
    # and equal the single process fed the same frames (its own recording)
    single = LiveServer(tmp_path / "single").start()
    try:
        assert put(single, mid).status_code == 201
        r = httpx.post(f"{single.http}/api/matches/{mid}/frames", content=b"\n".join(cb.lines(objs)), timeout=30)
        assert r.json()["accepted"] == len(objs)
        time.sleep(3.0)  # stall: the tail is finalised as live
        one = httpx.get(f"{single.http}/api/matches/{mid}/snapshot", timeout=10).json()
    finally:
        single.stop()
    rest = httpx.get(f"{gw1.http}/api/matches/{mid}/snapshot", timeout=10).json()
    for pid in IDS:
        for k in ("distance_m", "hsr_m", "sprint_m", "accels", "decels", "energy_jkg", "max_speed_ms"):
            assert rest["players"][pid][k] == one["players"][pid][k], (pid, k)
            assert state_a["players"][pid][k] == one["players"][pid][k], (pid, k)
    listing = {m["match_id"]: m for m in httpx.get(f"{gw2.http}/api/matches", timeout=10).json()["matches"]}
    assert listing[mid]["frames"] == len(objs)


def test_aggregator_sigkill_loses_no_frame_and_no_seq(league):
    ing, aggs, gw = league.ingest, league.aggs, league.gateways[1]  # one aggregator works, one stands by
    mid = "m_kill"
    assert put(ing, mid).status_code == 201
    objs = frames(16, match_id=mid)

    async def run():
        texts: list[str] = []
        first = await asyncio.to_thread(holder, aggs, mid)
        feeder = asyncio.create_task(stream(f"{ing.ws}/ingest/{mid}", objs, rate=50, batch=2))
        sub = asyncio.create_task(collect(f"{gw.ws}/live/{mid}?every=0.2", texts, stalled_after(feeder), 90))
        await asyncio.sleep(3.0)
        first.kill9()  # mid-match: frames keep arriving at ingest
        assert not feeder.done()
        second = await asyncio.to_thread(holder, aggs, mid)  # claims the match once the lease expires
        assert second is not first
        await asyncio.gather(feeder, sub)
        return texts

    texts = asyncio.run(run())
    state, seqs = replay_state(texts)  # asserts no seq gap
    assert seqs == list(range(seqs[0], seqs[0] + len(seqs)))
    assert state["health"]["frames"] == len(objs), "no frame lost, none applied twice"
    assert added(league.redis.port, f"pw:frames:{mid}") == len(objs)
    # the successor's figures equal an offline pass over exactly the frames sent
    folder = cb.write_folder(league.tmp / "sent", cb.meta(mid), cb.sheet(3, 2), objs)
    assert_equal_offline(state, folder)


def test_gateway_restart_clients_resume_with_since(league):
    ing, gw = league.ingest, league.gateways[0]
    mid = "m_gw"
    assert put(ing, mid).status_code == 201
    objs = frames(14, match_id=mid)

    async def run():
        feeder = asyncio.create_task(stream(f"{ing.ws}/ingest/{mid}", objs, rate=FPS))
        async with websockets.connect(f"{gw.ws}/live/{mid}?every=0.2") as live:
            first = orjson.loads(await asyncio.wait_for(live.recv(), 20))
            assert first["type"] == "snapshot"
            got = [orjson.loads(await asyncio.wait_for(live.recv(), 10)) for _ in range(5)]
        last = got[-1]["seq"]
        await asyncio.to_thread(gw.stop)
        await asyncio.sleep(0.5)  # messages go on while this gateway is away
        await asyncio.to_thread(gw.start)  # same port
        async with websockets.connect(f"{gw.ws}/live/{mid}?every=0.2&since={last}") as live:
            resumed = [orjson.loads(await asyncio.wait_for(live.recv(), 10)) for _ in range(4)]
        assert resumed[0]["type"] != "snapshot" and resumed[0]["seq"] == last + 1
        assert [m["seq"] for m in resumed] == [last + 1, last + 2, last + 3, last + 4]
        # a since the stream never reached is a resync snapshot, as in the single process
        async with websockets.connect(f"{gw.ws}/live/{mid}?every=0.2&since=99999") as live:
            m = orjson.loads(await asyncio.wait_for(live.recv(), 10))
            assert m["type"] == "snapshot" and m["resync"] is True and set(m["players"]) == set(IDS)
        await feeder

    asyncio.run(run())


def test_redis_down_ingest_refuses_then_recovers(cluster):
    ing = cluster.start("ingest")
    ing2 = cluster.start("ingest")
    assert put(ing).status_code == 201
    objs = frames(6)
    first, second, third, fourth = objs[:50], objs[50:75], objs[75:100], objs[100:]
    url = f"{ing.http}/api/matches/m_live/frames"
    r = httpx.post(url, content=b"\n".join(cb.lines(first)), timeout=30)
    assert r.status_code == 200 and r.json()["accepted"] == len(first)
    # another ingest node takes the next frames; the first node, which never saw them, is
    # sent them too: its own checks pass them, Redis itself refuses them
    r = httpx.post(f"{ing2.http}/api/matches/m_live/frames", content=b"\n".join(cb.lines(second)), timeout=30)
    assert r.status_code == 200 and r.json()["accepted"] == len(second)
    r = httpx.post(url, content=b"\n".join(cb.lines(second)), timeout=30)
    assert r.status_code == 200 and r.json()["accepted"] == 0 and r.json()["duplicates"] == len(second)
    second = third

    cluster.redis.stop()
    t0 = time.monotonic()
    r = httpx.post(url, content=b"\n".join(cb.lines(second)), timeout=30)
    assert r.status_code == 503 and r.json()["error"]["code"] == "not_stored"
    assert time.monotonic() - t0 < 10, "a clear answer, not a hang"

    async def ws_errors():
        async with websockets.connect(f"{ing.ws}/ingest/m_live") as ws:
            await ws.send(orjson.dumps(second[0]).decode())
            return orjson.loads(await asyncio.wait_for(ws.recv(), 15))

    msg = asyncio.run(ws_errors())
    assert msg["type"] == "error" and msg["code"] == "not_stored"

    cluster.redis.start()  # same port, same folder (AOF): nothing acknowledged was lost
    deadline = time.monotonic() + 10
    while True:
        r = httpx.post(url, content=b"\n".join(cb.lines(second)), timeout=30)
        if r.status_code == 200 or time.monotonic() > deadline:
            break
        time.sleep(0.2)
    assert r.status_code == 200 and r.json()["accepted"] == len(second), r.text
    r = httpx.post(f"{ing2.http}/api/matches/m_live/frames", content=b"\n".join(cb.lines(fourth)), timeout=30)
    assert r.status_code == 200 and r.json()["accepted"] == len(fourth)
    assert added(cluster.redis.port, "pw:frames:m_live") == len(objs)
