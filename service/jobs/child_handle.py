"""A job's process that is no ``subprocess.Popen`` of its own, shown to the worker as one.

Two kinds of job process have no ``Popen``: a job in the warm render host
(:class:`earfold.service.jobs.warm.HostedJob`) and a comparison build forked from the
worker (:class:`earfold.service.comparisons.forked.ForkedBuild`). Each says how it learns
its exit status (:meth:`ChildHandle.poll`); :class:`ChildHandle` gives both the rest of
what the worker calls: ``wait`` with a timeout, ``terminate`` and ``kill``.
"""

from __future__ import annotations

import os
import signal
import subprocess
import time

__all__ = ["ChildHandle"]


class ChildHandle:
    """The ``Popen`` interface over a subclass's :meth:`poll` (see the module's description).

    Parameters
    ----------
    pid
        The process that :meth:`terminate` and :meth:`kill` signal.
    """

    #: The process's name in :class:`subprocess.TimeoutExpired` from :meth:`wait`.
    label = "child process"
    #: Time between two polls while :meth:`wait` waits (s).
    poll_interval_s = 0.01

    def __init__(self, pid: int) -> None:
        self.pid = pid
        self.stdin = None  # the spec has been handed over already
        self.returncode: int | None = None

    def poll(self) -> int | None:
        """The exit status once the job has ended, else None (sets :attr:`returncode`)."""
        raise NotImplementedError

    def wait(self, timeout: float | None = None) -> int:
        """Wait for the exit status, at most ``timeout`` seconds (``TimeoutExpired`` then)."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while self.poll() is None:
            if deadline is not None and time.monotonic() > deadline:
                raise subprocess.TimeoutExpired(self.label, timeout or 0.0)
            time.sleep(self.poll_interval_s)
        assert self.returncode is not None
        return self.returncode

    def terminate(self) -> None:
        """Ask the process to stop (SIGTERM)."""
        self._signal(signal.SIGTERM)

    def kill(self) -> None:
        """Kill the process (SIGKILL)."""
        self._signal(signal.SIGKILL)

    def _running(self) -> bool:
        """True while the process :meth:`_signal` signals is running."""
        return self.poll() is None

    def _signal(self, sig: int) -> None:
        if self._running():
            try:
                os.kill(self.pid, sig)
            except ProcessLookupError:  # it ended between the check and the signal
                pass
