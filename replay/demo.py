"""``make demo`` / ``pacewire demo``: the fictional demo match, served and replayed.

Generates the full demo match into the data folder if it is not there yet,
starts the server, replays the match into it (4x by default) and prints where
to look. Runs until Ctrl-C, then stops both cleanly.
"""
from __future__ import annotations

import argparse
import asyncio
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx

CLIENT_HINT = """\
Subscribe from a script (the JSON stream every program gets):
    .venv/bin/python -c "import asyncio, websockets
async def main():
    async with websockets.connect('ws://{host}:{port}/live/{match}?every=1') as ws:
        async for msg in ws: print(msg[:160])
asyncio.run(main())"
"""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--data", default="data", help="data folder (default ./data)")
    p.add_argument("--port", type=int, default=8750)
    p.add_argument("--speed", default="4", help="replay speed, times real time (default 4)")
    p.add_argument("--minutes", type=float, default=95.0, help="length of the generated demo match")
    p.add_argument("--seed", type=int, default=2026)


def run(args: argparse.Namespace) -> int:
    from pacewire.replay.player import _speed, replay
    from pacewire.replay.synth import write_match

    data = Path(args.data)
    folder = data / "demo_match"
    if not (folder / "match.json").exists():
        print(f"generating the demo match ({args.minutes:g} min, fictional) into {folder} ...", flush=True)
        t0 = time.monotonic()
        write_match(folder, minutes=args.minutes, seed=args.seed)
        print(f"  done in {time.monotonic() - t0:.0f} s", flush=True)
    host = "127.0.0.1"
    server = subprocess.Popen([sys.executable, "-m", "pacewire", "serve", "--host", host, "--port", str(args.port),
                               "--data", str(data / "server"), "--log-level", "warning"])
    try:
        deadline = time.monotonic() + 60
        while True:
            if server.poll() is not None:
                print("pacewire demo: the server did not start (is the port taken? try --port)", file=sys.stderr)
                return 2
            try:
                if httpx.get(f"http://{host}:{args.port}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                print("pacewire demo: the server did not answer within 60 s", file=sys.stderr)
                return 2
            time.sleep(0.2)
        match = "demo"
        print(f"\nbench page:  http://{host}:{args.port}/   (match '{match}', replayed at {args.speed}x)")
        print(CLIENT_HINT.format(host=host, port=args.port, match=match))
        print("Figures are estimates from positional data; decisions on injury, return-to-play and substitution "
              "stay with the club's qualified medical and performance staff.")
        print("Ctrl-C to stop.\n", flush=True)
        stop = asyncio.Event()

        async def go() -> None:
            loop = asyncio.get_running_loop()
            loop.add_signal_handler(signal.SIGINT, stop.set)
            loop.add_signal_handler(signal.SIGTERM, stop.set)
            n = 1
            while not stop.is_set():
                mid = match if n == 1 else f"{match}-{n}"
                await replay(folder, f"ws://{host}:{args.port}/ingest/{mid}", _speed(args.speed), stop=stop)
                n += 1

        asyncio.run(go())
        print("\nstopping ...", flush=True)
        return 0
    finally:
        if server.poll() is None:
            server.send_signal(signal.SIGINT)
            try:
                server.wait(15)
            except subprocess.TimeoutExpired:
                server.kill()
