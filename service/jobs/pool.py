"""The worker processes of ``earfold serve``: started, watched, restarted, stopped."""

from __future__ import annotations

import os
import subprocess
import sys
import threading

from ..settings import ServiceSettings
from .worker import SETTINGS_ENV

#: How often the pool checks that its workers are alive (s).
WATCH_INTERVAL_S = 0.5

#: Time workers get to hand their jobs back on shutdown before they are killed (s).
STOP_GRACE_S = 5.0


def worker_module(queue_url: str) -> str:
    """The module a worker process of ``queue_url``'s backend runs."""
    if queue_url.startswith(("redis://", "rediss://")):
        return "earfold.service.jobs.redis_worker"
    return "earfold.service.jobs.worker"


class WorkerPool:
    """``count`` worker processes that are restarted when they die.

    A worker killed mid-render (SIGKILL, OOM) is replaced at once; its job is taken
    again once its lease expires, by the new worker or another.
    """

    def __init__(self, settings: ServiceSettings, count: int, *, module: str | None = None) -> None:
        self.settings = settings
        self.count = count
        #: The worker's module: the embedded claim loop, or the Redis consumer.
        self.module = module or worker_module(settings.queue_url)
        self.procs: list[subprocess.Popen] = []
        self.restarts = 0
        self._stop = threading.Event()
        self._watcher: threading.Thread | None = None
        self._lock = threading.Lock()

    def _spawn(self) -> subprocess.Popen:
        env = dict(os.environ)
        env[SETTINGS_ENV] = self.settings.to_json()
        return subprocess.Popen([sys.executable, "-m", self.module], env=env)

    def start(self) -> None:
        with self._lock:
            self.procs = [self._spawn() for _ in range(self.count)]
        if self.count:
            self._watcher = threading.Thread(target=self._watch, name="worker-pool", daemon=True)
            self._watcher.start()

    def pids(self) -> list[int]:
        with self._lock:
            return [p.pid for p in self.procs if p.poll() is None]

    def _watch(self) -> None:
        while not self._stop.wait(WATCH_INTERVAL_S):
            with self._lock:
                for i, proc in enumerate(self.procs):
                    if proc.poll() is not None and not self._stop.is_set():
                        self.procs[i] = self._spawn()
                        self.restarts += 1

    def stop(self) -> None:
        """SIGTERM every worker (they hand running jobs back), then kill stragglers."""
        self._stop.set()
        if self._watcher is not None:
            self._watcher.join(timeout=5)
        with self._lock:
            for proc in self.procs:
                if proc.poll() is None:
                    proc.terminate()
            for proc in self.procs:
                try:
                    proc.wait(STOP_GRACE_S)
                except subprocess.TimeoutExpired:
                    proc.kill()
                    proc.wait()
