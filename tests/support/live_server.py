"""Start a real ``pacewire serve`` on a free loopback port, for end-to-end tests."""
from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class LiveServer:
    def __init__(self, data: Path, *args: str, config_text: str | None = None, env: dict | None = None) -> None:
        self.data = data
        self.port = free_port()
        self.args = list(args)
        self.env = env
        self.config = None
        if config_text is not None:
            self.config = data.parent / f"pacewire-{self.port}.toml"
            self.config.write_text(config_text)
        self.proc: subprocess.Popen | None = None
        self.log = data.parent / f"server-{self.port}.log"

    @property
    def http(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    @property
    def ws(self) -> str:
        return f"ws://127.0.0.1:{self.port}"

    def start(self, timeout: float = 60.0) -> LiveServer:
        cmd = [sys.executable, "-m", "pacewire", "serve", "--port", str(self.port), "--data", str(self.data),
               "--log-level", "warning", *self.args]
        if self.config is not None:
            cmd += ["--config", str(self.config)]
        env = {**os.environ, **(self.env or {})}
        self._logfh = open(self.log, "ab")
        self.proc = subprocess.Popen(cmd, stdout=self._logfh, stderr=subprocess.STDOUT, env=env)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited: {self.log.read_text()[-2000:]}")
            try:
                if httpx.get(self.http + "/healthz", timeout=1.0).status_code == 200:
                    return self
            except httpx.HTTPError:
                pass
            time.sleep(0.1)
        raise RuntimeError("server did not start in time")

    def kill9(self) -> None:
        assert self.proc is not None
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(10)

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)
        if getattr(self, "_logfh", None):
            self._logfh.close()
