"""The heart-rate channel at league scale (docs/wearables.md over Redis roles).

Real ``redis-server``, real ``pacewire serve --role ...`` processes and a real
single process beside them for comparison; nothing is mocked. Expected values
come from the single process and from ``pacewire analyze`` over the same data
(docs/architecture.md: the engine is the same in every path, so live, replay and
offline give identical numbers).
"""
from __future__ import annotations

import asyncio
import time

import httpx
import numpy as np
import orjson
import pytest
import websockets

from pacewire.analyze import analyze_folder
from pacewire.engine.stateio import from_npz
from pacewire.scale.aggregator import CHECKPOINT_CLASSES
from tests.support import cdf_build as cb
from tests.support.cluster import Cluster, holder
from tests.support.live_server import LiveServer
from tests.support.redis_server import RedisServer, added, cli, require_redis
from tests.support.sockets import collect, replay_state
from tests.support.wearables import hr_figures, hr_samples, jog, one_team_frames, send_hr, wearable_meta, wearable_sheet

require_redis("scale heart-rate tests")

# checkpoints every second, so an aggregator killed mid-stream leaves one holding heart-rate state
CONFIG = "[scale]\nlease_ms = 3000\nwant_ttl_s = 10.0\ncheckpoint_s = 1.0\n"
PLAYERS = ("h1", "h2", "h3")


@pytest.fixture(scope="module")
def league(tmp_path_factory):
    """Redis, two ingest nodes, two aggregators (one stands by), a recorder, a gateway, and a
    single process beside them for comparison."""
    from concurrent.futures import ThreadPoolExecutor

    tmp = tmp_path_factory.mktemp("league_hr")
    redis = RedisServer(tmp / "redis").start()
    c = Cluster(tmp, redis, CONFIG)
    try:
        roles = ["ingest", "ingest", "aggregator", "aggregator", "recorder", "gateway"]
        with ThreadPoolExecutor(len(roles) + 1) as pool:  # start together: each is a Python start-up
            single = pool.submit(lambda: LiveServer(tmp / "single").start(timeout=180))
            procs = list(pool.map(lambda ir: c.start(ir[1], data=f"{ir[1]}-{ir[0]}"), enumerate(roles)))
            c.single = single.result()
        c.procs.append(c.single)
        c.ingests, c.aggs, c.recorder, c.gateway = procs[:2], procs[2:4], procs[4], procs[5]
        yield c
    finally:
        c.stop()
        redis.stop()


def setup(srv: LiveServer, mid: str) -> None:
    r = httpx.put(f"{srv.http}/api/matches/{mid}", json={"meta": wearable_meta(mid, gnss=False),
                                                          "sheet": wearable_sheet(3)}, timeout=10)
    assert r.status_code == 201, r.text


def heart_rates(secs: int, seed: int) -> list[dict]:
    """1 Hz samples of h1..h3 wandering around 130 bpm, in timestamp order (fictional straps)."""
    rng = np.random.default_rng(seed)
    hr = []
    for pid in PLAYERS:
        hr += hr_samples(pid, (130 + 10 * np.sin(np.arange(secs) / 9) + rng.normal(0, 1, secs)).round())
    return sorted(hr, key=lambda s: s["timestamp"])


def post(srv: LiveServer, mid: str, what: str, objs: list[dict] | bytes) -> httpx.Response:
    body = objs if isinstance(objs, bytes) else b"\n".join(cb.lines(objs))
    return httpx.post(f"{srv.http}/api/matches/{mid}/{what}", content=body, timeout=30)


def settled(srv: LiveServer, mid: str, frames: int) -> dict:
    """The single process's snapshot once every frame is applied and the feed has stalled."""
    for _ in range(200):  # bounded: the stall comes 3 s after the last frame (config/default.toml)
        snap = httpx.get(f"{srv.http}/api/matches/{mid}/snapshot", timeout=10).json()
        if snap["health"]["frames"] == frames and snap["health"]["state"] == "stalled":
            return snap
        time.sleep(0.1)
    raise AssertionError(f"{mid}: the single process did not settle")


def test_hr_through_ingest_reaches_gateway_and_equals_analyze_and_single_process(league):
    (ing_a, ing_b), gw, single = league.ingests, league.gateway, league.single
    mid = "m_hr_gw"
    secs = 40
    frames = one_team_frames(jog(secs), gnss=False, match_id=mid)
    hr = heart_rates(secs, seed=5)
    early = [s for s in hr if s["timestamp"] < cb.stamp(20)]
    late = [s for s in hr if s["timestamp"] >= cb.stamp(20)]
    bad = [{"player_id": "h1", "timestamp": cb.stamp(0.5), "bpm": 250},  # implausible_bpm (> 230, docs/wearables.md)
           {"player_id": "h2", "timestamp": cb.stamp(0.5), "bpm": 190},  # hr_jump: +60 bpm in 0.5 s (docs/wearables.md)
           {"player_id": "h1", "timestamp": cb.stamp(0.0), "bpm": 130},  # duplicate of h1's first sample
           {"player_id": "h3", "timestamp": "yesterday", "bpm": 100},  # bad_timestamp
           {"player_id": "x9", "timestamp": cb.stamp(0.7), "bpm": 100}]  # unknown_player
    ws_messages = ([orjson.dumps(early[-1])]  # sent to node A over HTTP before: node B must call it a duplicate
                   + [orjson.dumps(late[i:i + 7]) for i in range(0, len(late), 7)]
                   + [b"{not json", orjson.dumps([{"player_id": "h2", "bpm": 120}])])
    half = len(frames) // 2

    def feed(a: LiveServer, b: LiveServer) -> tuple[dict, list]:
        """Heart rate and frames as a provider sends them: node a over HTTP, node b over its sockets."""
        answers = {"hr": post(a, mid, "hr", early[:3] + bad + early[3:])}
        answers["frames1"] = post(a, mid, "frames", frames[:half])
        errs = asyncio.run(send_hr(f"{b.ws}/ingest/{mid}/hr", ws_messages))
        answers["frames2"] = post(b, mid, "frames", frames[half:])
        return {k: (r.status_code, r.json()) for k, r in answers.items()}, [(e["code"], e["message"]) for e in errs]

    setup(ing_a, mid)
    setup(single, mid)

    async def run() -> tuple[list[str], tuple]:
        texts: list[str] = []
        fed = asyncio.Event()
        done = lambda m: m["type"] == "health" and m["health"]["state"] == "stalled" and fed.is_set()  # noqa: E731
        sub = asyncio.create_task(collect(f"{gw.ws}/live/{mid}?every=0.5", texts, done, 60))
        await asyncio.sleep(1.5)  # subscribed before the first sample
        got = await asyncio.to_thread(feed, ing_a, ing_b)
        fed.set()
        await sub
        return texts, got

    texts, (scale_answers, scale_ws) = asyncio.run(run())
    single_answers, single_ws = feed(single, single)
    # every answer, code and message as the single process gives them
    assert scale_answers == single_answers
    assert scale_ws == single_ws
    assert scale_answers["hr"][1]["accepted"] == len(early)
    assert [c for c, _ in scale_ws] == ["duplicate", "bad_json", "missing_field", "unknown_player"]

    state, _ = replay_state(texts)  # asserts the seq never skips
    assert any(m["type"] == "delta" and any("hr_bpm" in p for p in m.get("players", {}).values())
               for m in map(orjson.loads, texts)), "deltas carried heart-rate figures"
    one = settled(single, mid, len(frames))
    h = state["health"]
    assert (h["hr_rejected"], h["hr_duplicates"], h["hr_late"]) == (
        one["health"]["hr_rejected"], one["health"]["hr_duplicates"], one["health"]["hr_late"])
    assert hr_figures(state) == hr_figures(one)
    assert state["players"]["h1"]["hr_mean_bpm"] is not None
    # the recorder's folder holds the single process's hr.jsonl byte for byte; analyze over it agrees
    folder = league.recorder.data / "matches" / mid
    want = (single.data / "matches" / mid / "hr.jsonl").read_bytes()
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and not ((folder / "hr.jsonl").exists()
                                               and (folder / "hr.jsonl").read_bytes() == want):
        time.sleep(0.1)
    assert (folder / "hr.jsonl").read_bytes() == want
    assert len(want.splitlines()) == len(hr)
    assert hr_figures(state) == hr_figures(analyze_folder(folder).snapshot())
    rest = httpx.get(f"{gw.http}/api/matches/{mid}/snapshot", timeout=10).json()
    assert rest["players"]["h2"]["trimp_edwards"] == one["players"]["h2"]["trimp_edwards"]


def test_hr_gate_continues_across_ingest_nodes_and_redis_down_refuses(league, tmp_path):
    redis = RedisServer(tmp_path / "redis").start()
    c = Cluster(tmp_path, redis, CONFIG)
    try:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(2) as pool:
            a, b = pool.map(lambda i: c.start("ingest", data=f"ingest-{i}"), range(2))
        single, mid = league.single, "m_hr_gate"
        setup(a, mid)
        setup(single, mid)
        s = lambda t, bpm: {"player_id": "h1", "timestamp": cb.stamp(t), "bpm": bpm}  # noqa: E731
        # 4 Hz; a jump of 124 bpm is refused 3 times in a row, then accepted (docs/wearables.md), the
        # refusals and the acceptance split over two nodes; then a duplicate and a late sample
        steps = [(a, [s(0, 100), s(0.25, 101)]), (a, [s(0.5, 225)]), (b, [s(0.75, 225)]), (a, [s(1.0, 225)]),
                 (b, [s(1.25, 225), s(1.5, 226)]), (a, [s(1.5, 226), s(0.25, 101)])]
        answers = []
        for node, samples in steps:
            got, want = post(node, mid, "hr", samples), post(single, mid, "hr", samples)
            assert (got.status_code, got.json()) == (want.status_code, want.json())
            answers.append([e["code"] for e in got.json()["errors"]])
        assert answers == [[], ["hr_jump"], ["hr_jump"], ["hr_jump"], [], ["duplicate", "late"]]
        assert cli(redis.port, "XLEN", f"pw:hr:{mid}") == "4"  # 2 + the accepted jump and the next (by the steps)
        counts = [cli(redis.port, "HGET", f"pw:counts:{mid}", k) for k in ("hr_rejected", "hr_duplicates", "hr_late")]
        assert counts == ["3", "1", "1"]

        nxt = [s(1.75, 227)]
        redis.stop()
        r = post(a, mid, "hr", nxt)  # within the client's timeout: a clear answer, not a hang
        assert r.status_code == 503 and r.json()["error"]["code"] == "not_stored", r.text
        r = post(a, "m_never_seen", "hr", nxt)
        assert r.status_code == 503 and r.json()["error"]["code"] == "not_stored"

        async def ws_error() -> dict:
            async with websockets.connect(f"{b.ws}/ingest/{mid}/hr") as ws:
                await ws.send(orjson.dumps(nxt[0]).decode())
                return orjson.loads(await asyncio.wait_for(ws.recv(), 15))

        msg = asyncio.run(ws_error())
        assert msg["type"] == "error" and msg["code"] == "not_stored"

        redis.start()  # same port and folder (AOF): nothing acknowledged was lost
        deadline = time.monotonic() + 10
        while (r := post(a, mid, "hr", nxt)).status_code != 200 and time.monotonic() < deadline:
            time.sleep(0.2)
        # the refused sample was forgotten by the gate: sent again, it is accepted once
        assert r.status_code == 200 and r.json()["accepted"] == 1, r.text
        assert post(b, mid, "hr", nxt).json()["duplicates"] == 1
        assert cli(redis.port, "XLEN", f"pw:hr:{mid}") == "5"
    finally:
        c.stop()
        redis.stop()


def test_aggregator_sigkill_mid_stream_loses_no_heart_rate_sample(league):
    ing, aggs, gw = league.ingests[0], league.aggs, league.gateway  # one aggregator works, one stands by
    mid = "m_hr_kill"
    secs = 16
    frames = one_team_frames(jog(secs), gnss=False, match_id=mid)
    hr = heart_rates(secs, seed=8)
    setup(ing, mid)

    async def provider() -> None:
        """Frames and heart rate at twice real time on two sockets, as a wearable system sends them."""
        async with websockets.connect(f"{ing.ws}/ingest/{mid}") as fws:
            async with websockets.connect(f"{ing.ws}/ingest/{mid}/hr") as hws:
                for sec in range(secs):
                    for i in range(sec * 25, (sec + 1) * 25, 5):
                        await fws.send(orjson.dumps(frames[i:i + 5]).decode())
                    now = [x for x in hr if cb.stamp(sec) <= x["timestamp"] < cb.stamp(sec + 1)]
                    await hws.send(orjson.dumps(now).decode())
                    await asyncio.sleep(0.5)
        # every sample answered before the feed ends: a marker's refusal comes after all of them
        assert [e["code"] for e in await send_hr(f"{ing.ws}/ingest/{mid}/hr", [])] == ["unknown_player"]

    async def run() -> list[str]:
        import redis as redis_py

        texts: list[str] = []
        first = await asyncio.to_thread(holder, aggs, mid)
        feeder = asyncio.create_task(provider())
        done = lambda m: m["type"] == "health" and m["health"]["state"] == "stalled" and feeder.done()  # noqa: E731
        sub = asyncio.create_task(collect(f"{gw.ws}/live/{mid}?every=0.2", texts, done, 90))
        await asyncio.sleep(3.5)
        cp = redis_py.Redis(host="127.0.0.1", port=league.redis.port).get(f"pw:checkpoint:{mid}")
        assert cp is not None, "a checkpoint was written"
        assert from_npz(cp, CHECKPOINT_CLASSES)["hr_last_id"] != b"0-0", "the checkpoint holds heart-rate state"
        first.kill9()  # mid-match: frames and samples keep arriving at ingest
        assert not feeder.done()
        second = await asyncio.to_thread(holder, aggs, mid)  # claims the match once the lease expires
        assert second is not first
        await asyncio.gather(feeder, sub)
        return texts

    texts = asyncio.run(run())
    state, _ = replay_state(texts)  # asserts no seq gap
    assert state["health"]["frames"] == len(frames)
    assert added(league.redis.port, f"pw:hr:{mid}") == len(hr)  # each sample once (trimming aside)
    # behind the checkpoints and the recorder, the streams were trimmed: Redis holds the tail only
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and int(cli(league.redis.port, "XLEN", f"pw:frames:{mid}")) >= len(frames):
        time.sleep(0.2)
    assert int(cli(league.redis.port, "XLEN", f"pw:frames:{mid}")) < len(frames)
    # the successor's figures equal an offline pass over exactly what was sent
    folder = cb.write_folder(league.tmp / "sent_hr", wearable_meta(mid, gnss=False), wearable_sheet(3), frames)
    (folder / "hr.jsonl").write_bytes(b"".join(line + b"\n" for line in cb.lines(hr)))
    offline = analyze_folder(folder).snapshot()
    assert hr_figures(state) == hr_figures(offline)
    for pid in PLAYERS:
        assert state["players"][pid]["hr_coverage"] == offline["players"][pid]["hr_coverage"], pid
