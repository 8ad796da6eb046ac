"""Scale-out over Redis on this machine (issue 7): 1 ingest + 1 aggregator + 2 gateways.

N fictional matches (bench_live's 22-player synthetic match, one copy per
match id) stream at 25 Hz real time, one CDF frame per message, from one
provider process to the ingest node. Subscriber processes hold sockets spread
over both gateways: per match one ``every=0.04`` subscriber (a delta per
frame: its latency is the delivery latency of a frame) and the rest at
``every=1.0`` (fan-out). Latency of frame F = arrival of the first delta whose
``match_time_s`` covers F minus the send time of F (``time.monotonic()`` is one
clock for every process here), so it is end to end: provider → ingest → Redis
Stream → aggregator → Redis pub/sub → gateway → socket.

Figures per case: frames/s the aggregator applied over the window (baseline:
N × 25, the offered rate; ratio 1.0 = kept up), p99 latency, and CPU per role
(cores, from /proc/PID/stat utime+stime). The matches one aggregator core can
carry is estimated from the aggregator's CPU per match between the two cases
(marginal cost; the fixed part is what it uses at the smaller case beyond
that). On a shared machine the other load is printed: a starved case waits
for a CPU, not only for pacewire.

    python tests/bench/bench_scale.py [--quick]
"""
from __future__ import annotations

import asyncio
import multiprocessing as mp
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_HERE = Path(__file__).resolve().parent
for _p in (_HERE, _HERE.parent):
    if str(_p) not in sys.path:
        sys.path.insert(0, str(_p))

from bench_live import FPS, MATCH, feed_lines, setup_body  # noqa: E402
from live_server import LiveServer  # noqa: E402
from redis_server import RedisServer, redis_available  # noqa: E402

CTX = mp.get_context("spawn")
CLK = os.sysconf("SC_CLK_TCK")


def cpu_s(pid: int) -> float:
    with open(f"/proc/{pid}/stat") as fh:
        f = fh.read().rsplit(")", 1)[1].split()
    return (int(f[11]) + int(f[12])) / CLK


def machine_busy_s() -> float:
    with open("/proc/stat") as fh:
        v = [int(x) for x in fh.readline().split()[1:]]
    return (sum(v) - v[3] - v[4]) / CLK


def match_ids(n: int) -> list[str]:
    return [f"m_scale_{i:02d}" for i in range(n)]


async def _started(clock) -> tuple[float, float]:
    """Wait for the parent to set the start time once every process is connected."""
    while clock[0] == 0.0:
        await asyncio.sleep(0.01)
    return clock[0], clock[1]


def _feeder(url: str, mids: list[str], lines: list[bytes], clock, q) -> None:
    import websockets

    async def one(mid: str, ready: asyncio.Event, go: asyncio.Future) -> np.ndarray:
        sent = np.full(len(lines), np.nan)
        ours = [ln.replace(MATCH.encode(), mid.encode()) for ln in lines]
        async with websockets.connect(f"{url}/ingest/{mid}", max_size=None) as ws:
            ready.set()
            start_at, stop_at = await go
            stop_at -= 2.0
            async def drain() -> None:
                async for _ in ws:  # error answers; there should be none
                    pass
            d = asyncio.create_task(drain())
            for k, ln in enumerate(ours):
                due = start_at + k / FPS
                now = time.monotonic()
                if due > now:
                    await asyncio.sleep(due - now)
                if now > stop_at:
                    break
                sent[k] = time.monotonic()
                await ws.send(ln.decode())
            d.cancel()
        return sent

    async def main() -> None:
        loop = asyncio.get_running_loop()
        go = loop.create_future()
        readies = [asyncio.Event() for _ in mids]
        tasks = [asyncio.create_task(one(m, r, go)) for m, r in zip(mids, readies)]
        for r in readies:
            await r.wait()
        q.put("ready")
        go.set_result(await _started(clock))
        q.put(await asyncio.gather(*tasks))

    asyncio.run(main())


def _subscribers(urls: list[str], plan: list[tuple[str, float]], clock, q) -> None:
    """``plan``: (match id, every) per socket, spread over ``urls`` in turn. Reports arrivals."""
    import orjson
    import websockets

    async def one(i: int, mid: str, every: float, ready: asyncio.Event,
                  go: asyncio.Future) -> tuple[str, float, list[tuple[float, float]]]:
        got: list[tuple[float, float]] = []
        try:
            async with websockets.connect(f"{urls[i % len(urls)]}/live/{mid}?every={every}", max_size=None) as ws:
                await ws.recv()  # the opening snapshot
                ready.set()
                _, stop_at = await go
                while time.monotonic() < stop_at:
                    try:
                        text = await asyncio.wait_for(ws.recv(), max(stop_at - time.monotonic(), 0.01))
                    except asyncio.TimeoutError:
                        break
                    now = time.monotonic()
                    m = orjson.loads(text)
                    if m["type"] == "delta":
                        got.append((now, m["match_time_s"]))
        except Exception as exc:  # noqa: BLE001 - reported, the case goes on
            print(f"  subscriber {i} failed: {exc}", flush=True)
            ready.set()
        return mid, every, got

    async def main() -> None:
        go = asyncio.get_running_loop().create_future()
        readies = [asyncio.Event() for _ in plan]
        tasks = [asyncio.create_task(one(i, mid, ev, r, go)) for i, ((mid, ev), r) in enumerate(zip(plan, readies))]
        for r in readies:
            await r.wait()
        q.put("ready")
        go.set_result(await _started(clock))
        q.put(await asyncio.gather(*tasks))

    asyncio.run(main())


def run_case(n_matches: int, n_subs: int, warmup_s: float, window_s: float, tmp: Path) -> dict:
    import httpx
    import redis as sync_redis

    mids = match_ids(n_matches)
    lines = feed_lines(warmup_s + window_s + 6.0)
    rs = RedisServer(tmp / f"redis-{n_matches}").start()
    cfg = tmp / "cfg"
    procs: dict[str, LiveServer] = {}
    try:
        from concurrent.futures import ThreadPoolExecutor
        roles = ["ingest", "aggregator", "gateway", "gateway"]
        def start(i: int) -> LiveServer:
            return LiveServer(tmp / f"{roles[i]}-{n_matches}-{i}", "--role", roles[i], "--redis", rs.url,
                              config_text="[scale]\nlease_ms = 10000\n").start(timeout=180)
        with ThreadPoolExecutor(4) as pool:
            ing, agg, gw1, gw2 = pool.map(start, range(4))
        procs = {"ingest": ing, "aggregator": agg, "gateway1": gw1, "gateway2": gw2}
        for mid in mids:
            body = setup_body()
            body["meta"]["match"]["id"] = mid
            r = httpx.put(f"{ing.http}/api/matches/{mid}", json=body, timeout=30)
            assert r.status_code in (200, 201), r.text
        # subscribers: one per-frame socket per match, the rest fan-out at 1 s
        plan = [(m, 0.04) for m in mids]
        plan += [(mids[k % n_matches], 1.0) for k in range(max(n_subs - n_matches, 0))]
        clock = CTX.Array("d", 2)  # start, stop (monotonic); 0: not yet
        sq, fq = CTX.Queue(), CTX.Queue()
        half = (len(plan) + 1) // 2
        subs = [CTX.Process(target=_subscribers, args=([gw1.ws, gw2.ws], part, clock, sq), daemon=True)
                for part in (plan[:half], plan[half:]) if part]
        for p in subs:
            p.start()
        feeder = CTX.Process(target=_feeder, args=(ing.ws, mids, lines, clock, fq), daemon=True)
        feeder.start()
        for qq in [fq] + [sq] * len(subs):
            assert qq.get(timeout=300) == "ready"
        t_start = time.monotonic() + 0.5
        stop_at = t_start + warmup_s + window_s + 2.0
        clock[1], clock[0] = stop_at, t_start
        rc = sync_redis.Redis.from_url(rs.url)

        def applied() -> int:
            import orjson
            return sum(orjson.loads(s)["frames"] for s in rc.mget([f"pw:summary:{m}" for m in mids]) if s)

        time.sleep(max(t_start + warmup_s - time.monotonic(), 0))
        pids = {k: v.proc.pid for k, v in procs.items()}
        pids["redis"] = rs.pid()
        c0 = {k: cpu_s(p) for k, p in pids.items()}
        m0, f0, t0 = machine_busy_s(), applied(), time.monotonic()
        time.sleep(window_s)
        c1 = {k: cpu_s(p) for k, p in pids.items()}
        m1, f1, t1 = machine_busy_s(), applied(), time.monotonic()
        sent = fq.get(timeout=120)
        got = [x for _ in subs for x in sq.get(timeout=120)]
        feeder.join(30)
        for p in subs:
            p.join(30)
    finally:
        for s in procs.values():
            s.stop()
        rs.stop()
    cpu = {k: (c1[k] - c0[k]) / (t1 - t0) for k in c0}
    other = max((m1 - m0) / (t1 - t0) - sum(cpu.values()), 0.0)
    send_of = dict(zip(mids, sent))
    lat, fan = [], []
    for mid, every, arrivals in got:
        s = send_of[mid]
        for now, mt in arrivals:
            if not (t0 <= now <= t1):
                continue
            k = int(round(mt * FPS))
            if 0 <= k < len(s) and s[k] == s[k]:
                (lat if every < 0.5 else fan).append((now - s[k]) * 1e3)
    out = {"frames_per_s": (f1 - f0) / (t1 - t0), "offered": n_matches * FPS, "cpu": cpu, "other": other,
           "p50_ms": float(np.percentile(lat, 50)) if lat else float("nan"),
           "p99_ms": float(np.percentile(lat, 99)) if lat else float("nan"),
           "fan_p99_ms": float(np.percentile(fan, 99)) if fan else float("nan"),
           "timed": len(lat), "subs": len(plan)}
    print(f"  {n_matches} matches, {len(plan)} subscribers: {out['frames_per_s']:.0f} frames/s applied "
          f"(offered {out['offered']}), latency p50 {out['p50_ms']:.1f} ms p99 {out['p99_ms']:.1f} ms "
          f"({len(lat)} frames timed), fan-out p99 {out['fan_p99_ms']:.1f} ms; CPU cores: "
          + ", ".join(f"{k} {v:.2f}" for k, v in cpu.items()) + f"; rest of the machine {other:.2f}", flush=True)
    return out


def _entry(value: float, unit: str, baseline: float | None) -> dict:
    ratio = value / baseline if baseline else None
    return {"value": round(value, 4), "unit": unit, "baseline": baseline, "ratio": None if ratio is None else round(ratio, 4)}


def run(quick: bool) -> dict[str, dict]:
    if not redis_available():
        raise RuntimeError("bench_scale needs redis-server (apt-get install -y redis-server)")
    small, large = (3, 8) if quick else (5, 20)
    subs = (24, 60) if quick else (125, 500)
    warmup, window = (4.0, 8.0) if quick else (6.0, 20.0)
    print(f"bench_scale: 1 ingest + 1 aggregator + 2 gateways over Redis, {small} vs {large} matches at {FPS} Hz; "
          f"{os.cpu_count()} CPUs", flush=True)
    with tempfile.TemporaryDirectory(prefix="pacewire-bench-scale-") as tmp:
        a = run_case(small, subs[0], warmup, window, Path(tmp))
        b = run_case(large, subs[1], warmup, window, Path(tmp))
    e: dict[str, dict] = {}
    for n, r in ((small, a), (large, b)):
        e[f"scale_frames_per_s_{n}m"] = _entry(r["frames_per_s"], "frames/s", float(r["offered"]))
        e[f"scale_latency_p99_ms_{n}m"] = _entry(r["p99_ms"], "ms", None)
        e[f"scale_fanout_p99_ms_{n}m"] = _entry(r["fan_p99_ms"], "ms", None)
        for role, v in r["cpu"].items():
            e[f"scale_cpu_{role}_{n}m"] = _entry(v, "cores", None)
    e[f"scale_latency_p99_ms_{large}m"]["baseline"] = round(a["p99_ms"], 4)
    e[f"scale_latency_p99_ms_{large}m"]["ratio"] = round(b["p99_ms"] / a["p99_ms"], 4) if a["p99_ms"] else None
    per_match = (b["cpu"]["aggregator"] - a["cpu"]["aggregator"]) / (large - small)
    fixed = max(a["cpu"]["aggregator"] - per_match * small, 0.0)
    if per_match <= 0:
        per_match = b["cpu"]["aggregator"] / large
        fixed = 0.0
    capacity = (1.0 - fixed) / per_match
    # only a kept-up case measures the cost of a match; say so when the larger one fell behind
    kept_up = b["frames_per_s"] >= 0.95 * b["offered"]
    print(f"  aggregator: {1e3 * per_match:.1f} milli-cores per match (+{fixed:.2f} fixed) -> about "
          f"{capacity:.0f} matches per aggregator core{'' if kept_up else ' (the larger case fell behind: an upper bound)'}",
          flush=True)
    e["scale_matches_per_aggregator_core"] = _entry(capacity, "matches", None)
    return e


if __name__ == "__main__":
    import json
    print(json.dumps(run("--quick" in sys.argv), indent=1))
