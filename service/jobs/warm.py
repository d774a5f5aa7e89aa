"""A worker's warm render process (:mod:`.warm_host`): started ahead, reused, replaced.

Each worker runs one job at a time, so it keeps one host: :class:`WarmSlot` starts it
when the worker starts (the host imports the renderer and loads the default HRIR set
while the worker waits for a job) and hands it the worker's jobs one by one.
:meth:`WarmSlot.start` returns a :class:`HostedJob`, which looks to the worker like the
``subprocess.Popen`` of a render child: the same JSON lines on its ``stdout`` (ending
at the job's end line), ``poll``/``wait`` give the job's exit status, ``terminate``
cancels it and ``kill`` kills the host. So lease, progress, cancel and crash handling
stay the worker's.

A host is handed a next job only if the last one ended well and nobody signalled it;
otherwise (a failure, a cancel, a crash, a kill, or the host retiring by itself) the
slot drops it and starts a fresh one right away, so the next job finds a warm process
again. At most two hosts of a slot exist at a time: the one being dropped (stopped, or
killed after :data:`STOP_GRACE_S`) and its replacement.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import threading
from collections.abc import Iterator

from .child_handle import ChildHandle

__all__ = ["HOST_COMMAND", "HostedJob", "WarmSlot"]

#: The host's command line.
HOST_COMMAND = [sys.executable, "-m", "earfold.service.jobs.warm_host"]

#: Time the lines of a host that died get to be read before its exit status counts (s).
READ_GRACE_S = 0.5

#: Time a dropped host gets to exit after its stdin is closed before it is killed (s).
STOP_GRACE_S = 2.0


class _JobLines:
    """The host's stdout lines of one job, up to (not including) its end line."""

    def __init__(self, job: HostedJob) -> None:
        self._job = job

    def __iter__(self) -> Iterator[str]:
        stream = self._job.host.stdout
        assert stream is not None
        for line in stream:
            if line.startswith('{"end":'):
                try:
                    end = json.loads(line)
                    code, retiring = int(end["end"]), bool(end.get("retiring", True))
                except (ValueError, KeyError, TypeError):
                    code, retiring = 1, True
                self._job._finish(code, retiring)
                return
            yield line
        # End of the stream without an end line: the host died mid-job.
        self._job._finish(None, True)

    def close(self) -> None:
        """Nothing to close: the stream is the host's, which may run the next job."""


class HostedJob(ChildHandle):
    """One job running in a warm host, with the interface of ``Popen``."""

    label = "warm render host"
    poll_interval_s = 0.005

    def __init__(self, host: subprocess.Popen) -> None:
        super().__init__(host.pid)
        self.host = host
        self.stdout = _JobLines(self)
        #: True once the job was signalled: its host is not used again.
        self.signalled = False
        #: True if the host said it exits after this job (or it died).
        self.retiring = True
        self._ended = threading.Event()

    def _finish(self, code: int | None, retiring: bool) -> None:
        self.retiring = retiring
        if code is not None:
            self.returncode = code
        self._ended.set()

    @property
    def reusable(self) -> bool:
        """True if the host ended this job well, unsignalled, stays, and is alive."""
        return (
            self.returncode == 0
            and not self.retiring
            and not self.signalled
            and self.host.poll() is None
        )

    def poll(self) -> int | None:
        if self.returncode is None and self.host.poll() is not None:
            # The host is gone. Once the lines it wrote are read (the reader meets the
            # end line or the end of the stream), its exit status is the job's unless
            # the job had ended first: a crash or a kill.
            self._ended.wait(READ_GRACE_S)
            if self.returncode is None:
                self.returncode = self.host.returncode
        return self.returncode

    def _running(self) -> bool:
        # The host, not the job: a job that has ended leaves its host running.
        return self.host.poll() is None

    def _signal(self, sig: int) -> None:
        self.signalled = True
        super()._signal(sig)


class WarmSlot:
    """The warm host of one worker (see the module's description)."""

    def __init__(self, env: dict[str, str], command: list[str] | None = None) -> None:
        self.env = env
        self.command = list(command or HOST_COMMAND)
        self.host: subprocess.Popen | None = None
        #: Hosts started, the first included (a measure of reuse).
        self.started = 0
        #: Jobs handed to a host that had already run one (reuse).
        self.reused = 0
        self._jobs_on_host = 0

    def _spawn(self) -> subprocess.Popen:
        self.started += 1
        self._jobs_on_host = 0
        return subprocess.Popen(
            self.command,
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
            cwd=os.getcwd(),
            env=self.env,
        )

    def prepare(self) -> None:
        """Start the host ahead of the first job (if none is alive)."""
        if self.host is None or self.host.poll() is not None:
            self._drop()
            self.host = self._spawn()

    def start(self, kind: str, spec: dict) -> HostedJob:
        """Hand one job to the warm host (a fresh one if it is gone)."""
        for _ in range(2):
            self.prepare()
            host = self.host
            assert host is not None and host.stdin is not None
            try:
                host.stdin.write(json.dumps({"kind": kind, "spec": spec}) + "\n")
                host.stdin.flush()
            except (BrokenPipeError, OSError):  # died between the check and the write
                self._drop()
                continue
            if self._jobs_on_host:
                self.reused += 1
            self._jobs_on_host += 1
            return HostedJob(host)
        raise RuntimeError("the render process could not be started")

    def finished(self, job: HostedJob, *, restart: bool = True) -> None:
        """After a job: keep its host for the next one, or drop it and (with
        ``restart``) start another at once, so the next job finds it warm."""
        if job.host is not self.host:
            return
        if not job.reusable:
            self._drop()
            if restart:
                self.prepare()

    def _drop(self) -> None:
        host, self.host = self.host, None
        if host is None:
            return
        if host.stdin is not None:
            try:
                host.stdin.close()
            except OSError:
                pass
        try:
            host.wait(STOP_GRACE_S)
        except subprocess.TimeoutExpired:
            host.kill()
            host.wait()
        if host.stdout is not None:
            host.stdout.close()

    def close(self) -> None:
        """Stop the host (its stdin closes; killed if it does not exit in time)."""
        self._drop()
