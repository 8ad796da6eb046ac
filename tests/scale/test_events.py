"""The CDF event stream at league scale: real ``redis-server``, real role processes and a single process
beside them. Events go through the same routes, into a Redis Stream per match keyed by id (duplicates and
corrections decided in Redis, so every ingest node agrees), are recorded as event.jsonl by the recorder
and checkpointed by the aggregator; the figures by phase equal the single process's and ``pacewire
analyze``'s over the recorder's folder, also after an aggregator is killed."""
from __future__ import annotations

import asyncio
import contextlib
import io
import time
import warnings
from concurrent.futures import ThreadPoolExecutor

import cdf
import httpx
import orjson
import pytest
import websockets

from pacewire.analyze import analyze_folder
from tests.support import cdf_build as cb, cdf_events as ce
from tests.support.cluster import Cluster, holder
from tests.support.live_match import frames, setup_body
from tests.support.live_server import LiveServer
from tests.support.redis_server import RedisServer, added, require_redis
from tests.support.sockets import recv

require_redis("scale event-stream tests")

CONFIG = "[scale]\nlease_ms = 3000\nwant_ttl_s = 10.0\ncheckpoint_s = 1.0\n"


@pytest.fixture(scope="module")
def league(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("league_ev")
    redis = RedisServer(tmp / "redis").start()
    c = Cluster(tmp, redis, CONFIG)
    try:
        roles = ["ingest", "ingest", "aggregator", "aggregator", "recorder", "gateway"]
        with ThreadPoolExecutor(len(roles) + 1) as pool:
            single = pool.submit(lambda: LiveServer(tmp / "single").start(timeout=180))
            procs = list(pool.map(lambda ir: c.start(ir[1], data=f"{ir[1]}-{ir[0]}"), enumerate(roles)))
            c.single = single.result()
        c.procs.append(c.single)
        c.ingests, c.aggs, c.recorder, c.gateway = procs[:2], procs[2:4], procs[4], procs[5]
        c.redis = redis
        yield c
    finally:
        c.stop()
        redis.stop()


def post(srv: LiveServer, mid: str, what: str, body: bytes) -> httpx.Response:
    return httpx.post(f"{srv.http}/api/matches/{mid}/{what}", content=body, timeout=30)


def lines(objs: list[dict]) -> bytes:
    return b"\n".join(orjson.dumps(o) for o in objs)


def script(mid: str) -> list[dict]:
    """A fictional 40 s: home, then away wins it at 12.2 s, a foul, home restarts, away shoots."""
    E = ce.event
    return [E("k0", 0.0, "pass", sub_type="kick_off", match_id=mid),
            E("p1", 6.0, "pass", player="h3", match_id=mid),
            E("i1", 12.2, "interception", team=cb.AWAY, player="a2", match_id=mid),
            E("p2", 18.0, "pass", team=cb.AWAY, player="a1", match_id=mid),
            E("f1", 21.0, "referee", sub_type="foul", match_id=mid),
            E("r1", 25.0, "pass", sub_type="free_kick", player="h2", match_id=mid),
            E("t1", 30.4, "defending", team=cb.AWAY, player="a1", sub_type="tackle", match_id=mid),
            E("s1", 34.0, "shot", team=cb.AWAY, player="a2", outcome="saved", match_id=mid),
            E("c1", 36.0, "carry", team=cb.AWAY, player="a2", match_id=mid)]


def snapshot(srv: LiveServer, mid: str) -> dict:
    return httpx.get(f"{srv.http}/api/matches/{mid}/snapshot", timeout=10).json()


def phases(snap: dict) -> dict:
    return ({pid: (p["phases"], p["m_per_min_in_play"]) for pid, p in snap["players"].items()},
            {tid: (t["outfield"]["phases"], t["outfield"].get("sequences")) for tid, t in snap["teams"].items()})


def settled(srv: LiveServer, mid: str, n_frames: int, events: int) -> dict:
    for _ in range(300):
        snap = snapshot(srv, mid)
        if (snap["health"]["frames"] == n_frames and snap["health"]["state"] == "stalled"
                and snap["health"].get("events", {}).get("events") == events):
            return snap
        time.sleep(0.1)
    raise AssertionError(f"{srv.http}: {mid} did not settle")


def feed(a: LiveServer, b: LiveServer, mid: str) -> list:
    """Events and frames as a provider sends them: node a, then node b (a duplicate, a correction and a bad
    event among them)."""
    evs = script(mid)
    moved = ce.with_event(evs[2], time=cb.stamp(14.2))  # the regain corrected to 14.2 s
    answers = [post(a, mid, "events", lines(evs[:5])),
               post(a, mid, "frames", b"\n".join(cb.lines(frames(40, match_id=mid)[:500]))),
               post(b, mid, "events", lines([evs[4], *evs[5:], moved, ce.with_event(evs[1], x=99.0)])),
               post(b, mid, "frames", b"\n".join(cb.lines(frames(40, match_id=mid)[500:])))]
    return [(r.status_code, r.json()) for r in answers]


def test_events_through_two_ingest_nodes_equal_the_single_process_and_analyze(league):
    (ing_a, ing_b), gw, single = league.ingests, league.gateway, league.single
    mid = "m_ev_gw"
    for srv in (ing_a, single):
        assert httpx.put(f"{srv.http}/api/matches/{mid}", json=setup_body(mid), timeout=10).status_code == 201
    # claimed before the data comes, so the aggregator reads it live: a match rebuilt from a stream that already
    # holds every frame has no arrival time and never shows its tail finalised as a stalled feed does
    holder(league.aggs, mid)
    got = feed(ing_a, ing_b, mid)
    want = feed(single, single, mid)
    assert got == want  # every answer as the single process gives it
    assert (got[2][1]["duplicates"], got[2][1]["corrections"], got[2][1]["rejected"]) == (1, 1, 1)
    n = 40 * 25
    one = settled(single, mid, n, 9)
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        snap = snapshot(gw, mid)
        if phases(snap) == phases(one):
            break
        time.sleep(0.2)
    assert phases(snap) == phases(one)
    ev = snap["health"]["events"]
    assert (ev["events"], ev["corrections"], ev["duplicates"], ev["rejected"]) == (9, 1, 1, 1)
    assert added(league.redis.port, f"pw:ev:{mid}") == 10  # nine events and one correction
    folder = league.recorder.data / "matches" / mid
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and len((folder / "event.jsonl").read_bytes().splitlines()
                                              if (folder / "event.jsonl").exists() else []) < 10:
        time.sleep(0.1)
    with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("error")
        cdf.EventSchemaValidator().validate_schema(sample=str(folder / "event.jsonl"), mode="extreme", limit=None)
    offline = analyze_folder(folder).snapshot()
    assert phases(offline)[1] == phases(one)[1]


def test_a_killed_aggregator_is_succeeded_with_the_same_phases(league):
    ing, aggs, gw = league.ingests[0], league.aggs, league.gateway
    mid = "m_ev_kill"
    assert httpx.put(f"{ing.http}/api/matches/{mid}", json=setup_body(mid), timeout=10).status_code == 201
    holder(aggs, mid)
    evs = script(mid)
    post(ing, mid, "events", lines(evs[:5]))
    post(ing, mid, "frames", b"\n".join(cb.lines(frames(40, match_id=mid)[:600])))
    first = holder(aggs, mid)
    time.sleep(2.0)  # a checkpoint (every second) holds events by now
    first.kill9()
    post(ing, mid, "events", lines([*evs[5:], ce.with_event(evs[2], time=cb.stamp(14.2))]))
    holder([a for a in aggs if a is not first], mid)  # the successor rebuilds from the checkpoint and the streams
    post(ing, mid, "frames", b"\n".join(cb.lines(frames(40, match_id=mid)[600:])))  # ... and reads on
    folder = league.recorder.data / "matches" / mid
    deadline = time.monotonic() + 60

    def count(name: str) -> int:
        return len((folder / name).read_bytes().splitlines()) if (folder / name).exists() else 0

    while time.monotonic() < deadline and (count("tracking.jsonl"), count("event.jsonl")) != (1000, 10):
        time.sleep(0.2)
    want = analyze_folder(folder).snapshot()  # the recorder's folder: every frame and event version
    while time.monotonic() < deadline:
        snap = snapshot(gw, mid)
        if snap["health"]["frames"] == 1000 and phases(snap)[1] == phases(want)[1]:
            break
        time.sleep(0.3)
    assert phases(snap)[1] == phases(want)[1]
    assert snap["health"]["events"]["corrections"] == 1


def test_the_events_socket_of_an_ingest_node_stores_in_redis_and_answers_each_refusal(league):
    """WS /ingest/{id}/events on an ingest role: one object or an array per message, a duplicate and a bad
    event each answered with its code and event_id, the others in the match's event stream."""
    ing = league.ingests[1]
    mid = "m_ev_ws"
    assert httpx.put(f"{ing.http}/api/matches/{mid}", json=setup_body(mid), timeout=10).status_code == 201
    evs = script(mid)

    async def run() -> list[dict]:
        async with websockets.connect(f"{ing.ws}/ingest/{mid}/events") as ws:
            await ws.send(orjson.dumps(evs[0]).decode())
            await ws.send(orjson.dumps([evs[1], evs[0], ce.with_event(evs[2], player_id="zz"), evs[3]]).decode())
            return [await recv(ws), await recv(ws)]

    errs = asyncio.run(run())
    assert [(e["type"], e["code"], e["event_id"]) for e in errs] == [("error", "unknown_player", "i1"),
                                                                    ("error", "duplicate", "k0")]
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and added(league.redis.port, f"pw:ev:{mid}") != 3:
        time.sleep(0.1)
    assert added(league.redis.port, f"pw:ev:{mid}") == 3  # k0, p1, p2: stored once Redis answered
