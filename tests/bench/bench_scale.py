"""Scale-out over Redis on this machine: 1 ingest + 1 aggregator + 2 gateways.

N fictional matches (bench_live's 22-player synthetic match, one copy per
match id) stream at 25 Hz real time, one CDF frame per message, from one
provider process to the ingest node. Subscriber processes hold sockets spread
over both gateways: per match one ``every=0.04`` subscriber (a delta per
frame: its latency is the delivery latency of a frame) and the rest at
``every=1.0`` (fan-out). Latency of frame F = arrival of the first delta whose
``match_time_s`` covers F minus the send time of F (``time.monotonic()`` is one
clock for every process here), so it is end to end: provider → ingest → Redis
Stream → aggregator → Redis pub/sub → gateway → socket.

Full mode is the league set-up: 1, 5, 10 and 20 matches, 500 subscribers
over the two gateways in every step, fresh processes and a fresh Redis per
step. Quick mode (``make bench QUICK=1``) does 1 and 4 matches with 40
subscribers in about 25 s.

Figures per step: frames/s the aggregator read from the streams over the
window (baseline: N × 25, the offered rate; ratio 1.0 = kept up), the backlog
(frames stored but not yet read) and its growth, p50/p99 latency (baseline:
the 1-match step of the same run), deltas/s reaching a per-frame subscriber
(an aggregator short of CPU reads bigger blocks and sends fewer, larger
deltas), and CPU per role in cores from /proc/PID/stat utime+stime, with the
time each role waited for a CPU (/proc/PID/task/*/schedstat). CPU-seconds move
less than latency when other work shares the 2 cores; that other work is
printed (load generators, the rest of the machine, load averages). The matches
one aggregator core can carry come from a least-squares line, aggregator CPU =
fixed + per_match × matches, over the steps that kept up with an aggregator
that had slack (running plus waiting below 0.9 of a core): a saturated one
trades deltas for throughput, so its CPU no longer measures what a match costs.

    python -m tests.bench.bench_scale [--quick]
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

from pacewire.scale import keys
from pacewire.scale.aggregator import GROUP
from tests.bench.bench_live import FPS, MATCH, feed_lines, setup_body
from tests.support.live_server import LiveServer
from tests.support.redis_server import RedisServer, redis_available

CTX = mp.get_context("fork")  # load generators start at once and inherit the prebuilt frames
CLK = os.sysconf("SC_CLK_TCK")
# (matches per step, subscribers, warm-up s, window s); the league set-up in full mode
FULL = ((1, 5, 10, 20), 500, 6.0, 20.0)
QUICK = ((1, 4), 40, 1.5, 5.0)
KEPT_UP = 0.95  # a step kept up when it read this share of the offered frames (common practice: 5 % slack)
# The aggregator is one Python thread: running or waiting for a CPU this share of the time, it has no
# slack left, reads bigger blocks and sends fewer deltas, so its CPU no longer scales with the matches.
SATURATED = 0.9


def cpu_s(pid: int) -> float:
    with open(f"/proc/{pid}/stat") as fh:
        f = fh.read().rsplit(")", 1)[1].split()
    return (int(f[11]) + int(f[12])) / CLK


def wait_s(pid: int) -> float:
    """Seconds the process's threads were runnable but waited for a CPU (/proc/PID/task/*/schedstat)."""
    total = 0
    for t in Path(f"/proc/{pid}/task").iterdir():
        try:
            total += int((t / "schedstat").read_text().split()[1])
        except (OSError, IndexError, ValueError):  # a thread that just ended
            pass
    return total / 1e9


def machine_busy_s() -> float:
    with open("/proc/stat") as fh:
        v = [int(x) for x in fh.readline().split()[1:]]
    return (sum(v) - v[3] - v[4]) / CLK


def loadavg() -> str:
    with open("/proc/loadavg") as fh:
        return " ".join(fh.read().split()[:3])


def stream_position(rc, mids: list[str]) -> tuple[int, int]:
    """Frames stored in the matches' streams and frames the aggregators' group has read, summed.

    Frame F is entry ``(F+1)-0`` (``keys.frame_entry_id``) and the feed has no
    events, so a group's last-delivered id counts the frames read; the
    aggregator applies a read batch before its next await.
    """
    p = rc.pipeline(transaction=False)
    for m in mids:
        p.xlen(keys.frames(m))
        p.xinfo_groups(keys.frames(m))
    res = p.execute(raise_on_error=False)
    stored = sum(x for x in res[0::2] if isinstance(x, int))
    read = 0
    for groups in res[1::2]:
        for g in groups if isinstance(groups, list) else []:
            name = g["name"].decode() if isinstance(g["name"], bytes) else g["name"]
            last = g["last-delivered-id"]
            if name == GROUP:
                read += int((last.decode() if isinstance(last, bytes) else last).split("-")[0])
    return stored, read


def match_ids(n: int) -> list[str]:
    return [f"m_scale_{n}_{i:02d}" for i in range(n)]  # distinct per step, for steps sharing a rig


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
        tasks = [asyncio.create_task(one(m, r, go)) for m, r in zip(mids, readies, strict=True)]
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
                  go: asyncio.Future) -> tuple[str, float, list[tuple[float, float]], int, str | None]:
        got: list[tuple[float, float]] = []
        resyncs = 0
        failed = None
        try:
            async with websockets.connect(f"{urls[i % len(urls)]}/live/{mid}?every={every}", max_size=None) as ws:
                first = orjson.loads(await ws.recv())
                if first["type"] != "snapshot":  # a refusal: an error message, then the close
                    raise RuntimeError(f"{first.get('code')}: {first.get('message')}")
                ready.set()
                _, stop_at = await go
                while time.monotonic() < stop_at:
                    try:
                        text = await asyncio.wait_for(ws.recv(), max(stop_at - time.monotonic(), 0.01))
                    except TimeoutError:
                        break
                    now = time.monotonic()
                    m = orjson.loads(text)
                    if m["type"] == "delta":
                        got.append((now, m["match_time_s"]))
                    elif m["type"] == "snapshot":
                        resyncs += 1  # a slow reader's backlog became a fresh snapshot
        except Exception as exc:
            failed = str(exc)[:120]
            ready.set()
        return mid, every, got, resyncs, failed

    async def main() -> None:
        go = asyncio.get_running_loop().create_future()
        readies = [asyncio.Event() for _ in plan]
        tasks = [asyncio.create_task(one(i, mid, ev, r, go))
                 for i, ((mid, ev), r) in enumerate(zip(plan, readies, strict=True))]
        for r in readies:
            await r.wait()
        q.put("ready")
        go.set_result(await _started(clock))
        q.put(await asyncio.gather(*tasks))

    asyncio.run(main())


class Rig:
    """A redis-server and the four roles (1 ingest, 1 aggregator, 2 gateways), for one or more steps."""

    ROLES = ("ingest", "aggregator", "gateway", "gateway")

    def __init__(self, folder: Path) -> None:
        self.folder = folder
        self.redis: RedisServer | None = None
        self.procs: dict[str, LiveServer] = {}

    def start(self) -> Rig:
        from concurrent.futures import ThreadPoolExecutor

        self.redis = RedisServer(self.folder / "redis").start()
        names = ("ingest", "aggregator", "gateway1", "gateway2")
        self.procs = {name: LiveServer(self.folder / name, "--role", role, "--redis", self.redis.url,
                                       config_text="[scale]\nlease_ms = 10000\n")
                      for name, role in zip(names, self.ROLES, strict=True)}
        try:
            with ThreadPoolExecutor(4) as pool:
                list(pool.map(lambda srv: srv.start(timeout=180), self.procs.values()))
        except BaseException:
            self.stop()
            raise
        return self

    def stop(self) -> None:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(4) as pool:  # in parallel: each may take a second or two to checkpoint and go
            list(pool.map(LiveServer.stop, self.procs.values()))
        if self.redis is not None:
            self.redis.stop()


def wait_claimed(rc, mids: list[str], timeout_s: float = 60.0) -> None:
    """Until the aggregator holds every match's lease (it claims new matches once per round)."""
    deadline = time.monotonic() + timeout_s
    while sum(rc.exists(keys.lease(m)) for m in mids) < len(mids):
        if time.monotonic() > deadline:
            raise RuntimeError("the aggregator did not claim every match in time")
        time.sleep(0.1)


def run_case(rig: Rig, n_matches: int, n_subs: int, warmup_s: float, window_s: float, lines: list[bytes]) -> dict:
    import httpx
    import redis as sync_redis

    t_case = time.monotonic()
    load_before = loadavg()
    mids = match_ids(n_matches)
    assert rig.redis is not None
    procs, rs = rig.procs, rig.redis
    ing, gw1, gw2 = procs["ingest"], procs["gateway1"], procs["gateway2"]
    feeder, subs = None, []
    rc = sync_redis.Redis.from_url(rs.url)
    try:
        for mid in mids:
            body = setup_body()
            body["meta"]["match"]["id"] = mid
            r = httpx.put(f"{ing.http}/api/matches/{mid}", json=body, timeout=30)
            assert r.status_code in (200, 201), r.text
        wait_claimed(rc, mids)
        t_claimed = time.monotonic()
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
        t_ready = time.monotonic()
        t_start = time.monotonic() + 0.5
        stop_at = t_start + warmup_s + window_s + 0.5  # the feed and the readers stop just after the window
        clock[1], clock[0] = stop_at, t_start

        time.sleep(max(t_start + warmup_s - time.monotonic(), 0))
        pids = {k: v.proc.pid for k, v in procs.items()}
        pids["redis"] = rs.pid()
        gen = [feeder.pid] + [p.pid for p in subs]  # the load generators: feeder and subscribers
        c0 = {k: cpu_s(p) for k, p in pids.items()}
        w0 = {k: wait_s(p) for k, p in pids.items()}
        g0 = sum(cpu_s(p) for p in gen)
        m0, (s0, r0), t0 = machine_busy_s(), stream_position(rc, mids), time.monotonic()
        time.sleep(window_s)
        c1 = {k: cpu_s(p) for k, p in pids.items()}
        w1 = {k: wait_s(p) for k, p in pids.items()}
        g1 = sum(cpu_s(p) for p in gen)
        m1, (s1, r1), t1 = machine_busy_s(), stream_position(rc, mids), time.monotonic()
        sent = fq.get(timeout=120)
        got = [x for _ in subs for x in sq.get(timeout=120)]
        feeder.join(30)
        for p in subs:
            p.join(30)
    finally:
        rc.close()
        for p in ([feeder] if feeder is not None else []) + subs:
            if p.is_alive():
                p.kill()
    dt = t1 - t0
    cpu = {k: (c1[k] - c0[k]) / dt for k in c0}
    cpu["gateway"] = cpu["gateway1"] + cpu["gateway2"]
    wait = {k: (w1[k] - w0[k]) / dt for k in w0}
    gen_cpu = (g1 - g0) / dt
    roles_cpu = sum(v for k, v in cpu.items() if k != "gateway")
    other = max((m1 - m0) / dt - roles_cpu - gen_cpu, 0.0)
    send_of = dict(zip(mids, sent, strict=True))
    lat, fan = [], []
    resyncs = 0
    failures: dict[str, int] = {}
    for mid, every, arrivals, rsn, failed in got:
        resyncs += rsn
        if failed is not None:
            failures[failed] = failures.get(failed, 0) + 1
        s = send_of[mid]
        for now, mt in arrivals:
            if not (t0 <= now <= t1):
                continue
            k = int(round(mt * FPS))
            if 0 <= k < len(s) and s[k] == s[k]:
                (lat if every < 0.5 else fan).append((now - s[k]) * 1e3)
    pct = lambda v, q: float(np.percentile(v, q)) if v else float("nan")  # noqa: E731
    out = {"frames_per_s": (r1 - r0) / dt, "stored_per_s": (s1 - s0) / dt, "offered": n_matches * FPS,
           "backlog_start": s0 - r0, "backlog_end": s1 - r1, "backlog_growth": ((s1 - r1) - (s0 - r0)) / dt,
           "cpu": cpu, "wait": wait, "generators": gen_cpu, "other": other,
           "frame_deltas_per_s": len(lat) / n_matches / dt,
           "p50_ms": pct(lat, 50), "p99_ms": pct(lat, 99), "max_ms": max(lat) if lat else float("nan"),
           "fan_p99_ms": pct(fan, 99), "timed": len(lat), "subs": len(plan), "resyncs": resyncs,
           "subs_failed": sum(failures.values()),
           "load_before": load_before, "load_after": loadavg()}
    out["kept_up"] = out["frames_per_s"] >= KEPT_UP * out["offered"]
    out["saturated"] = cpu["aggregator"] + wait["aggregator"] >= SATURATED
    t_end = time.monotonic()
    print(f"  {n_matches} match{'es' if n_matches > 1 else ''}, {len(plan)} subscribers: "
          f"read {out['frames_per_s']:.0f} frames/s of "
          f"{out['offered']} offered ({out['stored_per_s']:.0f} stored); backlog {out['backlog_start']} -> "
          f"{out['backlog_end']} frames ({out['backlog_growth']:+.1f} frames/s)"
          f"{'' if out['kept_up'] else ': FELL BEHIND'}"
          f"{'; aggregator SATURATED' if out['saturated'] else ''}",
          flush=True)
    for why, k in sorted(failures.items(), key=lambda x: -x[1]):
        print(f"    {k} of {len(plan)} subscribers failed: {why}", flush=True)
    print(f"    latency p50 {out['p50_ms']:.1f} ms, p99 {out['p99_ms']:.1f} ms, max {out['max_ms']:.0f} ms "
          f"({len(lat)} deltas timed, {out['frame_deltas_per_s']:.1f} per s per per-frame subscriber); "
          f"fan-out p99 {out['fan_p99_ms']:.1f} ms; {resyncs} resync snapshots", flush=True)
    print("    CPU cores: " + ", ".join(f"{k} {v:.3f}" for k, v in cpu.items())
          + f"; load generators {gen_cpu:.2f}; rest of the machine {other:.2f}", flush=True)
    print("    waiting for a CPU (cores): " + ", ".join(f"{k} {v:.3f}" for k, v in wait.items()), flush=True)
    print(f"    load average {load_before} -> {out['load_after']}; {t_end - t_case:.1f} s (set-up "
          f"{t_claimed - t_case:.1f}, connect {t_ready - t_claimed:.1f}, run {t1 - t_ready:.1f}, "
          f"end {t_end - t1:.1f})", flush=True)
    return out


def _entry(value: float, unit: str, baseline: float | None) -> dict:
    ratio = value / baseline if baseline else None
    return {"value": round(value, 4), "unit": unit, "baseline": None if baseline is None else round(baseline, 4),
            "ratio": None if ratio is None else round(ratio, 4)}


def aggregator_fit(cases: dict[int, dict]) -> tuple[float, float, list[int]]:
    """(fixed cores, cores per match, steps used): least squares over the steps that kept up
    with an aggregator that had slack (not saturated)."""
    used = [n for n, r in cases.items() if r["kept_up"] and not r["saturated"]]
    if len(used) < 2:  # one point: all of it per match, nothing fixed (an upper bound on the cost)
        n = used[0] if used else min(cases)
        return 0.0, cases[n]["cpu"]["aggregator"] / n, [n]
    per_match, fixed = np.polyfit(used, [cases[n]["cpu"]["aggregator"] for n in used], 1)
    return max(float(fixed), 0.0), float(per_match), used


def run(quick: bool) -> dict[str, dict]:
    if not redis_available():
        raise RuntimeError("bench_scale needs redis-server (apt-get install -y redis-server)")
    steps, n_subs, warmup, window = QUICK if quick else FULL
    print(f"bench_scale: 1 ingest + 1 aggregator + 2 gateways over Redis, {'/'.join(map(str, steps))} matches at "
          f"{FPS} Hz, {n_subs} subscribers; {os.cpu_count()} CPUs, load average {loadavg()}", flush=True)
    lines = feed_lines(warmup + window + 3.0)
    cases: dict[int, dict] = {}
    with tempfile.TemporaryDirectory(prefix="pacewire-bench-scale-") as tmp:
        # full mode: fresh processes and Redis per step; quick mode shares one rig (an ended step's
        # matches stay claimed but idle, a few milli-cores) to start the servers once
        rig: Rig | None = None
        try:
            for n in steps:
                if rig is None or not quick:
                    if rig is not None:
                        rig.stop()
                    t = time.monotonic()
                    rig = Rig(Path(tmp) / f"rig-{n}")
                    rig.start()
                    print(f"  servers up in {time.monotonic() - t:.1f} s", flush=True)
                cases[n] = run_case(rig, n, n_subs, warmup, window, lines)
        finally:
            if rig is not None:
                rig.stop()
    base = cases[steps[0]]  # the 1-match step
    e: dict[str, dict] = {}
    for n, r in cases.items():
        e[f"scale_frames_per_s_{n}"] = _entry(r["frames_per_s"], "frames/s read by the aggregator", float(r["offered"]))
        e[f"scale_backlog_growth_{n}"] = _entry(r["backlog_growth"], "frames/s", float(r["offered"]))
        e[f"scale_p99_ms_{n}"] = _entry(r["p99_ms"], "ms", base["p99_ms"] if n != steps[0] else None)
        e[f"scale_p50_ms_{n}"] = _entry(r["p50_ms"], "ms", base["p50_ms"] if n != steps[0] else None)
        e[f"scale_fanout_p99_ms_{n}"] = _entry(r["fan_p99_ms"], "ms", base["fan_p99_ms"] if n != steps[0] else None)
        for role in ("ingest", "aggregator", "gateway", "redis"):
            unit = "cores (both gateways)" if role == "gateway" else "cores"
            e[f"scale_cpu_{role}_{n}"] = _entry(r["cpu"][role], unit, base["cpu"][role] if n != steps[0] else None)
        e[f"scale_wait_aggregator_{n}"] = _entry(r["wait"]["aggregator"], "cores waiting for a CPU", None)
        e[f"scale_frame_deltas_per_s_{n}"] = _entry(r["frame_deltas_per_s"], "deltas/s to a per-frame subscriber",
                                                    base["frame_deltas_per_s"] if n != steps[0] else float(FPS))
        e[f"scale_subscribers_failed_{n}"] = _entry(r["subs_failed"], f"of {r['subs']} subscribers", None)
        e[f"scale_cpu_load_generators_{n}"] = _entry(r["generators"], "cores", None)
        e[f"scale_cpu_rest_of_machine_{n}"] = _entry(r["other"], "cores", None)
    fixed, per_match, used = aggregator_fit(cases)
    capacity = (1.0 - fixed) / per_match
    print(f"  aggregator CPU = {fixed:.3f} + {1e3 * per_match:.1f} milli-cores × matches (fit over "
          f"{', '.join(map(str, used))} matches) -> about {capacity:.1f} matches per aggregator core", flush=True)
    e["scale_aggregator_fixed_cores"] = _entry(fixed, "cores", None)
    e["scale_aggregator_cores_per_match"] = _entry(per_match, "cores", None)
    e["scale_matches_per_aggregator_core"] = _entry(capacity, "matches (estimate)", None)
    for n, r in cases.items():
        if r["saturated"] or not r["kept_up"]:
            print(f"  the {n}-match step had no slack: it read {r['frames_per_s']:.0f} of {r['offered']} frames/s on "
                  f"{r['cpu']['aggregator']:.2f} cores (+{r['wait']['aggregator']:.2f} waiting for a CPU); a per-frame "
                  f"subscriber got {r['frame_deltas_per_s']:.1f} deltas/s "
                  f"({base['frame_deltas_per_s']:.1f} at 1 match), "
                  f"p99 {r['p99_ms']:.0f} ms", flush=True)
    return e


if __name__ == "__main__":
    import json
    print(json.dumps(run("--quick" in sys.argv), indent=1))
