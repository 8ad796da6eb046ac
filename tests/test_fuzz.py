"""Garbage into every input of a real server, while a good match streams beside it.

Hypothesis generates the garbage (over 10,000 cases across the tests of this
module). The server must never crash or leak tasks, each bad input gets a
clear error naming what is wrong, and the good match's figures equal those
of a clean offline pass over the same frames.
"""
from __future__ import annotations

import asyncio
import re
import threading
import time

import httpx
import numpy as np
import orjson
import pytest
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st
from websockets.sync.client import connect

import cdf_build as cb
from live_server import LiveServer
from service.analyze import analyze_folder
from service.config import ConfigError, settings_from_dict, load_settings

FPS = 25
IDS = cb.player_ids(3, 2)
SLOW = [HealthCheck.too_slow, HealthCheck.function_scoped_fixture]

json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-2**63, 2**63 - 1) | st.floats(allow_nan=False) | st.text(max_size=10),
    lambda c: st.lists(c, max_size=4) | st.dictionaries(st.text(max_size=10), c, max_size=5),
    max_leaves=25,
)


class World:
    """One server; a good match fed in the background; a junk match for garbage."""

    def __init__(self, tmp) -> None:
        self.srv = LiveServer(tmp / "data").start()
        for mid in ("m_good", "m_junk"):
            r = httpx.put(f"{self.srv.http}/api/matches/{mid}", json={"meta": cb.meta(mid), "sheet": cb.sheet(3, 2)}, timeout=10)
            assert r.status_code == 201
        T = 90 * FPS
        t = np.arange(T) / FPS
        xy = np.zeros((T, 5, 2))
        for p in range(5):
            xy[:, p, 0] = 20 * np.sin(0.2 * t + p)
            xy[:, p, 1] = 12 * np.cos(0.27 * t + 2 * p)
        self.good = cb.frames(xy, IDS, 3, match_id="m_good")
        self.junk_frames = cb.frames(xy[:200], IDS, 3, match_id="m_junk")
        self.feeder = threading.Thread(target=self._feed, daemon=True)
        self.feeder.start()
        self.http = httpx.Client(base_url=self.srv.http, timeout=10)

    def _feed(self) -> None:
        async def run():
            import websockets
            async with websockets.connect(f"{self.srv.ws}/ingest/m_good") as ws:
                for i in range(0, len(self.good), 10):
                    await ws.send(orjson.dumps(self.good[i:i + 10]).decode())
                    await asyncio.sleep(0.05)
        asyncio.run(run())

    def tasks(self) -> float:
        m = self.http.get("/metrics").text
        return float(re.search(r"^pacewire_asyncio_tasks (\S+)$", m, re.M).group(1))


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    w = World(tmp_path_factory.mktemp("fuzz"))
    w.tasks_before = w.tasks()
    yield w
    w.http.close()
    w.srv.stop()


def _mutate(frame: dict, path: list, value):
    f = orjson.loads(orjson.dumps(frame))
    node = f
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = value
    return f


PATHS = [["frame_id"], ["timestamp"], ["period"], ["match"], ["match", "id"], ["teams"], ["teams", "home"],
         ["teams", "home", "id"], ["teams", "home", "players"], ["teams", "home", "players", 0],
         ["teams", "home", "players", 0, "x"], ["teams", "home", "players", 0, "id"], ["ball"], ["ball", "status"],
         ["ball", "poss_team_id"]]


@hsettings(max_examples=3000, deadline=None, suppress_health_check=SLOW)
@given(data=st.data())
def test_ws_frames(world, data):
    kind = data.draw(st.integers(0, 2))
    if kind == 0:
        msg = orjson.dumps(data.draw(json_values))
    elif kind == 1:
        base = world.junk_frames[data.draw(st.integers(0, len(world.junk_frames) - 1))]
        msg = orjson.dumps(_mutate(base, data.draw(st.sampled_from(PATHS)), data.draw(json_values)))
    else:
        msg = data.draw(st.binary(max_size=120))
    ws = getattr(world, "junk_ws", None)
    if ws is None:
        ws = world.junk_ws = connect(f"{world.srv.ws}/ingest/m_junk").__enter__()
    try:
        ws.send(msg.decode("utf-8", "replace"))
        ws.send('{"frame_id": -424242}')  # a marker: exactly one known error comes back for it
        while True:
            reply = orjson.loads(ws.recv(timeout=10))
            assert reply["type"] == "error" and reply["code"] and reply["message"]
            if reply.get("frame_id") == -424242:
                break
    except Exception:
        world.junk_ws = None
        raise


@hsettings(max_examples=2000, deadline=None, suppress_health_check=SLOW)
@given(body=st.one_of(st.binary(max_size=300), json_values.map(orjson.dumps)))
def test_http_frames(world, body):
    r = world.http.post("/api/matches/m_junk/frames", content=body)
    assert r.status_code in (200, 413), r.text
    out = r.json()
    if r.status_code == 200:
        assert out["accepted"] + out["rejected"] + out["duplicates"] + out["late"] >= 0
        for e in out["errors"]:
            assert e["code"] and e["message"]


@hsettings(max_examples=1500, deadline=None, suppress_health_check=SLOW)
@given(mid=st.text(st.characters(min_codepoint=33, max_codepoint=126, exclude_characters="/?#%\\"), min_size=1, max_size=70),
       body=st.one_of(json_values, st.fixed_dictionaries({"meta": json_values, "sheet": json_values})))
def test_setup(world, mid, body):
    r = world.http.put(f"/api/matches/{mid}", content=orjson.dumps(body))
    assert r.status_code in (400, 404, 405, 422), (mid, r.status_code, r.text)
    if r.status_code in (400, 422) and r.headers.get("content-type", "").startswith("application/json"):
        detail = r.json()
        assert "error" in detail or "detail" in detail


@hsettings(max_examples=1500, deadline=None, suppress_health_check=SLOW)
@given(events=st.one_of(json_values, st.fixed_dictionaries(
    {"type": st.sampled_from(["goal", "card", "substitution", "period_end", "period_start", "x"])},
    optional={"frame_id": json_values, "match_time_s": json_values, "team_id": json_values,
              "player_id": json_values, "player_off": json_values, "player_on": json_values,
              "period": json_values, "card": json_values})))
def test_events(world, events):
    r = world.http.post("/api/matches/m_junk/events", content=orjson.dumps(events))
    assert r.status_code in (200, 422), r.text
    if r.status_code == 422:
        assert r.json()["error"]["message"]


@hsettings(max_examples=500, deadline=None, suppress_health_check=SLOW)
@given(every=st.one_of(st.text(max_size=6), st.floats(allow_nan=True).map(str)),
       view=st.text(max_size=20), since=st.text(max_size=6))
def test_live_query_parameters(world, every, view, since):
    params = httpx.QueryParams({"every": every, "view": view, "since": since})
    with connect(f"{world.srv.ws}/live/m_junk?{params}") as ws:
        msg = orjson.loads(ws.recv(timeout=10))
        assert msg["type"] in ("snapshot", "error")
        if msg["type"] == "error":
            assert msg["code"] == "bad_request" and msg["message"]


config_values = st.one_of(json_values, st.floats(), st.integers(-10**6, 10**6), st.text(max_size=5))


@hsettings(max_examples=2000, deadline=None)
@given(section=st.sampled_from(["speed", "kinematics", "efforts", "metabolic", "zones", "windows", "health",
                                "server", "decode", "periods"]),
       key=st.text(max_size=20), value=config_values)
def test_config_values(section, key, value):
    base = load_settings()
    keys = list(type(getattr(base, section)).model_fields)
    key = keys[hash(key) % len(keys)] if key else key or "nonsense"
    try:
        settings_from_dict({**{k: v for k, v in base.model_dump().items() if k != "extra"},
                            section: {**getattr(base, section).model_dump(), key: value}})
    except ConfigError as exc:
        assert section in str(exc)


def test_good_match_unchanged_and_nothing_leaked(world):
    # runs last in this module (pytest keeps file order)
    world.feeder.join(timeout=120)
    time.sleep(3.0)
    assert world.srv.proc.poll() is None, "the server died"
    got = world.http.get("/api/matches/m_good/snapshot").json()
    want = analyze_folder(world.srv.data / "matches" / "m_good").snapshot()
    assert got["health"]["frames"] == len(world.good)
    for pid in IDS:
        assert got["players"][pid]["distance_m"] == want["players"][pid]["distance_m"]
        assert got["players"][pid]["accels"] == want["players"][pid]["accels"]
    if getattr(world, "junk_ws", None) is not None:
        world.junk_ws.close()
    time.sleep(1.0)
    assert world.tasks() <= world.tasks_before + 5, "tasks grew: something leaks"
