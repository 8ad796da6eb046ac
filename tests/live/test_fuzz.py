"""Garbage into every input of a real server, while a good match streams beside it.

Hypothesis generates the garbage (over 10,000 cases across the tests of this
module). The server must never crash or leak tasks, each bad input gets a
clear error naming what is wrong, and the good match's figures equal those
of a clean offline pass over the same frames.
"""
from __future__ import annotations

import asyncio
import itertools
import json
import math
import re
import threading
import time

import httpx
import orjson
import pytest
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st
from websockets.sync.client import connect

from pacewire.analyze import analyze_folder
from pacewire.config import ConfigError, load_settings, settings_from_dict
from pacewire.wire.rules import RulesError, load_budgets, load_rules
from tests.support import cdf_build as cb
from tests.support.live_server import LiveServer
from tests.support.sockets import stream
from tests.support.trajectories import sway

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
            r = httpx.put(f"{self.srv.http}/api/matches/{mid}", json={"meta": cb.meta(mid), "sheet": cb.sheet(3, 2)},
                          timeout=10)
            assert r.status_code == 201
        xy = sway(90, 5, (20.0, 12.0), (0.2, 0.27), y_turn=2)
        self.good = cb.frames(xy, IDS, 3, match_id="m_good")
        self.junk_frames = cb.frames(xy[:200], IDS, 3, match_id="m_junk")
        self.feeder = threading.Thread(target=self._feed, daemon=True)
        self.feeder.start()
        self.http = httpx.Client(base_url=self.srv.http, timeout=10)

    def _feed(self) -> None:
        asyncio.run(stream(f"{self.srv.ws}/ingest/m_good", self.good, rate=200, batch=10))  # 10 frames every 50 ms

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
@given(mid=st.text(st.characters(min_codepoint=33, max_codepoint=126, exclude_characters="/?#%\\"),
                   min_size=1, max_size=70),
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


# -- load budgets over HTTP, alert-rule and budget files through the config loader ----------------------
# Caps and their bounds, (low, high]: service/wire/rules.py `Caps` (the contract of PUT .../budgets)
CAPS = {"minutes": (0, 150), "hsr_m": (0, 10_000), "sprint_m": (0, 10_000), "sprints": (0, 500)}
_n = itertools.count()


def _cap(key: str) -> st.SearchStrategy:
    lo, hi = CAPS[key]
    if key == "sprints":
        return st.integers(lo + 1, hi)
    return st.floats(lo, hi, exclude_min=True, allow_nan=False)


good_caps = st.fixed_dictionaries({}, optional={k: _cap(k) for k in CAPS}).filter(bool)
good_budgets = st.dictionaries(st.sampled_from(IDS), good_caps, max_size=5).map(lambda p: {"players": p})
# integers within 64 bits, as in json_values: orjson (the test's encoder) writes no wider integer
INT64 = st.integers(-2**63, 2**63 - 1)
not_numbers = st.one_of(st.text(max_size=8).map(lambda t: "x" + t), st.lists(INT64, max_size=2),
                        st.dictionaries(st.text(max_size=3), INT64, max_size=2))


@st.composite
def broken_budgets(draw, sheet: bool = True) -> tuple[object, str]:
    """A good body with one fault; returns (body, text the error must name)."""
    body = draw(good_budgets)
    if not body["players"]:
        body["players"][draw(st.sampled_from(IDS))] = draw(good_caps)
    pid = draw(st.sampled_from(sorted(body["players"])))
    caps = body["players"][pid]
    key = draw(st.sampled_from(sorted(CAPS)))
    lo, hi = CAPS[key]
    faults = ["negative", "huge", "wrong_type", "unknown_cap", "no_caps", "players_shape", "no_players",
              "extra_key", "not_object"]
    faults += (["unknown_player"] if sheet else []) + (["fraction"] if key == "sprints" else [])
    fault = draw(st.sampled_from(faults))
    if fault == "negative":
        caps[key] = draw(st.one_of(st.floats(max_value=lo, allow_nan=False, allow_infinity=False),
                                   st.integers(-(2**63), lo)))
        return body, f"players.{pid}.{key}"
    if fault == "huge":
        # orjson writes 64-bit ints
        caps[key] = draw(st.one_of(st.floats(hi, 1e308, exclude_min=True), st.integers(hi + 1, 2**63 - 1)))
        return body, f"players.{pid}.{key}"
    if fault == "wrong_type":
        caps[key] = draw(not_numbers)
        return body, f"players.{pid}.{key}"
    if fault == "fraction":
        caps[key] = draw(st.integers(0, hi - 1)) + 0.5
        return body, f"players.{pid}.{key}"
    if fault == "unknown_cap":
        name = draw(st.text(max_size=10).filter(lambda t: t not in CAPS))
        caps[name] = draw(json_values)
        return body, f"players.{pid}.{name}"
    if fault == "no_caps":
        body["players"][pid] = {}
        return body, f"players.{pid}"
    if fault == "unknown_player":
        other = draw(st.from_regex(r"\A[a-z0-9_]{1,12}\Z").filter(lambda t: t not in IDS))
        body["players"][other] = dict(caps)
        return body, f"players.{other}: not in the match sheet"
    if fault == "players_shape":
        body["players"] = draw(st.one_of(st.lists(json_values, max_size=3), INT64, st.text(max_size=5),
                                         st.none(), st.booleans()))
        return body, "players"
    if fault == "no_players":
        return {}, "players"
    if fault == "extra_key":
        name = draw(st.text(min_size=1, max_size=10).filter(lambda t: t != "players"))
        body[name] = draw(json_values)
        return body, name
    return draw(st.one_of(st.lists(json_values, max_size=3), INT64, st.text(max_size=5), st.none())), "body"


def _put_budgets(world, content: bytes) -> httpx.Response:
    r = world.http.put("/api/matches/m_junk/budgets", content=content)
    assert r.status_code < 500, r.text
    return r


@hsettings(max_examples=300, deadline=None, suppress_health_check=SLOW)
@given(case=st.one_of(
    good_budgets.map(lambda b: ("good", b, "")),
    broken_budgets().map(lambda bn: ("bad", bn[0], bn[1])),
    json_values.map(lambda v: ("any", v, "")),
    st.binary(max_size=60).filter(lambda b: not _is_json(b)).map(lambda b: ("not_json", b, "")),
))
def test_budgets_put(world, case):
    kind, body, needle = case
    if not hasattr(world, "budgets_now"):
        world.budgets_now = world.http.get("/api/matches/m_junk/budgets").json()["players"]
    r = _put_budgets(world, body if kind == "not_json" else orjson.dumps(body))
    if kind == "good" or (kind == "any" and r.status_code == 200):
        assert r.status_code == 200, r.text
        world.budgets_now = r.json()["players"]
        if kind == "good":
            assert world.budgets_now == body["players"]  # every cap kept, as sent
    else:
        err = r.json()["error"]
        want = 400 if kind == "not_json" else 422
        assert r.status_code == want and err["code"] == ("bad_json" if want == 400 else "bad_budgets"), r.text
        assert needle in err["message"], (needle, err["message"])
    # a refused body changes nothing: the budgets accepted last are still the match's budgets
    assert world.http.get("/api/matches/m_junk/budgets").json()["players"] == world.budgets_now


def _is_json(b: bytes) -> bool:
    try:
        orjson.loads(b)
        return True
    except orjson.JSONDecodeError:
        return False


def _toml(v) -> str:
    """A TOML value (inline tables and arrays; None is left out, as TOML has no null)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return "nan" if v != v else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(v, list):
        return "[" + ", ".join(_toml(x) for x in v if x is not None) + "]"
    return "{" + ", ".join(f"{_toml(str(k))} = {_toml(x)}" for k, x in v.items() if x is not None) + "}"


def _write(folder, data, fmt: str):
    """``data`` as a TOML or JSON file (bytes are written as they are)."""
    path = folder / f"f{next(_n)}.{fmt}"
    if isinstance(data, bytes):
        path.write_bytes(data)
    elif fmt == "json":
        path.write_text(json.dumps(data))
    else:
        path.write_text("".join(f"{_toml(k)} = {_toml(v)}\n" for k, v in data.items() if v is not None))
    return path


def _through_config(folder, key: str, path, needle: str) -> None:
    """Load ``path`` as the config's ``alerts.{key}``: it loads, or a ConfigError names the key,
    the file and ``needle``; nothing else may come out."""
    cfg = folder / f"c{next(_n)}.toml"
    cfg.write_text(f"[alerts]\n{key} = {json.dumps(str(path))}\n")
    try:
        load_settings(cfg)
    except ConfigError as exc:
        msg = str(exc)
        assert "alerts" in msg and str(path) in msg and needle in msg, (needle, msg)


rule_ids = st.from_regex(r"\A[a-z0-9_]{1,12}\Z")
_drop_off = {"figure": st.sampled_from(["distance", "hsr"]), "window_min": st.integers(1, 30),
             "min_on_pitch_min": st.floats(0, 150), "min_coverage": st.floats(0, 1)}
# Valid rules per kind: service/wire/rules.py (DropOffPeak, DropOffBaseline, LoadBudget)
good_rule = st.one_of(
    st.fixed_dictionaries({"kind": st.just("drop_off_peak"), **_drop_off, "share": st.floats(0, 1, exclude_min=True,
                                                                                               exclude_max=True)},
                          optional={"goalkeepers": st.booleans()}),
    st.fixed_dictionaries({"kind": st.just("drop_off_baseline"), **_drop_off,
                           "spreads": st.floats(0, 5, exclude_min=True), "min_matches": st.integers(1, 50)}),
    st.fixed_dictionaries({"kind": st.just("load_budget"),
                           "levels": st.lists(st.floats(0, 2, exclude_min=True), min_size=1, max_size=5,
                                              unique=True).map(sorted)}),
)


@st.composite
def rules_files(draw) -> tuple[object, str]:
    """(rules file content, text an error must name): good rules, one field broken, or garbage."""
    kind = draw(st.sampled_from(["good", "field", "field", "garbage"]))
    if kind == "garbage":
        return draw(st.one_of(st.binary(max_size=80), st.text(max_size=80).map(str.encode),
                              st.integers(1, 3000).map(lambda n: b"rules = " + b"[" * n),
                              st.integers(1, 3000).map(lambda n: b'{"rules": ' + b"[" * n + b"]" * n + b"}"))), ""
    ids = draw(st.lists(rule_ids, min_size=1, max_size=4, unique=True))
    rules = [{"id": i, **draw(good_rule)} for i in ids]
    if kind == "good":
        return {"rules": rules}, ""
    k = draw(st.integers(0, len(rules) - 1))
    field = draw(st.one_of(st.sampled_from(sorted(rules[k])), st.text(max_size=10)))
    if draw(st.booleans()):
        rules[k][field] = draw(json_values)
    else:
        rules[k].pop(field, None)
    return {"rules": rules}, f"rules.{k}"


@hsettings(max_examples=200, deadline=None)
@given(content=rules_files(), fmt=st.sampled_from(["toml", "json"]))
def test_rule_files(files, content, fmt):
    data, needle = content
    path = _write(files, data, fmt)
    try:
        load_rules(path)
    except RulesError as exc:
        msg = str(exc)
        assert str(path) in msg, msg
        # a broken field names its rule (rules.K...), or the rule ids when one became a duplicate
        assert needle in msg or "rule ids must be unique" in msg, (needle, msg)
        needle = needle if needle in msg else "rule ids must be unique"
    _through_config(files, "rules_file", path, needle)


@hsettings(max_examples=100, deadline=None)
@given(content=st.one_of(good_budgets.map(lambda b: (b, "")), broken_budgets(sheet=False),
                         st.binary(max_size=60).map(lambda b: (b, ""))),
       fmt=st.sampled_from(["toml", "json"]))
def test_budget_files(files, content, fmt):
    data, needle = content
    if not isinstance(data, (dict, bytes)):
        data = {"players": data}  # a file is a table: a bad top level becomes a bad players value
        needle = "players"
    path = _write(files, data, fmt)
    try:
        load_budgets(path)
    except RulesError as exc:
        assert str(path) in str(exc) and needle in str(exc), (needle, str(exc))
    _through_config(files, "budgets_file", path, needle)


@hsettings(max_examples=100, deadline=None)
@given(key=st.sampled_from(["rules_file", "budgets_file"]), value=json_values)
def test_rule_and_budget_file_keys(key, value):
    base = load_settings()
    data = {k: v for k, v in base.model_dump().items() if k != "extra"}
    data["alerts"] = {**data["alerts"], key: value}
    try:
        settings_from_dict(data)
    except ConfigError as exc:
        assert f"alerts.{key}" in str(exc) or f"{key.split('_')[0]} file" in str(exc), str(exc)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    return tmp_path_factory.mktemp("rule-files")


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
