"""A throw-away ``earfold serve`` on a loopback port, for the measurement scripts.

The scripts in this package measure a real server process (so that its CPU time and
memory can be read from ``/proc``) and never talk to anything but loopback addresses.
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from urllib.parse import urlsplit

import httpx

#: How long a spawned server may take to answer its health check (s).
START_TIMEOUT_S = 60.0


def require_loopback(url: str) -> str:
    """``url`` if its host is a loopback address; ValueError otherwise."""
    from earfold.service.serve_cli import is_loopback

    host = urlsplit(url).hostname or ""
    if not is_loopback(host):
        raise ValueError(
            f"the measurement scripts only talk to loopback addresses; got "
            f"{url!r} (use http://127.0.0.1:PORT)"
        )
    return url.rstrip("/")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class LocalServer:
    """``earfold serve`` with ``workers`` workers on a free port and a temporary data dir.

    Use as a context manager; on exit the server gets SIGTERM (its workers hand jobs
    back and stop) and the data directory is removed.
    """

    def __init__(
        self,
        workers: int,
        extra_args: list[str] | None = None,
        data_dir: str | os.PathLike[str] | None = None,
    ) -> None:
        self.workers = workers
        self.extra_args = list(extra_args or [])
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        # A given data directory is the caller's (a restart test reuses it) and is kept.
        self._own_dir = data_dir is None
        self.data_dir = (
            Path(tempfile.mkdtemp(prefix="earfold-measure-")) / "data"
            if data_dir is None
            else Path(data_dir)
        )
        self.proc: subprocess.Popen | None = None

    @property
    def pid(self) -> int:
        assert self.proc is not None
        return self.proc.pid

    def __enter__(self) -> LocalServer:
        self.proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "earfold.service.serve_cli",
                "--port",
                str(self.port),
                "--data-dir",
                str(self.data_dir),
                "--workers",
                str(self.workers),
                *self.extra_args,
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            text=True,
        )
        deadline = time.monotonic() + START_TIMEOUT_S
        with httpx.Client(base_url=self.url, timeout=5) as http:
            while True:
                try:
                    if http.get("/v1/health").status_code == 200:
                        return self
                except httpx.TransportError:
                    pass
                if self.proc.poll() is not None or time.monotonic() > deadline:
                    ended = self.proc.poll() is not None and self.proc.stderr is not None
                    err = self.proc.stderr.read() if ended and self.proc.stderr else ""
                    self.__exit__(None, None, None)
                    raise RuntimeError(f"the server did not start: {err.strip()}")
                time.sleep(0.1)

    def __exit__(self, *exc: object) -> None:
        if self.proc is not None:
            if self.proc.poll() is None:
                self.proc.send_signal(signal.SIGTERM)
                try:
                    self.proc.wait(20)
                except subprocess.TimeoutExpired:
                    self.proc.kill()
                    self.proc.wait()
            if self.proc.stderr is not None:
                self.proc.stderr.close()
        if self._own_dir:
            shutil.rmtree(self.data_dir.parent, ignore_errors=True)


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of process ``pid`` so far (s), from ``/proc/PID/stat``."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def status_kib(pid: int, key: str) -> int:
    """A ``kB`` field (``VmRSS``, ``VmHWM`` ...) of ``/proc/PID/status``."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    raise KeyError(key)
