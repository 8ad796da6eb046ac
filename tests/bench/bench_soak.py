"""Soak: a whole synthetic match replayed at 10x into one real server with 200 subscribers.

The match is ``pacewire synth --out TMP --minutes M`` (replay/synth/: the
fictional 95-minute demo match, feed faults on: a 20 s outage, dropouts,
duplicates, late frames, jumps), fed by ``pacewire replay --speed 10``
(replay/player.py) into ``pacewire serve`` on loopback. Before the first
frame, SUBSCRIBERS sockets subscribe to ``WS /live`` (half at the default
1 s cadence, half at 0.2 s; both views ``all``), spread over CLIENT_PROCS
processes; each checks that every message's ``seq`` is one more than the
last, from its opening snapshot to the end.

Every few seconds (``plan``) the server's VmRSS (/proc/PID/status) is sampled with
the match clock (``GET /api/matches``). The curve goes to
``tests/bench/out/soak_rss.json`` (``soak_rss_quick.json`` in quick mode;
git-ignored). Warm-up: the first
``warmup_s`` of wall time (the engine's windows, the streams and the
allocator fill); ``soak_rss_growth_mb_after_warmup`` = the last sample minus
the first after warm-up (baseline: that sample). Two steps after warm-up are
by design and show in the curve: the half-time report (its charts load
matplotlib once, about 40 MB) and each stream's resume buffer, which holds its
last 5 minutes of messages (``server.resume_buffer_s``) and so fills over the
first 5 wall minutes. ``soak_rss_growth_mb_second_half`` is the growth after
the half-time report is listed. The last sample is the last one while frames
flow; the one after the feed stalled (the server then also holds a finalised
copy of the match state to show) is in the JSON as ``after_stall``.

When the replay is done and the server has marked the feed stalled (the
tail is final then), its REST snapshot must equal ``pacewire analyze --json``
over the folder the server recorded: every player figure but ``on_pitch``
(live state), and the teams (``soak_figures_equal`` 1 or 0).

Full: the 95-minute match (about 10 wall minutes). Quick (``make bench
QUICK=1``): 1 minute of match, the same 200 subscribers, about 15 s.

    python -m tests.bench.bench_soak [--quick]
"""
from __future__ import annotations

import asyncio
import json
import multiprocessing as mp
import os
import re
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import httpx  # noqa: E402
import orjson  # noqa: E402

from tests.support.live_server import LiveServer  # noqa: E402
from tests.support.paths import ROOT  # noqa: E402

_HERE = Path(__file__).resolve().parent

MATCH = "soak"
SPEED = 10
SUBSCRIBERS = 200
CLIENT_PROCS = 2
CADENCES = (1.0, 0.2)  # every= of the subscribers, in turn (1 s is the bench page's default)

OUT = _HERE / "out" / "soak_rss.json"  # quick runs write soak_rss_quick.json beside it: the full curve stays
CTX = mp.get_context("fork")
SEQ = re.compile(rb'"seq":(\d+)')
TYPE = re.compile(rb'"type":"(\w+)"')


def plan(quick: bool) -> tuple[float, float, float]:
    """(match minutes, RSS sample interval s, warm-up s): warm-up is 10 match minutes in full (60 s of
    wall time at 10x), the first quarter of a quick run."""
    return (1.0, 1.0, 1.5) if quick else (95.0, 3.0, 60.0)


# -- subscribers -------------------------------------------------------------------------------------------
def _subscribers_main(urls: list[str], conn) -> None:
    """Hold one socket per url; check seq continuity on each; report when told to stop."""
    import websockets

    async def main() -> None:
        stats = [{"messages": 0, "gaps": 0, "resyncs": 0, "first_seq": None, "last_seq": None, "closed": False,
                  "bytes": 0} for _ in urls]
        stop = asyncio.Event()

        async def one(k: int, url: str, ready: asyncio.Event) -> None:
            s = stats[k]
            try:
                async with websockets.connect(url, max_size=None, open_timeout=60, ping_interval=None) as ws:
                    ready.set()
                    while not stop.is_set():
                        try:
                            msg = await asyncio.wait_for(ws.recv(decode=False), 0.5)
                        except TimeoutError:
                            continue
                        head = msg[:160]
                        seq = int(SEQ.search(head).group(1))
                        kind = TYPE.search(head).group(1)
                        if s["last_seq"] is None:
                            s["first_seq"] = seq
                        elif seq != s["last_seq"] + 1:
                            s["gaps"] += 1
                        if kind == b"snapshot" and s["last_seq"] is not None:
                            s["resyncs"] += 1
                        s["last_seq"] = seq
                        s["messages"] += 1
                        s["bytes"] += len(msg)
            except Exception as exc:  # a lost connection loses every later message
                s["closed"] = f"{type(exc).__name__}: {exc}"
            finally:
                ready.set()

        readies = [asyncio.Event() for _ in urls]
        tasks = [asyncio.create_task(one(k, u, r)) for k, (u, r) in enumerate(zip(urls, readies, strict=True))]
        for r in readies:
            await r.wait()
        conn.send("ready")
        await asyncio.get_running_loop().run_in_executor(None, conn.recv)  # "stop"
        stop.set()
        await asyncio.gather(*tasks)
        conn.send(stats)

    asyncio.run(main())


class Subscribers:
    def __init__(self, ws_base: str, n: int) -> None:
        urls = [f"{ws_base}/live/{MATCH}?every={CADENCES[k % len(CADENCES)]:g}" for k in range(n)]
        self.conns, self.procs = [], []
        for part in range(CLIENT_PROCS):
            a, b = CTX.Pipe()
            p = CTX.Process(target=_subscribers_main, args=(urls[part::CLIENT_PROCS], b), daemon=True)
            p.start()
            self.conns.append(a)
            self.procs.append(p)
        for c in self.conns:
            if not c.poll(120) or c.recv() != "ready":
                raise RuntimeError("subscribers did not connect in 120 s")

    def stop(self) -> list[dict]:
        out: list[dict] = []
        for c in self.conns:
            c.send("stop")
        for c in self.conns:
            if not c.poll(60):
                raise RuntimeError("subscribers did not report in 60 s")
            out += c.recv()
        for p in self.procs:
            p.join(10)
        return out

    def kill(self) -> None:
        for p in self.procs:
            if p.is_alive():
                p.kill()
                p.join(5)


# -- measuring ---------------------------------------------------------------------------------------------
def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024.0
    raise RuntimeError("no VmRSS")


def figures(snap: dict) -> tuple[dict, dict]:
    """What must equal the offline pass: players' figures (on_pitch is live state) and the teams'
    (but the score, which comes from goal events: ``pacewire analyze`` reads frames only)."""
    live_only = ("on_pitch", "baseline")  # baseline: the history the live service reads at the start
    players = {pid: {k: v for k, v in p.items() if k not in live_only} for pid, p in snap["players"].items()}
    teams = {tid: {k: v for k, v in t.items() if k != "score"} for tid, t in snap["teams"].items()}
    return players, teams


def last_frame_id(folder: Path) -> int:
    """frame_id of the last line the server recorded."""
    with open(folder / "tracking.jsonl", "rb") as f:
        f.seek(max(f.seek(0, 2) - 65536, 0))
        return int(orjson.loads(f.read().rstrip(b"\n").rsplit(b"\n", 1)[-1])["frame_id"])


def differences(a: object, b: object, path: str = "", out: list | None = None) -> list[str]:
    out = [] if out is None else out
    if isinstance(a, dict) and isinstance(b, dict):
        for k in sorted(set(a) | set(b)):
            differences(a.get(k), b.get(k), f"{path}.{k}" if path else k, out)
    elif a != b:
        out.append(f"{path}: live {a!r} offline {b!r}")
    return out


def get_json(http: httpx.Client, path: str) -> dict:
    r = http.get(path)
    if r.status_code != 200:
        raise RuntimeError(f"GET {path}: {r.status_code} {r.text[:300]}")
    return r.json()


def cli(*args: str, **kw) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "pacewire", *args], cwd=ROOT, **kw)


def _entry(value: float, unit: str, baseline: float | None = None, ratio: float | None = None) -> dict:
    return {"value": round(float(value), 3), "unit": unit,
            "baseline": None if baseline is None else round(float(baseline), 3),
            "ratio": None if ratio is None else round(float(ratio), 4)}


def run(quick: bool) -> dict[str, dict]:
    minutes, sample_s, warm = plan(quick)
    with tempfile.TemporaryDirectory(prefix="pacewire-soak-") as tmp:
        tmp = Path(tmp)
        folder = tmp / "match"
        t0 = time.perf_counter()
        cli("synth", "--out", str(folder), "--minutes", f"{minutes:g}", "--seed", "5", check=True,
            stdout=subprocess.DEVNULL)
        synth_s = time.perf_counter() - t0
        meta = orjson.loads((folder / "meta.json").read_bytes())
        sheet = orjson.loads((folder / "match.json").read_bytes())
        meta["match"] = {**meta.get("match", {}), "id": MATCH}
        print(f"bench_soak: {minutes:g}-minute synthetic match ({synth_s:.1f} s to generate) at {SPEED}x into one "
              f"server, {SUBSCRIBERS} subscribers over {CLIENT_PROCS} processes; RSS every {sample_s:g} s", flush=True)
        srv = LiveServer(tmp / "data")
        subs: Subscribers | None = None
        replay: subprocess.Popen | None = None
        samples: list[list[float]] = []
        try:
            srv.start()
            pid = srv.proc.pid
            rss_start = rss_mb(pid)
            http = httpx.Client(base_url=srv.http, timeout=30)
            http.put(f"/api/matches/{MATCH}", json={"meta": meta, "sheet": sheet}).raise_for_status()
            subs = Subscribers(srv.ws, SUBSCRIBERS)  # all in before the first frame
            t_start = time.monotonic()
            replay_log = open(tmp / "replay.log", "wb")  # its progress lines: a pipe could fill up
            replay = subprocess.Popen([sys.executable, "-m", "pacewire", "replay", str(folder), "--to",
                                       f"{srv.ws}/ingest/{MATCH}", "--speed", str(SPEED)], cwd=ROOT,
                                      stdout=subprocess.DEVNULL, stderr=replay_log)
            next_t = t_start
            report_at: float | None = None  # wall s when the half-time report was first listed
            while replay.poll() is None:
                now = time.monotonic()
                if now >= next_t:
                    clock = next((m["match_time_s"] for m in http.get("/api/matches").json()["matches"]
                                  if m["match_id"] == MATCH), None)
                    samples.append([round(now - t_start, 2), clock, round(rss_mb(pid), 2)])
                    if report_at is None and http.get(f"/api/matches/{MATCH}/reports").json()["reports"]:
                        report_at = round(now - t_start, 2)
                    next_t += sample_s
                time.sleep(min(max(next_t - time.monotonic(), 0.0), 0.2))
            replay_log.close()
            if replay.returncode != 0:
                log = (tmp / "replay.log").read_text(errors="replace")
                raise RuntimeError(f"replay failed ({replay.returncode}): {log[-1000:]}")
            wall = time.monotonic() - t_start
            # the server marks the feed stalled 2 s after the last frame (finished, if the replay sent the
            # recording's period ends); then the tail is final
            deadline = time.monotonic() + 30
            while time.monotonic() < deadline:
                snap = get_json(http, f"/api/matches/{MATCH}/snapshot")
                if snap["health"]["state"] in ("stalled", "finished"):
                    break
                time.sleep(0.5)
            time.sleep(0.5)  # the stall's final delta reaches every subscriber
            at_stall = get_json(http, f"/api/matches/{MATCH}/snapshot")
            stalled = [round(time.monotonic() - t_start, 2), at_stall["match_time_s"], round(rss_mb(pid), 2)]
            # the final whistle, as the operator or provider sends it: the period ends, its last partial
            # second counts in the rolling windows too (during a stall it cannot: the feed may resume)
            http.post(f"/api/matches/{MATCH}/events", json={"type": "period_end", "period": at_stall["period"],
                                                             "frame_id": last_frame_id(tmp / "data" / "matches" / MATCH)
                                                             }).raise_for_status()
            time.sleep(0.5)
            snap = get_json(http, f"/api/matches/{MATCH}/snapshot")
            stats = subs.stop()
            subs = None
            http.close()
        finally:
            if replay is not None and replay.poll() is None:
                replay.kill()
            if subs is not None:
                subs.kill()
            srv.stop()
        got = figures(snap)
        done = cli("analyze", str(tmp / "data" / "matches" / MATCH), "--json", capture_output=True, check=True)
        want = figures(orjson.loads(done.stdout))
    equal = got == want
    diff = differences({"players": got[0], "teams": got[1]}, {"players": want[0], "teams": want[1]})
    if not equal:
        print("  WARNING live figures differ from pacewire analyze: " + "; ".join(diff[:8])
              + (f" ... ({len(diff)} in all)" if len(diff) > 8 else ""), flush=True)
    stall = figures(at_stall)
    stall_diff = differences({"players": stall[0], "teams": stall[1]}, {"players": want[0], "teams": want[1]})
    outside = [d for d in stall_diff if ".windows." not in d]

    gaps = sum(s["gaps"] for s in stats)
    lost = [s["closed"] for s in stats if s["closed"]]
    resyncs = sum(s["resyncs"] for s in stats)
    per_sub = [s["messages"] for s in stats]
    kib = sum(s["bytes"] for s in stats) / max(sum(per_sub), 1) / 1024
    after = [s for s in samples if s[0] >= warm]
    base = after[0][2] if after else samples[-1][2]
    end = samples[-1][2]
    growth = end - base
    out = {"created": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"), "quick": quick,
           "minutes": minutes, "speed": SPEED, "subscribers": SUBSCRIBERS, "cadences_s": list(CADENCES),
           "sample_s": sample_s, "warmup_s": warm, "half_time_report_listed_s": report_at,
           "rss_start_mb": round(rss_start, 2), "after_stall": stalled,
           "columns": ["wall_s", "match_time_s", "rss_mb"], "samples": samples}
    path = OUT.with_name("soak_rss_quick.json") if quick else OUT
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"  replay {wall:.0f} s wall for {minutes:g} min of match; RSS {rss_start:.1f} MB at start, {base:.1f} MB "
          f"after {warm:g} s warm-up, {end:.1f} MB at the end (max {max(s[2] for s in samples):.1f}); the half-time "
          f"report was listed at {report_at} s (its charts load matplotlib once); {stalled[2]:.1f} MB once stalled "
          f"(a finalised copy of the state is shown); curve in {path.relative_to(ROOT)}", flush=True)
    print(f"  subscribers: {min(per_sub)}-{max(per_sub)} messages each ({kib:.1f} KiB on average), {gaps} seq gaps, "
          f"{resyncs} resync snapshots, "
          f"{len(lost)} lost connections{': ' + lost[0] if lost else ''}", flush=True)
    print(f"  figures after the final whistle equal pacewire analyze: {equal}; at the stall before it, "
          f"{len(stall_diff)} window figures differed (the last partial second) and {len(outside)} others", flush=True)
    e = {
        "soak_rss_start_mb": _entry(rss_start, "MB"),
        "soak_rss_end_mb": _entry(end, "MB", base, end / base),
        "soak_rss_growth_mb_after_warmup": _entry(growth, "MB", base, growth / base),
        "soak_seq_gaps": _entry(gaps + resyncs, "gaps"),
        "soak_lost_subscribers": _entry(len(lost), "subscribers"),
        "soak_figures_equal": _entry(1 if equal else 0, "bool"),
    }
    later = [s for s in samples if report_at is not None and s[0] > report_at]
    if len(later) >= 2:  # the second half, after the one-time cost of the first report
        e["soak_rss_growth_mb_second_half"] = _entry(end - later[0][2], "MB", later[0][2],
                                                     (end - later[0][2]) / later[0][2])
    return e


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(f"{k:34} {v}")
