"""The worker processes of ``earfold serve``: started, watched, restarted, stopped."""

from __future__ import annotations

import os
import subprocess
import sys
import threading

from ..settings import ServiceSettings
from .stop_flag import StopFlag
from .worker import PARENT_ENV, SETTINGS_ENV

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
    again once its lease expires, by the new worker or another. Once shutdown has begun
    (:meth:`begin_shutdown`, called from the server's signal handler, or :meth:`stop`)
    nothing is started or restarted any more: a worker that died of the same SIGTERM as
    its server must not come back without a parent. Each worker is told its server's
    pid and exits by itself when that process is gone (:mod:`.parent_watch`).
    """

    def __init__(self, settings: ServiceSettings, count: int, *, module: str | None = None) -> None:
        self.settings = settings
        self.count = count
        #: The worker's module: the embedded claim loop, or the Redis consumer.
        self.module = module or worker_module(settings.queue_url)
        self.procs: list[subprocess.Popen] = []
        self.restarts = 0
        self._stop = StopFlag()
        self._watcher: threading.Thread | None = None
        self._lock = threading.Lock()

    def _spawn(self) -> subprocess.Popen:
        env = dict(os.environ)
        env[SETTINGS_ENV] = self.settings.to_json()
        env[PARENT_ENV] = str(os.getpid())
        return subprocess.Popen([sys.executable, "-m", self.module], env=env)

    @property
    def stopping(self) -> bool:
        """True once shutdown has begun: no worker is started or restarted any more."""
        return self._stop.is_set()

    def begin_shutdown(self) -> None:
        """Stop (re)starting workers; safe to call from a signal handler (no lock)."""
        self._stop.ask()

    def start(self) -> None:
        with self._lock:
            if self._stop.is_set():
                return
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
        self.begin_shutdown()
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
