"""Live latency and fan-out of a real ``pacewire serve`` process on loopback.

What is timed: a provider process streams one fictional match (22 players on
the pitch + 14 substitutes never seen, smooth synthetic movement from
bench_engine.synth_match) at 25 Hz real time, one CDF frame per message, on
``WS /ingest``; subscriber processes hold N sockets on ``WS /live``. Latency of
frame N at one subscriber = arrival of the first delta whose ``match_time_s``
covers frame N minus the send time of frame N, both ``time.monotonic()``
(CLOCK_MONOTONIC is one clock for every process on the machine). With
``every`` = one frame that is the processing latency per frame; with
``every=1.0`` (fan-out) each delta is timed from the send of the newest frame
it carries. Frames no delta covered before the subscribers stopped count as
(stop - send), a lower bound, and are reported.

The figure is end to end: it includes the provider's send and the
subscriber's receive. To keep the client side small, subscribers are spread
over CLIENT_PROCS processes and speak RFC 6455 themselves (asyncio protocol,
no per-message Python beyond reading the envelope: see _Sub), offering
permessage-deflate as browsers do, so the server deflates every message for
every socket. Each case prints the CPU the server, the benchmark's own
processes and the rest of the machine used over its window: on a shared
machine, a flagged case is waiting for a CPU, not only for pacewire.

Cases with 1000 subscribers connect while the feed pauses (run_case says why);
in ``--quick`` they also resume with ``since=`` instead of 1000 opening
snapshots, and the overloaded case (1000 subscribers every frame) is left
out, to fit in about half a minute; the full run connects them fresh and
prints how long that took.

Baseline (same run, interleaved case by case, same provider and subscriber
code): a plain ``websockets`` server in its own process forwards each frame
message it receives to the same number of subscribers (``broadcast``: no
decode, no engine, no per-subscriber queue), every frame, or every 25th for
fan-out. ``ratio`` = value / baseline. ``live_match_rss_mb``: the server's
VmRSS after the 100-subscriber case, against its VmRSS just after start.

    python -m tests.bench.bench_live [--quick] [--profile]

``--profile`` runs the pacewire cases alone with ``py-spy record`` on the server during
each window (``pip install py-spy`` into the venv) and prints its hotspots.
Env ``PACEWIRE_BENCH_NICE=-10`` (opt-in, needs the privilege) runs the server and
the benchmark's processes at that priority on a machine shared with other work.
"""
from __future__ import annotations

import asyncio
import base64
import hashlib
import multiprocessing as mp
import os
import resource
import subprocess
import sys
import tempfile
import time
import zlib
from collections.abc import Callable
from dataclasses import dataclass, field
from multiprocessing.connection import Connection
from pathlib import Path

import numpy as np

from tests.bench.bench_engine import N_BENCH, N_SIDE, synth_match
from tests.support import cdf_build as cb
from tests.support.live_server import LiveServer

FPS = 25
MATCH = "m_live_bench"
CLIENT_PROCS = 4  # subscriber processes (1000 subscribers = 4 x 250 sockets)
CONNECT_BATCH = 50  # handshakes in flight per subscriber process
CONNECT_DEADLINE_S = 90.0  # subscribers not in by then are left out of the case (and counted)
PAUSE_FROM = 500  # cases with this many subscribers connect while the feed pauses (see run_case)
NOFILE = 8192  # file descriptors wanted for the server and each client process
CONFIG = "[server]\nmax_subscribers = 5000\n"
CTX = mp.get_context("fork")  # children inherit the prebuilt frames; the parent runs no event loop


@dataclass(frozen=True)
class Case:
    name: str
    subs: int
    every_s: float
    seconds: float  # measured window of feed
    resume: bool = False  # subscribers after the first join with since= (no opening snapshot each)
    warmup_s: float = 1.0  # once all are in (and a paused feed resumed: see run_case), before the window
    grace_s: float = 2.0  # after the window, for the deltas of its last frames to arrive


def cases(quick: bool) -> list[Case]:
    if quick:
        # The compass targets (100 subscribers every frame, 1000 at 1 s) and the 1-subscriber floor; the
        # overloaded case of 1000 subscribers every frame runs in full mode only. 1000 fresh subscribers
        # take the server tens of seconds (an opening snapshot each): they resume instead. Windows give
        # 25 frames x 1, 50 frames x 100 and 3 deltas x 1000 samples; a 0.5 s grace is ten times the
        # every-frame p99 seen here.
        return [Case("1sub", 1, 1 / FPS, 1.0, warmup_s=0.5, grace_s=0.5),
                Case("100subs", 100, 1 / FPS, 2.0, warmup_s=0.5, grace_s=0.5),
                Case("fanout", 1000, 1.0, 3.0, resume=True, warmup_s=1.0, grace_s=0.5)]
    # the 1000-subscriber, every-frame case last: if it overloads the server, nothing after it suffers
    return [Case("1sub", 1, 1 / FPS, 30.0), Case("100subs", 100, 1 / FPS, 180.0),
            Case("fanout", 1000, 1.0, 60.0, warmup_s=3.0), Case("1000subs", 1000, 1 / FPS, 20.0, warmup_s=3.0)]


BUSY_WARN = 0.15  # share of the machine's CPUs used by other work above which a case is flagged
SETTLE_S = 0.5  # between cases, for the server to finish closing the previous sockets


# -- the feed ------------------------------------------------------------------------------------------
def feed_lines(seconds: float) -> list[bytes]:
    """One CDF frame per line, first half, ``seconds`` long at 25 Hz (slot N = frame N)."""
    m = synth_match(max(2 * seconds / 60.0 + 0.1, 3.0))  # synth_match places sprints from 30 s to 40 s before the end
    n = int(seconds * FPS)
    xy = m.halves[0][:n]
    ids = [p["id"] for s in ("home", "away") for p in m.roster_sheet["teams"][s]["players"]]
    status = np.ones(n, bool)
    poss = (np.arange(n) // (20 * FPS)) % 2
    objs = cb.frames(xy, ids, N_SIDE + N_BENCH, fps=FPS, match_id=MATCH, status=status, poss=poss, ball=xy[:, 5])
    return cb.lines(objs)


def setup_body() -> dict:
    extra = range(N_SIDE, N_SIDE + N_BENCH)
    bench = tuple([f"h{i + 1}" for i in extra] + [f"a{i + 1}" for i in extra])
    return {"meta": cb.meta(match_id=MATCH, fps=FPS),
            "sheet": cb.sheet(N_SIDE + N_BENCH, N_SIDE + N_BENCH, gk=("h1", "a1"), bench=bench)}


@dataclass
class Feeder:
    """A provider process streaming ``lines`` at 25 Hz until stopped or out of frames."""

    url: str
    lines: list[bytes]
    send_t: object = None  # shared doubles: monotonic send time of frame N (NaN: not sent)
    n_sent: object = None
    stop: object = None
    proc: mp.Process | None = None
    errors: object = None
    reconnects: object = None
    paused: object = None

    def start(self) -> Feeder:
        self.send_t = CTX.Array("d", len(self.lines), lock=False)
        self.send_t[:] = [float("nan")] * len(self.lines)
        self.n_sent = CTX.Value("l", 0, lock=False)
        self.errors = CTX.Value("l", 0, lock=False)
        self.reconnects = CTX.Value("l", 0, lock=False)
        self.stop = CTX.Event()
        self.paused = CTX.Event()
        self.proc = CTX.Process(target=_feeder_main, args=(self.url, self.lines, self.send_t, self.n_sent,
                                                           self.errors, self.reconnects, self.stop, self.paused),
                                daemon=True)
        self.proc.start()
        return self

    def times(self) -> np.ndarray:
        return np.frombuffer(self.send_t, np.float64).copy()

    def running(self) -> bool:
        return self.proc is not None and self.proc.is_alive()

    def close(self) -> None:
        if self.proc is not None:
            self.stop.set()
            self.proc.join(10)
            if self.proc.is_alive():
                self.proc.kill()
                self.proc.join(5)


def _feeder_main(url: str, lines: list[bytes], send_t, n_sent, errors, reconnects, stop, paused) -> None:
    """Stream on schedule (frame k at t0 + k/25); if the server drops the socket, reconnect and go
    on from the first frame not sent, as a provider does (the late frames then go at once).
    While ``paused`` is set nothing is sent and the schedule moves on by the pause."""
    _nice()
    _uvloop()
    from websockets.asyncio.client import connect
    from websockets.exceptions import ConnectionClosed

    async def main() -> None:
        t0 = time.monotonic() + 0.05
        k = 0
        while k < len(lines) and not stop.is_set():
            try:
                # no keepalive pings from this side: a saturated baseline server must not cut the feed
                async with connect(url, max_size=2**24, open_timeout=30, ping_interval=None) as ws:
                    async def drain() -> None:  # the server answers bad frames; there should be none
                        try:
                            async for _ in ws:
                                errors.value += 1
                        except ConnectionClosed:
                            pass  # the sending loop sees it too, and reconnects

                    reader = asyncio.create_task(drain())
                    while k < len(lines) and not stop.is_set():
                        if paused.is_set():
                            p0 = time.monotonic()
                            while paused.is_set() and not stop.is_set():
                                await asyncio.sleep(0.005)
                            t0 += time.monotonic() - p0
                        delay = t0 + k / FPS - time.monotonic()
                        if delay > 0:
                            await asyncio.sleep(delay)
                        send_t[k] = time.monotonic()
                        await ws.send(lines[k].decode())
                        k += 1
                        n_sent.value = k
                    reader.cancel()
            except (TimeoutError, ConnectionClosed, OSError):
                reconnects.value += 1
                await asyncio.sleep(0.1)

    asyncio.run(main())


# -- subscribers ---------------------------------------------------------------------------------------
def _uvloop() -> None:
    try:
        import uvloop
        asyncio.set_event_loop_policy(uvloop.EventLoopPolicy())
    except ImportError:  # the stdlib loop works too, a little slower
        pass


def _nice(pid: int = 0) -> None:
    """Opt-in (env PACEWIRE_BENCH_NICE, e.g. -10): run a benchmark process (0: this one) at that
    priority, so that other work on a shared machine cannot starve the server or the subscribers."""
    want = os.environ.get("PACEWIRE_BENCH_NICE")
    if want:
        try:
            os.setpriority(os.PRIO_PROCESS, pid, int(want))
        except (PermissionError, ValueError) as exc:
            print(f"  (PACEWIRE_BENCH_NICE={want} not applied: {exc})", flush=True)


def _raise_nofile() -> None:
    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    want = NOFILE if hard == resource.RLIM_INFINITY else min(NOFILE, hard)
    if soft < want:
        resource.setrlimit(resource.RLIMIT_NOFILE, (want, hard))


class _Sub(asyncio.Protocol):
    """One subscriber socket: RFC 6455 client framing, the least client work that keeps the
    server's work real. It offers permessage-deflate as browsers and the ``websockets`` client do,
    adding ``server_no_context_takeover`` so that each message inflates on its own and reading
    its first 256 bytes (type, seq, match_time_s) is enough: the server still deflates every
    message for every socket."""

    def __init__(self, path: str, host: str, rec: _Record, i: int, wait_first: bool) -> None:
        self.path, self.host, self.rec, self.i, self.wait_first = path, host, rec, i, wait_first
        self.opened: asyncio.Future = asyncio.get_running_loop().create_future()
        self.transport: asyncio.Transport | None = None
        self.upgraded = False
        self.deflate = False
        self.buf = b""
        self.frag: list[bytes] = []
        self.frag_rsv1 = False

    def connection_made(self, transport: asyncio.Transport) -> None:
        self.transport = transport
        self.ws_key = base64.b64encode(os.urandom(16)).decode()
        transport.write((f"GET {self.path} HTTP/1.1\r\nHost: {self.host}\r\nUpgrade: websocket\r\n"
                         f"Connection: Upgrade\r\nSec-WebSocket-Key: {self.ws_key}\r\nSec-WebSocket-Version: 13\r\n"
                         "Sec-WebSocket-Extensions: permessage-deflate; server_no_context_takeover; "
                         "client_max_window_bits\r\n\r\n").encode())

    def connection_lost(self, exc: Exception | None) -> None:
        if not self.opened.done():
            self.opened.set_exception(ConnectionError(f"closed before the handshake: {exc}"))

    def data_received(self, data: bytes) -> None:
        now = time.monotonic()
        buf = self.buf + data if self.buf else data
        if not self.upgraded:
            end = buf.find(b"\r\n\r\n")
            if end < 0:
                self.buf = buf
                return
            head = buf[:end].decode("latin-1").split("\r\n")
            headers = {k.strip().lower(): v.strip() for k, _, v in (h.partition(":") for h in head[1:])}
            accept = base64.b64encode(hashlib.sha1((self.ws_key + _WS_GUID).encode()).digest()).decode()
            if " 101 " not in head[0] + " " or headers.get("sec-websocket-accept") != accept:
                self.opened.set_exception(ConnectionError(head[0]))
                self.transport.close()
                return
            self.deflate = "permessage-deflate" in headers.get("sec-websocket-extensions", "")
            self.upgraded = True
            self.rec.deflate = self.deflate
            buf = buf[end + 4:]
            if not self.wait_first:
                self.opened.set_result(None)
        pos, n_buf = 0, len(buf)
        while n_buf - pos >= 2:
            b0, b1 = buf[pos], buf[pos + 1]
            n, off = b1 & 0x7F, pos + 2
            if n == 126:
                if n_buf - pos < 4:
                    break
                n, off = int.from_bytes(buf[pos + 2:pos + 4], "big"), pos + 4
            elif n == 127:
                if n_buf - pos < 10:
                    break
                n, off = int.from_bytes(buf[pos + 2:pos + 10], "big"), pos + 10
            if n_buf - off < n:
                break
            payload = buf[off:off + n]
            pos = off + n
            op = b0 & 0x0F
            if op >= 8:
                self._control(op, payload)
                continue
            if not b0 & 0x80:  # a fragment: keep until the last one
                if op:
                    self.frag_rsv1 = bool(b0 & 0x40)
                self.frag.append(payload)
                continue
            rsv1 = bool(b0 & 0x40)
            if self.frag:
                self.frag.append(payload)
                payload, rsv1 = b"".join(self.frag), self.frag_rsv1
                self.frag = []
            self.rec.message(self, payload, rsv1, now)
        self.buf = buf[pos:]

    def _control(self, op: int, payload: bytes) -> None:
        if op == 9:  # ping: a masked pong with the same payload
            mask = os.urandom(4)
            body = bytes(c ^ mask[k % 4] for k, c in enumerate(payload))
            self.transport.write(bytes([0x8A, 0x80 | len(payload)]) + mask + body)
        elif op == 8:
            self.transport.close()


_WS_GUID = "258EAFA5-E914-47DA-95CA-C5AB0DC85B11"
_TAIL = b"\x00\x00\xff\xff"


class _Record:
    """Arrivals and key values of every figure delivery, per socket, in one subscriber process."""

    SKIP = b'{"type":"'
    KEEP = (b'{"type":"delta"', b'{"type":"snapshot"')

    def __init__(self, n: int, field_name: str) -> None:
        self.key = f'"{field_name}":'.encode()
        self.arrivals: list[list[float]] = [[] for _ in range(n)]
        self.values: list[list[float]] = [[] for _ in range(n)]
        self.stats = {"messages": 0, "bytes": 0, "resyncs": 0, "failed": 0, "sampled": 0, "sampled_bytes": 0}
        self.deflate = False
        self.last_seq: int | None = None  # of socket 0, for resumed subscriptions

    def message(self, sub: _Sub, payload: bytes, rsv1: bool, now: float) -> None:
        st = self.stats
        st["messages"] += 1
        st["bytes"] += len(payload)
        head = zlib.decompressobj(-15).decompress(payload, 256) if rsv1 else payload[:256]
        if head.startswith(self.KEEP[1]):
            full = zlib.decompressobj(-15).decompress(payload + _TAIL) if rsv1 else payload
            st["resyncs"] += b'"resync":true' in full
        elif sub.i == 0 and st["messages"] % 8 == 0:  # delta sizes, from a sample
            st["sampled"] += 1
            st["sampled_bytes"] += len(zlib.decompressobj(-15).decompress(payload + _TAIL) if rsv1 else payload)
        if not sub.opened.done():
            if head.startswith(b'{"type":"error"'):
                sub.opened.set_exception(ConnectionError(head.decode(errors="replace")))
                return
            sub.opened.set_result(None)  # the opening snapshot: the subscription is in
        if head.startswith(self.SKIP) and not head.startswith(self.KEEP):
            return  # health, period, alert...: not a figure delivery
        if sub.i == 0:
            q = head.find(b'"seq":')
            if q >= 0:
                self.last_seq = int(head[q + 6:head.index(b",", q)])
        a = head.find(self.key)
        if a < 0:
            return
        a += len(self.key)
        b = a
        while head[b] not in (44, 125):  # ',' '}'
            b += 1
        self.arrivals[sub.i].append(now)
        self.values[sub.i].append(float(head[a:b]))


def _client_main(url: str, n: int, field_name: str, wait_first: bool, resume: bool, conn: Connection) -> None:
    """Hold ``n`` subscriber sockets on ``url``; record each delta/snapshot (or, from the baseline,
    each forwarded frame) until told to stop; send the records back. ``resume``: only the first
    socket opens with a snapshot, the others with ``since=`` its latest seq (a resume gets no opening
    snapshot), which connects 1000 subscribers in a fraction of the time."""
    _nice()
    _uvloop()
    rest = url.removeprefix("ws://")
    hostport, _, path = rest.partition("/")
    host, _, port = hostport.partition(":")

    async def main() -> None:
        loop = asyncio.get_running_loop()
        rec = _Record(n, field_name)
        subs: list[_Sub] = []
        gate = asyncio.Semaphore(CONNECT_BATCH)

        async def open_one(i: int) -> None:
            async with gate:
                since = f"&since={rec.last_seq}" if resume and i and rec.last_seq is not None else ""
                # a resumed subscription may open with no message at all (since = the latest seq)
                sub = _Sub("/" + path + since, hostport, rec, i, wait_first and not since)
                try:
                    await asyncio.wait_for(loop.create_connection(lambda: sub, host, int(port)), 60)
                    await asyncio.wait_for(sub.opened, 120)
                except (Exception, asyncio.CancelledError):
                    rec.stats["failed"] += 1
                    if sub.transport is not None:
                        sub.transport.abort()
                    return
                subs.append(sub)

        if resume and n > 1:
            await open_one(0)
        opening = [asyncio.create_task(open_one(i)) for i in range(1 if resume and n > 1 else 0, n)]
        _, late = await asyncio.wait(opening, timeout=CONNECT_DEADLINE_S) if opening else (None, ())
        for t in late:  # not in by the deadline: the case runs with those that are
            t.cancel()
        await asyncio.gather(*late, return_exceptions=True)
        conn.send(("ready", len(subs)))
        cpu0 = time.process_time()
        await loop.run_in_executor(None, conn.recv)  # "stop"
        cpu = time.process_time() - cpu0
        t_stop = time.monotonic()
        for sub in subs:
            sub.transport.abort()  # quick and certain; the server sees the sockets go
        rec.stats["deflate"] = int(rec.deflate)
        conn.send(("done", t_stop, cpu, rec.stats,
                   [(np.asarray(rec.arrivals[sub.i]), np.asarray(rec.values[sub.i])) for sub in subs]))

    asyncio.run(main())


@dataclass
class Recv:
    t_stop: float
    cpu_s: float  # client CPU during the whole case, all processes
    stats: dict = field(default_factory=dict)
    socks: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list)


def subscribe(url: str, n: int, field_name: str, wait_first: bool, hold: Callable[[list[int]], None],
              resume: bool = False) -> Recv:
    """Open ``n`` subscribers over up to CLIENT_PROCS processes, call ``hold()`` once all are in, stop them."""
    n_procs = min(CLIENT_PROCS, n)
    parts = [n // n_procs + (1 if k < n % n_procs else 0) for k in range(n_procs)]
    procs, conns = [], []
    for k in parts:
        a, b = CTX.Pipe()
        p = CTX.Process(target=_client_main, args=(url, k, field_name, wait_first, resume, b), daemon=True)
        p.start()
        procs.append(p)
        conns.append(a)
    connected = 0
    try:
        for c in conns:
            if not c.poll(CONNECT_DEADLINE_S + 60):
                raise RuntimeError(f"subscriber process silent {CONNECT_DEADLINE_S + 60:g} s")
            _, ok = c.recv()
            connected += ok
        if connected < n:
            print(f"  WARNING only {connected} of {n} subscribers connected to {url}", flush=True)
        if connected == 0:
            raise RuntimeError(f"no subscriber of {url} could connect")
        hold([p.pid for p in procs])
        for c in conns:
            c.send("stop")
        out = Recv(0.0, 0.0, {})
        for c in conns:
            if not c.poll(120):
                raise RuntimeError("subscribers did not report in 120 s")
            _, t_stop, cpu, stats, socks = c.recv()
            out.t_stop = max(out.t_stop, t_stop)
            out.cpu_s += cpu
            for k2, v in stats.items():
                out.stats[k2] = out.stats.get(k2, 0) + v
            out.socks += socks
        return out
    finally:
        for p in procs:
            p.join(10)
            if p.is_alive():
                p.kill()
                p.join(5)


# -- the baseline server ---------------------------------------------------------------------------------
def _echo_main(port: int, started) -> None:
    """Plain websockets: /ingest messages go, unchanged, to every /sub/STRIDE subscriber whose
    stride divides the frame number (1: every frame, 25: one a second)."""
    _nice()
    _uvloop()
    from websockets.asyncio.server import broadcast, serve

    groups: dict[int, set] = {}

    async def handler(ws) -> None:
        path = ws.request.path
        if path.startswith("/ingest"):
            n = 0
            async for msg in ws:
                for stride, subs in groups.items():
                    if n % stride == 0 and subs:
                        broadcast(subs, msg)
                n += 1
            return
        stride = int(path.rsplit("/", 1)[1])
        subs = groups.setdefault(stride, set())
        subs.add(ws)
        try:
            await ws.wait_closed()
        finally:
            subs.discard(ws)

    async def main() -> None:
        async with serve(handler, "127.0.0.1", port, max_size=2**24, ping_interval=None):
            started.set()
            await asyncio.Future()

    asyncio.run(main())


# -- measuring ---------------------------------------------------------------------------------------------
def cpu_s(pid: int) -> float:
    """User + system CPU seconds of a process (Linux /proc)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024.0
    raise RuntimeError("no VmRSS")


def per_frame_ms(send: np.ndarray, rec: Recv, t0: float, t1: float, scale: float) -> tuple[np.ndarray, int]:
    """Latency of every (frame sent in [t0, t1], subscriber) pair: first message whose value covers
    the frame (value = frame number x ``scale``). Frames never covered before the stop count as
    (stop - send), a lower bound; their number is returned too."""
    frames = np.flatnonzero((send >= t0) & (send <= t1))
    need = frames * scale - 1e-6
    out, missing = [], 0
    for arr, val in rec.socks:
        if len(val) == 0:
            out.append(rec.t_stop - send[frames])
            missing += len(frames)
            continue
        idx = np.searchsorted(np.maximum.accumulate(val), need, side="left")
        got = idx < len(val)
        missing += int((~got).sum())
        out.append(np.where(got, arr[np.minimum(idx, len(val) - 1)], rec.t_stop) - send[frames])
    return np.concatenate(out) * 1e3, missing


def per_message_ms(send: np.ndarray, rec: Recv, t0: float, t1: float, scale: float) -> np.ndarray:
    """Latency of every message whose newest frame was sent in [t0, t1]: arrival - send of that frame."""
    out = []
    for arr, val in rec.socks:
        n = np.rint(val / scale).astype(np.int64)
        ok = (n >= 0) & (n < len(send))
        arr, n = arr[ok], n[ok]
        sel = (send[n] >= t0) & (send[n] <= t1)
        out.append(arr[sel] - send[n[sel]])
    return np.concatenate(out) * 1e3 if out else np.zeros(0)


@dataclass
class Result:
    p50_ms: float
    p99_ms: float
    samples: int
    missing: int
    server_cpu: float  # cores used over the window: the server process
    client_cpu: float  # the subscriber processes and the provider
    other_cpu: float  # everything else on the machine (other work shares these CPUs)
    msg_bytes: float  # mean message size on the wire (deflated)
    raw_bytes: float  # mean delta size inflated (a sample)
    resyncs: int
    connected: int
    connect_s: float


def machine_busy_s() -> float:
    """CPU seconds all CPUs spent not idle since boot (Linux /proc/stat)."""
    v = [int(x) for x in Path("/proc/stat").read_text().split("\n", 1)[0].split()[1:]]
    return (sum(v[:8]) - v[3] - v[4]) / os.sysconf("SC_CLK_TCK")


def scrape(http: str | None) -> dict[str, float]:
    """The server's own counters (GET /metrics): frames in, blocks applied and their time, messages out."""
    if http is None:
        return {}
    import httpx

    want = ("pacewire_frames_in_total", "pacewire_processing_seconds_count", "pacewire_processing_seconds_sum",
            "pacewire_messages_out_total", "pacewire_dropped_backlogs_total")
    out = {}
    for line in httpx.get(f"{http}/metrics", timeout=30).text.splitlines():
        name, _, value = line.partition(" ")
        if name in want:
            out[name] = float(value)
    return out


def run_case(case: Case, url: str, field_name: str, scale: float, wait_first: bool, feeder: Feeder,
             server_pid: int, spy: Path | None = None, http: str | None = None) -> Result:
    window: dict[str, float] = {}
    counters: list[dict[str, float]] = []

    def hold(client_pids: list[int]) -> None:
        window["connect_s"] = time.monotonic() - t_case
        feeder.paused.clear()
        time.sleep(case.warmup_s)
        ours = [*client_pids, feeder.proc.pid]
        prof = None
        if spy is not None:
            prof = subprocess.Popen([str(Path(sys.executable).with_name("py-spy")), "record", "--pid", str(server_pid),
                                     "-d", str(int(case.seconds)), "-r", "200", "-f", "raw", "-o", str(spy)],
                                    stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        counters.append(scrape(http))
        c0, o0, m0 = cpu_s(server_pid), sum(map(cpu_s, ours)), machine_busy_s()
        window["t0"] = t0 = time.monotonic()
        time.sleep(case.seconds)
        window["t1"] = t1 = time.monotonic()
        c1, o1, m1 = cpu_s(server_pid), sum(map(cpu_s, ours)), machine_busy_s()
        counters.append(scrape(http))
        window["server"], window["clients"] = (c1 - c0) / (t1 - t0), (o1 - o0) / (t1 - t0)
        window["other"] = max((m1 - m0) - (c1 - c0) - (o1 - o0), 0.0) / (t1 - t0)
        time.sleep(case.grace_s + (case.every_s if case.every_s >= 0.5 else 0.0))
        if prof is not None:
            prof.wait(60)

    # Many subscribers join while the feed pauses: every subscriber already in gets deltas while
    # the others handshake, and at 25 Hz that alone saturates a one-process server (and the plain
    # websockets floor) before all are in. The pause ends when all are in, then the warm-up runs.
    pause = case.subs >= PAUSE_FROM
    if pause:
        feeder.paused.set()
    t_case = time.monotonic()
    try:
        rec = subscribe(url, case.subs, field_name, wait_first, hold, case.resume)
    finally:
        feeder.paused.clear()
    if not feeder.running():
        raise RuntimeError("the feed ran out of frames before the case ended: lengthen feed_lines")
    send = feeder.times()
    if case.every_s < 0.5:
        lat, missing = per_frame_ms(send, rec, window["t0"], window["t1"], scale)
    else:
        lat = per_message_ms(send, rec, window["t0"], window["t1"], scale)
        # deltas due in the window that never came (the server fell behind): not in the percentiles.
        # A delta goes with the first frame after its cadence is up, so they come every + ~1/2 frame apart.
        due = int((window["t1"] - window["t0"]) / (case.every_s + 1.0 / FPS)) - 1
        missing = max(len(rec.socks) * due - len(lat), 0)
    if len(lat) == 0:
        raise RuntimeError(f"{case.name}: no delivery was timed")
    p50, p99 = np.percentile(lat, [50, 99])
    st = rec.stats
    if counters and counters[0]:
        d = {k: counters[1][k] - counters[0].get(k, 0.0) for k in counters[1]}
        blocks = max(d.get("pacewire_processing_seconds_count", 0.0), 1.0)
        n_win = [int(((a >= window["t0"]) & (a <= window["t1"])).sum()) for a, _ in rec.socks]
        frames_in = max(d.get("pacewire_frames_in_total", 0.0), 1.0)
        cpu_ms_per_frame = 1e3 * window["server"] * (window["t1"] - window["t0"]) / frames_in
        print(f"    server over the window: {frames_in:.0f} frames in {blocks:.0f} blocks, "
              f"{1e3 * d.get('pacewire_processing_seconds_sum', 0) / blocks:.2f} ms wall per block (its own "
              f"histogram: engine + snapshot + delta + writes to the subscribers that take them at once), "
              f"{cpu_ms_per_frame:.2f} ms CPU per frame in all; {np.mean(n_win):.1f} deltas per subscriber; "
              f"{d.get('pacewire_dropped_backlogs_total', 0):.0f} backlogs dropped", flush=True)
    return Result(float(p50), float(p99), len(lat), missing, window["server"], window["clients"], window["other"],
                  st["bytes"] / max(st["messages"], 1), st["sampled_bytes"] / max(st["sampled"], 1),
                  st["resyncs"], len(rec.socks), window["connect_s"])


def _show(label: str, case: Case, r: Result) -> None:
    print(f"  {label:9} {case.name:9} {case.subs:5d} subs every {case.every_s:g} s: p50 {r.p50_ms:8.2f} ms  "
          f"p99 {r.p99_ms:8.2f} ms  ({r.samples} samples{f', {r.missing} never delivered' if r.missing else ''}"
          f"{f', {r.resyncs} resync snapshots' if r.resyncs else ''}"
          f"{f', only {r.connected} connected' if r.connected < case.subs else ''}; all in after {r.connect_s:.1f} s"
          f"{' resuming with since=' if case.resume and case.subs > 1 else ''}); CPU cores: server "
          f"{r.server_cpu:.2f}, subscribers+provider {r.client_cpu:.2f}, other work {r.other_cpu:.2f}; "
          f"{r.raw_bytes / 1024:.1f} KiB/delta, {r.msg_bytes / 1024:.1f} KiB/message deflated", flush=True)
    if r.missing > 0.01 * r.samples:
        print(f"  WARNING {r.missing} deliveries due in the window never came: the server did not keep up, so "
              "these figures are a throughput limit (they grow with the window), not a latency", flush=True)
    if r.other_cpu > BUSY_WARN * (os.cpu_count() or 1):
        print(f"  WARNING other work on this machine took {r.other_cpu:.2f} of {os.cpu_count()} CPUs during this "
              "window: these latencies include waiting for a CPU", flush=True)


def feed_seconds(plan: list[Case]) -> float:
    """Enough feed for every case plus connecting, warm-up, grace and settling (generous)."""
    return 2 * sum(c.seconds + c.warmup_s + c.grace_s + SETTLE_S + c.every_s + 10.0 + c.subs / 40.0
                   for c in plan) + 30.0


@dataclass
class Measured:
    live: dict[str, Result]
    base: dict[str, Result]
    rss_mb: float
    rss_idle_mb: float


def measure(plan: list[Case], lines: list[bytes], tmp: Path, baseline: bool = True, spy: bool = False,
            prime_s: float = 2.0) -> Measured:
    """Each case against the baseline server, then against pacewire, one after the other, so that
    both see the same load from the rest of the machine. Both feeds run all along."""
    import httpx

    from tests.support.live_server import free_port

    port = free_port()
    started = CTX.Event()
    echo = CTX.Process(target=_echo_main, args=(port, started), daemon=True)
    server = LiveServer(tmp / "data", config_text=CONFIG)
    feeders: list[Feeder] = []
    try:
        server.start()
        pid = server.proc.pid
        _nice(pid)
        rss_idle = rss_mb(pid)
        httpx.put(f"{server.http}/api/matches/{MATCH}", json=setup_body(), timeout=30).raise_for_status()
        feed = Feeder(f"{server.ws}/ingest/{MATCH}", lines).start()
        feeders.append(feed)
        if baseline:
            echo.start()
            if not started.wait(30):
                raise RuntimeError("baseline server did not start")
            echo_feed = Feeder(f"ws://127.0.0.1:{port}/ingest", lines).start()
            feeders.append(echo_feed)
        time.sleep(prime_s)  # the engine fills its smoothing window (1 s), before the first case's warm-up
        live, base, rss = {}, {}, float("nan")
        for case in plan:
            if baseline:
                stride = max(int(round(case.every_s * FPS)), 1)
                base[case.name] = r = run_case(case, f"ws://127.0.0.1:{port}/sub/{stride}", "frame_id", 1.0, False,
                                               echo_feed, echo.pid)
                _show("baseline", case, r)
                time.sleep(SETTLE_S)
            raw = tmp / f"py-spy-{case.name}.txt" if spy else None
            url = f"{server.ws}/live/{MATCH}?every={case.every_s:g}"
            live[case.name] = r = run_case(case, url, "match_time_s", 1.0 / FPS, True, feed, pid, raw, server.http)
            _show("pacewire", case, r)
            if raw is not None:
                print(spy_summary(raw), flush=True)
            if case.name == "100subs":
                rss = rss_mb(pid)
            settle(server.http)
        if feed.errors.value:
            print(f"  WARNING the server answered {feed.errors.value} ingest messages with errors")
        if feed.reconnects.value:
            print(f"  WARNING the server dropped the provider's ingest socket {feed.reconnects.value} times "
                  "(the provider reconnected and went on)")
        return Measured(live, base, rss, rss_idle)
    finally:
        for f in feeders:
            f.close()
        if echo.pid is not None:
            echo.kill()
            echo.join(5)
        server.stop()


def spy_summary(raw: Path, top: int = 18) -> str:
    """The server's hotspots from ``py-spy record -f raw``: share of samples per file:function,
    by self time and by inclusive time."""
    import re
    from collections import Counter

    if not raw.exists():
        return "    (no py-spy profile: is py-spy installed in the venv and allowed to attach?)"
    name = re.compile(r"^(.*) \((.*?)(?::\d+)?\)$")
    own, incl, total = Counter(), Counter(), 0
    for line in raw.read_text().splitlines():
        stack, _, n = line.rpartition(" ")
        if not n.isdigit():
            continue
        total += int(n)
        frames = []
        for f in stack.split(";"):
            m = name.match(f)
            path = m.group(2).split("site-packages/")[-1] if m else ""
            frames.append(f"{path}:{m.group(1)}" if m else f)
        own[frames[-1]] += int(n)
        for f in set(frames):
            incl[f] += int(n)
    rows = [f"    py-spy, {total} samples of the server's busy threads (share of samples):"]
    rows += ["      self   " + "  ".join(f"{100 * c / total:4.1f}% {f}" for f, c in own.most_common(top)[k:k + 1])
             for k in range(min(top, len(own)))]
    skip = ("<frozen runpy>", "service/cli.py", "service/live/server.py", "uvicorn/server.py", "uvicorn/_compat.py",
            "asyncio/runners.py", "asyncio/base_events.py", "asyncio/events.py")
    inner = [(f, c) for f, c in incl.most_common() if not f.startswith(skip)][:top]
    rows += [f"      total  {100 * c / total:4.1f}% {f}" for f, c in inner]
    return "\n".join(rows)


def settle(http: str, timeout: float = 120.0) -> None:
    """Wait until the server has let go of the last case's subscribers."""
    import httpx

    time.sleep(SETTLE_S)
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            listed = httpx.get(f"{http}/api/matches", timeout=10).json()["matches"]
            if all(m["subscribers"] == 0 for m in listed):
                return
        except httpx.HTTPError:
            pass
        time.sleep(0.5)
    print(f"  WARNING the server still holds subscribers {timeout:g} s after they left", flush=True)


def _entry(value: float, unit: str, baseline: float | None = None) -> dict:
    ratio = None if baseline is None or baseline == 0 else value / baseline
    return {"value": round(float(value), 4), "unit": unit,
            "baseline": None if baseline is None else round(float(baseline), 4),
            "ratio": None if ratio is None else round(float(ratio), 4)}


def run(quick: bool) -> dict[str, dict]:
    _raise_nofile()  # the server process and the subscriber processes inherit it
    plan = cases(quick)
    seconds = feed_seconds(plan)
    lines = feed_lines(seconds)
    print(f"bench_live: {N_SIDE * 2} players on the pitch + {N_BENCH * 2} substitutes, {FPS} Hz real time, "
          f"{np.mean([len(x) for x in lines[:100]]) / 1024:.1f} KiB/frame; subscribers over up to {CLIENT_PROCS} "
          f"processes; {os.cpu_count()} CPUs on this machine", flush=True)
    with tempfile.TemporaryDirectory(prefix="pacewire-bench-") as tmp:
        m = measure(plan, lines, Path(tmp), prime_s=1.0 if quick else 2.0)
    live, base, rss, rss_idle = m.live, m.base, m.rss_mb, m.rss_idle_mb

    e: dict[str, dict] = {}
    for case, label in (("1sub", "1sub"), ("100subs", "100subs"), ("1000subs", "1000subs")):
        if case not in live:
            continue
        e[f"latency_p50_ms_{label}"] = _entry(live[case].p50_ms, "ms", base[case].p50_ms)
        e[f"latency_p99_ms_{label}"] = _entry(live[case].p99_ms, "ms", base[case].p99_ms)
    e["fanout_p50_ms_1000subs"] = _entry(live["fanout"].p50_ms, "ms", base["fanout"].p50_ms)
    e["fanout_p99_ms_1000subs"] = _entry(live["fanout"].p99_ms, "ms", base["fanout"].p99_ms)
    e["live_match_rss_mb"] = _entry(rss, "MB", rss_idle)
    goals = (("latency_p99_ms_100subs", 10.0), ("fanout_p99_ms_1000subs", 250.0), ("live_match_rss_mb", 100.0))
    print("  targets: " + "; ".join(f"{k} <= {g:g}: {'met' if e[k]['value'] <= g else 'MISSED'} ({e[k]['value']:.4g})"
                                    for k, g in goals))
    return e


def profile(quick: bool) -> None:
    """The live cases alone, with py-spy recording the server during each window."""
    _raise_nofile()
    plan = cases(quick)
    lines = feed_lines(feed_seconds(plan))
    with tempfile.TemporaryDirectory(prefix="pacewire-bench-") as tmp:
        measure(plan, lines, Path(tmp), baseline=False, spy=True)


if __name__ == "__main__":
    if "--profile" in sys.argv:
        profile("--quick" in sys.argv)
        sys.exit(0)
    for name, ent in run("--quick" in sys.argv).items():
        print(f"{name:28} {ent['value']:>12} {ent['unit']}  baseline {ent['baseline']}  ratio {ent['ratio']}")
