"""The integrator kit end to end: message schemas, AsyncAPI document, client, exports.

One real server (with tokens) runs one scenario: frames pushed over the ingest
socket, a raw subscriber recording every message, the Python client following
the same match while the test kills its socket twice (once it resumes with
since, once the resume buffer has moved on and it gets a resync snapshot), bad
input on both sockets, a period end. The tests then check what was recorded.
"""
from __future__ import annotations

import asyncio
import csv
import io
import json
import time
from urllib.parse import parse_qs, urlsplit

import httpx
import jsonschema
import numpy as np
import orjson
import pytest
import websockets

from pacewire.analyze import analyze_folder
from pacewire.client import SubscriptionError, run_until, subscribe, subscribe_sync
from pacewire.reports.export import FIGURE_COLUMNS
from pacewire.wire.schema import json_schemas, strict
from tests.support import cdf_build as cb
from tests.support.live_server import LiveServer
from tests.support.paths import ROOT, TEST_DATA
from tests.support.sockets import recv
from tests.support.trajectories import FPS, sway

ASYNCAPI_SCHEMA = TEST_DATA / "asyncapi-3.0.0.schema.json"
N_HOME, N_AWAY = 4, 3
IDS = cb.player_ids(N_HOME, N_AWAY)
MATCH = "m_kit"
INGEST, VIEW = "feed-fict-1", "look-fict-1"
SECONDS = 14.0  # of play, pushed at twice real time
AUTH = {"Authorization": f"Bearer {VIEW}"}


def trajectory(seconds: float, seed: int = 4) -> np.ndarray:
    """Fictional players running loops at up to ~8 m/s, so HSR and sprints occur."""
    rng = np.random.default_rng(seed)
    n = len(IDS)
    r, w = np.array([(rng.uniform(8, 14), rng.uniform(0.35, 0.6)) for _ in range(n)]).T  # radius m, rad/s
    return sway(seconds, n, np.c_[r, 0.8 * r], np.c_[w, w], centre=np.c_[4.0 * np.arange(n) - 12, np.zeros(n)])


def make_frames(seconds: float = SECONDS) -> list[dict]:
    T = int(seconds * FPS)
    return cb.frames(trajectory(seconds), IDS, N_HOME, match_id=MATCH, status=np.ones(T, bool), poss=np.zeros(T, int))


def validator(schema: dict) -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(schema, format_checker=jsonschema.Draft202012Validator.FORMAT_CHECKER)


def problems(schema: dict, msg: dict) -> list[str]:
    return [f"{'/'.join(map(str, e.absolute_path))}: {e.message[:200]}" for e in validator(schema).iter_errors(msg)]


# -- the scenario ----------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("kit")
    srv = LiveServer(tmp / "data", "--ingest-token", INGEST, "--view-token", VIEW,
                     config_text="[server]\nresume_buffer_s = 1.5\n").start()
    objs = make_frames()
    out: dict = {"srv": srv, "frames": objs, "tmp": tmp, "extra": []}
    try:
        r = httpx.put(f"{srv.http}/api/matches/{MATCH}",
                      json={"meta": cb.meta(MATCH), "sheet": cb.sheet(N_HOME, N_AWAY)},
                      headers={"Authorization": f"Bearer {INGEST}"}, timeout=10)
        assert r.status_code == 201, r.text
        asyncio.run(_scenario(srv, objs, out))
        out["rest"] = httpx.get(f"{srv.http}/api/matches/{MATCH}/snapshot", headers=AUTH, timeout=10).json()
        yield out
    finally:
        srv.stop()


async def _scenario(srv: LiveServer, objs: list[dict], out: dict) -> None:
    extra = out["extra"]
    observed: list[dict] = []
    sub = subscribe(srv.http, MATCH, every=0.4, token=VIEW)
    client_msgs: list[dict] = []
    stalled = asyncio.Event()
    ended = asyncio.Event()

    async def follow() -> None:
        async for msg in sub:
            client_msgs.append(msg)
            if msg["type"] == "health" and msg["health"]["state"] == "stalled" and sub.seq and feeder.done():
                stalled.set()
            if msg["type"] == "period" and msg["event"] == "end":
                ended.set()

    async def observe(ws) -> None:
        while True:
            observed.append(await recv(ws, 30))

    async def feed() -> None:
        async with websockets.connect(f"{srv.ws}/ingest/{MATCH}?token={INGEST}") as ing:
            for i in range(0, len(objs), 5):
                await ing.send(orjson.dumps(objs[i:i + 5]).decode())
                await asyncio.sleep(5 / (2 * FPS))
            await ing.send("{not json")  # an error message on the ingest socket
            extra.append(await recv(ing))
            await ing.send(orjson.dumps(objs[3]).decode())  # a duplicate: an error with its frame_id
            extra.append(await recv(ing))

    async with websockets.connect(f"{srv.ws}/live/{MATCH}?every=0.4", additional_headers=AUTH) as live:
        observed.append(await recv(live))
        follower = asyncio.create_task(follow())
        watcher = asyncio.create_task(observe(live))
        feeder = asyncio.create_task(feed())
        await asyncio.sleep(2.0)
        assert sub.ws is not None
        sub.ws.transport.abort()  # a dropped connection: the client resumes with since
        await asyncio.sleep(1.5)
        sub.reconnect_delay_s = 2.5  # longer than the 1.5 s resume buffer: the next resume is a resync
        assert sub.ws is not None
        sub.ws.transport.abort()
        await feeder
        await asyncio.wait_for(stalled.wait(), 15)
        sub.reconnect_delay_s = 0.25
        await asyncio.sleep(0.3)
        last = observed[-1]
        # a resume within the buffer (messages from since+1, no snapshot) and one past its end (resync)
        async with websockets.connect(f"{srv.ws}/live/{MATCH}?every=0.4&since={last['seq'] - 1}",
                                      additional_headers=AUTH) as ws:
            out["resumed"] = [await recv(ws)]
            assert out["resumed"] == [last]
        async with websockets.connect(f"{srv.ws}/live/{MATCH}?every=0.4&since=999999", additional_headers=AUTH) as ws:
            out["resync"] = await recv(ws)
        async with websockets.connect(f"{srv.ws}/live/{MATCH}?view=team:{cb.AWAY}", additional_headers=AUTH) as ws:
            extra.append(await recv(ws))
        for q in ("every=abc", "view=players:nobody"):
            async with websockets.connect(f"{srv.ws}/live/{MATCH}?{q}", additional_headers=AUTH) as ws:
                extra.append(await recv(ws))
        async with websockets.connect(f"{srv.ws}/live/m_nobody", additional_headers=AUTH) as ws:
            extra.append(await recv(ws))
        r = httpx.post(f"{srv.http}/api/matches/{MATCH}/events", headers={"Authorization": f"Bearer {INGEST}"},
                       json={"type": "period_end", "period": "first_half", "frame_id": objs[-1]["frame_id"]},
                       timeout=10)
        assert r.status_code == 200, r.text
        await asyncio.wait_for(ended.wait(), 15)
        await asyncio.sleep(0.6)  # anything that follows the period end (a delta) arrives too
        for task in (follower, watcher):
            task.cancel()
        await asyncio.gather(follower, watcher, return_exceptions=True)
    assert any(m["type"] == "period" and m["event"] == "end" for m in observed)
    out.update(observed=observed, client=sub, client_msgs=client_msgs)


# -- schemas -------------------------------------------------------------------------------------------------
def test_committed_schema_files_match_the_models():
    want = json_schemas()
    folder = ROOT / "docs" / "schema"
    have = {p.stem: json.loads(p.read_text()) for p in folder.glob("*.json")}
    assert set(have) == set(want), "docs/schema is out of date: run `make schema`"
    for name in want:
        assert have[name] == want[name], f"docs/schema/{name}.json differs from the models: run `make schema`"


def test_schemas_are_2020_12_and_reject_wrong_shapes():
    s = json_schemas()
    for schema in s.values():
        assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
        jsonschema.Draft202012Validator.check_schema(schema)
    env = {"match_id": "m_x", "seq": 3, "match_time_s": 12.0, "period": "first_half", "v": 1}
    alert = {**env, "type": "alert", "rule": "budget_fict", "kind": "load_budget", "player_id": "h2",
             "team_id": cb.HOME, "figure": "hsr_m", "value": 410.5, "limit": 400.0, "level": 0.8,
             "message": "h2: HSR 410 m, 80% of the 500 m budget"}
    report = {**env, "type": "report", "kind": "half_time", "url": "/api/matches/m_x/reports/half_time"}
    for msg in (alert, report):  # the shapes of service/reports/alerts.py and the report builder
        assert problems(s[msg["type"]], msg) == [] and problems(s["message"], msg) == []
    assert problems(s["report"], {**report, "kind": "quarter_time"})
    assert problems(s["alert"], {k: v for k, v in alert.items() if k != "limit"})
    assert problems(s["message"], {**alert, "v": 2}), "another major version is another schema"
    delta = {**env, "type": "delta", "players": {"h2": {"distance_m": "far"}}}
    assert problems(s["delta"], delta)
    assert problems(s["delta"], {**delta, "players": {"h2": {"windows": {"last_1min": {"hsr_m": -1}}}}})
    assert problems(s["delta"], {**delta, "players": {"h2": {"zones": {"0.0-2.0": -3.0}}}})
    assert problems(strict(s["delta"]), {**delta, "players": {"h2": {"zones": {"fast": 3.0}}}})
    assert problems(s["delta"], {**delta, "players": {"h2": {"distance_m": 5.0}}}) == []
    # open for added fields; the strict variant (the tests' check) names them
    added = {**delta, "players": {"h2": {"heart_rate_bpm": 171}}}
    assert problems(s["delta"], added) == []
    assert problems(strict(s["delta"]), added)


def test_every_message_the_server_sends_validates_against_the_served_schema(run):
    srv = run["srv"]
    served = httpx.get(f"{srv.http}/api/schema/messages", timeout=10).json()
    assert served["v"] == 1 and served["schemas"] == json_schemas()
    schemas = served["schemas"]
    msgs = run["observed"] + run["extra"] + run["resumed"] + [run["resync"]] + run["client_msgs"]
    kinds = {m["type"] for m in msgs}
    assert {"snapshot", "delta", "health", "period", "error"} <= kinds
    assert run["resync"]["type"] == "snapshot" and run["resync"]["resync"] is True
    assert all(m["type"] != "snapshot" for m in run["resumed"])
    assert {(m["event"]) for m in msgs if m["type"] == "period"} == {"start", "end"}
    codes = {m["code"] for m in run["extra"] if m["type"] == "error"}
    assert codes >= {"bad_json", "duplicate", "bad_request", "unknown_match"}
    assert any(m.get("frame_id") == 3 for m in run["extra"] if m["type"] == "error")
    deltas = [m for m in msgs if m["type"] == "delta"]
    assert any("players" in d and "teams" in d for d in deltas)
    checks = {k: (("by type", validator(sc)), ("strict", validator(strict(sc)))) for k, sc in schemas.items()}
    union = validator(schemas["message"])  # slow (oneOf over every type): once per type
    seen: set[bytes] = set()
    union_checked: set[str] = set()
    for m in msgs:
        assert m["v"] == 1
        text = orjson.dumps(m)
        if text in seen:  # the client saw the same stream as the raw subscriber
            continue
        seen.add(text)
        todo = list(checks[m["type"]])
        if m["type"] not in union_checked:
            union_checked.add(m["type"])
            todo.append(("any message", union))
        for which, v in todo:
            errors = [f"{'/'.join(map(str, e.absolute_path))}: {e.message[:200]}" for e in v.iter_errors(m)]
            assert errors == [], f"{m['type']} seq {m['seq']} ({which}): {errors[:3]}"
    rest = run["rest"]
    assert problems(strict(schemas["snapshot"]), rest) == []
    assert problems(strict(schemas["snapshot_body"]), {k: rest[k] for k in ("players", "teams", "health")}) == []


def test_schema_routes_serve_the_committed_files(run):
    srv = run["srv"]
    for path in (ROOT / "docs" / "schema").glob("*.json"):
        r = httpx.get(f"{srv.http}/api/schema/messages/{path.name}", timeout=10)
        assert r.status_code == 200 and r.json() == json.loads(path.read_text()), path.name
    assert httpx.get(f"{srv.http}/api/schema/messages/nothing.json", timeout=10).status_code == 404


# -- AsyncAPI --------------------------------------------------------------------------------------------
def test_asyncapi_document_validates_against_the_asyncapi_3_schema(run):
    srv = run["srv"]
    doc = httpx.get(f"{srv.http}/asyncapi.json", timeout=10).json()
    meta = json.loads(ASYNCAPI_SCHEMA.read_text())
    v = jsonschema.Draft7Validator(meta)
    errors = [f"{list(e.absolute_path)}: {e.message[:200]}" for e in v.iter_errors(doc)]
    assert errors == []
    assert doc["asyncapi"] == "3.0.0"
    # the validator does catch a broken document
    for breaks in (lambda d: d["operations"]["sendLive"].update(action="publish"),
                   lambda d: d["info"].pop("title"),
                   lambda d: d["channels"]["live"]["bindings"]["ws"].update(method="PUT"),
                   lambda d: d["components"]["securitySchemes"]["queryToken"].update({"in": "body"})):
        bad = json.loads(json.dumps(doc))
        breaks(bad)
        assert list(v.iter_errors(bad)), breaks
    live, ingest = doc["channels"]["live"], doc["channels"]["ingest"]
    assert live["address"] == "/live/{match_id}" and ingest["address"] == "/ingest/{match_id}"
    assert set(live["bindings"]["ws"]["query"]["properties"]) == {"every", "view", "since", "token"}
    assert "token" in ingest["bindings"]["ws"]["query"]["properties"]
    schemes = doc["components"]["securitySchemes"]
    assert schemes["bearer"]["scheme"] == "bearer"
    assert schemes["queryToken"] == {**schemes["queryToken"], "in": "query", "name": "token"}
    assert doc["servers"]["pacewire"]["host"] == f"127.0.0.1:{srv.port}"
    # every payload reference resolves to the served JSON Schema of that message type
    served = httpx.get(f"{srv.http}/api/schema/messages", timeout=10).json()["schemas"]
    kinds = set()
    for name, m in doc["components"]["messages"].items():
        ref = m["payload"].get("schema", {}).get("$ref")
        if ref is None:
            continue
        assert m["payload"]["schemaFormat"] == "application/schema+json;version=draft-2020-12"
        got = httpx.get(f"{srv.http}{ref}", timeout=10)
        assert got.status_code == 200 and got.json() == served[name], ref
        kinds.add(name)
    assert kinds == {"snapshot", "delta", "health", "period", "status", "alert", "report", "error"}
    # the operations point at messages of their own channels
    for op in doc["operations"].values():
        channel = op["channel"]["$ref"].split("/")[-1]
        for ref in op["messages"]:
            assert ref["$ref"].startswith(f"#/channels/{channel}/messages/")
            assert ref["$ref"].split("/")[-1] in doc["channels"][channel]["messages"]
    # the frame payload accepts the frames this test pushed
    frame_schema = doc["components"]["messages"]["frame"]["payload"]
    for f in run["frames"][:3]:
        jsonschema.Draft7Validator(frame_schema).validate(f)


# -- the client -------------------------------------------------------------------------------------------
def test_client_state_equals_server_snapshot_after_forced_disconnects(run):
    sub, rest = run["client"], run["rest"]
    assert sub.connects >= 3, "two forced disconnects, two reconnects"
    assert sub.resumes >= 1, "a reconnect within the buffer resumed without a snapshot"
    assert sub.resyncs >= 1, "a reconnect past the buffer got a resync snapshot"
    seqs = [m["seq"] for m in run["client_msgs"] if m["type"] != "snapshot"]
    assert len(seqs) == len(set(seqs)), "no message applied twice"
    assert sub.state["players"] == rest["players"]
    assert sub.state["teams"] == rest["teams"]
    for k in ("frames", "rejected", "duplicates", "late", "jumps", "fps_nominal", "coverage"):
        assert sub.state["health"][k] == rest["health"][k], k
    assert rest["health"]["frames"] == len(run["frames"])
    total = sum(p["distance_m"] for p in rest["players"].values())
    assert total > 100 and any(p["hsr_m"] > 0 for p in rest["players"].values())


def test_client_resumes_from_the_last_seq_on_a_gap(tmp_path):
    """A scripted stream with a seq gap: the client reconnects with since=LAST and ends up right."""
    snap = {"type": "snapshot", "match_id": "m_gap", "seq": 5, "match_time_s": 1.0, "period": "first_half", "v": 1,
            "players": {"p1": {"distance_m": 1.0, "windows": {"last_1min": {"distance_m": 1.0}}}}, "teams": {},
            "health": {"state": "ok"}}

    def delta(seq: int, dist: float) -> dict:
        return {**{k: snap[k] for k in ("match_id", "period", "v")}, "type": "delta", "seq": seq,
                "match_time_s": float(seq),
                "players": {"p1": {"distance_m": dist, "windows": {"last_1min": {"distance_m": dist}}}}}

    requests: list[str] = []

    async def handler(ws) -> None:
        requests.append(ws.request.path)
        since = parse_qs(urlsplit(ws.request.path).query).get("since")
        if since is None:
            for m in (snap, delta(6, 2.0), delta(6, 2.0), delta(8, 4.0)):  # a repeat of 6, then 7 is missing
                await ws.send(orjson.dumps(m).decode())
        else:
            for m in (delta(int(since[0]) + 1, 3.0), delta(int(since[0]) + 2, 4.0), delta(9, 5.0)):
                await ws.send(orjson.dumps(m).decode())
        await ws.wait_closed()

    async def main() -> None:
        async with websockets.serve(handler, "127.0.0.1", 0) as server:
            port = server.sockets[0].getsockname()[1]
            got = []
            async with subscribe(f"http://127.0.0.1:{port}", "m_gap", view="players:p1", every=0.5) as sub:
                async for msg in sub:
                    got.append(msg["seq"])
                    if msg["seq"] == 9:
                        break
                ws = sub.ws
            assert ws is not None and ws.state.name == "CLOSED", "leaving the block closes the socket"
            assert got == [5, 6, 7, 8, 9]
            assert sub.gaps == 1 and sub.resumes == 1 and sub.connects == 2
            assert sub.state["players"]["p1"] == {"distance_m": 5.0, "windows": {"last_1min": {"distance_m": 5.0}}}
            assert sub.match_time_s == 9.0

    asyncio.run(asyncio.wait_for(main(), 20))
    assert "since" not in requests[0] and "view=players:p1" in requests[0] and "every=0.5" in requests[0]
    assert parse_qs(urlsplit(requests[1]).query)["since"] == ["6"]


def test_client_refusals_raise(run):
    srv = run["srv"]

    async def first(**kw) -> None:
        async for _ in subscribe(srv.http, **kw):
            break

    with pytest.raises(SubscriptionError) as exc:
        asyncio.run(asyncio.wait_for(first(match_id="m_nobody", token=VIEW), 10))
    assert exc.value.code == "unknown_match"
    with pytest.raises(SubscriptionError) as exc:
        asyncio.run(asyncio.wait_for(first(match_id=MATCH, token="wrong"), 10))
    assert exc.value.code == "unauthorised"
    with pytest.raises(SubscriptionError) as exc:
        asyncio.run(asyncio.wait_for(first(match_id=MATCH, token=VIEW, every=1000), 10))
    assert exc.value.code == "bad_request"


def test_sync_wrapper_and_run_until(run):
    srv, rest = run["srv"], run["rest"]
    with subscribe_sync(srv.http, MATCH, token=VIEW, view=f"team:{cb.HOME}") as sub:
        msg = sub.get(timeout=10)
        assert msg["type"] == "snapshot"
        assert sub.state["players"] == {k: v for k, v in rest["players"].items() if v["team_id"] == cb.HOME}
    state = run_until(srv.http, MATCH, lambda m, s: m["type"] == "snapshot", timeout=10, token=VIEW)
    assert state["players"] == rest["players"]
    with pytest.raises(TimeoutError):
        run_until(srv.http, MATCH, lambda m, s: False, timeout=0.5, token=VIEW)


# -- exports ---------------------------------------------------------------------------------------------
def test_exports_equal_the_snapshot(run):
    srv, rest = run["srv"], run["rest"]
    assert httpx.get(f"{srv.http}/api/matches/{MATCH}/export.json", timeout=10).status_code == 401
    r = httpx.get(f"{srv.http}/api/matches/{MATCH}/export.csv", params={"token": "nope"}, timeout=10)
    assert r.status_code == 401
    body = httpx.get(f"{srv.http}/api/matches/{MATCH}/export.json", headers=AUTH, timeout=10).json()
    assert body["v"] == 1 and body["at"] is None and body["match_time_s"] == rest["match_time_s"]
    rows = body["players"]
    assert [r["player_id"] for r in rows] == IDS  # home first, by shirt number
    for r in rows:
        p = rest["players"][r["player_id"]]
        for c in ("team_id", "jersey_number", "name", "is_goalkeeper", "on_pitch", *FIGURE_COLUMNS):
            assert r[c] == p[c], (r["player_id"], c)
        for band, dist in p["zones"].items():
            assert r[f"zone_{band}_m"] == dist
        for k, w in p["windows"].items():
            if k.startswith("peak_"):
                assert r[f"{k}_distance_m"] == (w["distance_m"] if w else None)
    assert set(body["columns"]) == set(rows[0])
    text = httpx.get(f"{srv.http}/api/matches/{MATCH}/export.csv", params={"token": VIEW}, timeout=10).text
    table = list(csv.DictReader(io.StringIO(text)))
    assert list(table[0]) == body["columns"] and len(table) == len(rows)
    for got, want in zip(table, rows, strict=True):
        for c, v in want.items():
            if v is None:
                assert got[c] == "", c
            elif isinstance(v, bool):
                assert got[c] == ("true" if v else "false"), c
            elif isinstance(v, (int, float)):
                assert float(got[c]) == v, c
            else:
                assert got[c] == v, c


def test_export_at_a_match_time_equals_an_offline_run_to_that_time(run):
    srv, objs, tmp = run["srv"], run["frames"], run["tmp"]
    at = 6.5
    body = httpx.get(f"{srv.http}/api/matches/{MATCH}/export.json", params={"at": at}, headers=AUTH, timeout=30).json()
    assert body["at"] == at and body["match_time_s"] == pytest.approx(at, abs=1 / FPS)
    cut = [f for f in objs if f["frame_id"] / FPS <= at + 1e-9]
    offline = analyze_folder(cb.write_folder(tmp / "cut", cb.meta(MATCH), cb.sheet(N_HOME, N_AWAY), cut)).snapshot()
    full = run["rest"]
    for r in body["players"]:
        p = offline["players"][r["player_id"]]
        for c in FIGURE_COLUMNS:
            if c != "speed_ms":  # a finished recording shows no current speed
                assert r[c] == p[c], (r["player_id"], c)
        assert r["distance_m"] < full["players"][r["player_id"]]["distance_m"]
    assert httpx.get(f"{srv.http}/api/matches/{MATCH}/export.csv", params={"at": "soon"}, headers=AUTH,
                     timeout=10).status_code == 422
    t0 = time.monotonic()
    assert httpx.get(f"{srv.http}/healthz", timeout=10).status_code == 200 and time.monotonic() - t0 < 2


def test_analyze_json_prints_a_snapshot_message_of_the_schema(tmp_path, capsysbinary):
    from pacewire.cli import main

    folder = cb.write_folder(tmp_path / "rec", cb.meta(MATCH), cb.sheet(N_HOME, N_AWAY), make_frames(4.0))
    assert main(["analyze", str(folder), "--json"]) == 0
    msg = orjson.loads(capsysbinary.readouterr().out)
    assert problems(strict(json_schemas()["snapshot"]), msg) == []
