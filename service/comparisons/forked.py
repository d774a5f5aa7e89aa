"""Comparison builds forked from a warm worker, instead of a freshly started interpreter.

A fresh build child spends a second or more importing numpy and scipy and loading the
HRIR set before it renders anything, and a listener is waiting for it. A worker started
by ``earfold serve`` runs builds in its warm render process
(:mod:`earfold.service.jobs.warm`), the default; with ``EARFOLD_WARM_PROCESS=0`` it
imports the renderer once (:func:`warm_up`) and forks each build from itself: the fork
starts with everything loaded and shares the cached HRIR set.
:class:`ForkedBuild` looks to the worker like the ``subprocess.Popen`` of a build child
(the same JSON-lines protocol on its ``stdout``), so the worker's lease, progress and
cancel handling stay the same.

In that mode renders keep a fresh child each (in the warm process they share it, which
retires past a memory bound, earfold.service.jobs.warm_host).
"""

from __future__ import annotations

import os
import signal
import sys

from ..jobs.child_handle import ChildHandle

__all__ = ["ForkedBuild", "warm_up"]

#: Sample rate at which the default HRIR set is loaded ahead (Hz): the usual rate of
#: production stems (common practice); at another rate the set is loaded on first use.
WARM_SAMPLERATE = 48000


def warm_up() -> None:
    """Import what a build needs and load the default HRIR set, before the first build."""
    from earfold.hrtf_sets import DEFAULT_SET
    from earfold.renderer.hrtf import load_hrir_set
    from earfold.renderer.render import resolve_hrtf

    from . import builder  # noqa: F401

    path, name = resolve_hrtf(DEFAULT_SET)
    load_hrir_set(path, WARM_SAMPLERATE, name=name)


class ForkedBuild(ChildHandle):
    """A build running in a fork of this process, with the interface of ``Popen``."""

    label = "comparison build"

    def __init__(self, spec: dict, niceness: int) -> None:
        read, write = os.pipe()
        worker = os.getpid()
        pid = os.fork()
        if pid == 0:  # the build: never returns
            code = 70
            try:
                os.close(read)
                os.dup2(write, 1)
                os.close(write)
                code = _child(spec, niceness, worker)
            finally:
                os._exit(code)
        os.close(write)
        super().__init__(pid)
        self.stdout = os.fdopen(read, "r")

    def poll(self) -> int | None:
        if self.returncode is None:
            pid, status = os.waitpid(self.pid, os.WNOHANG)
            if pid:
                self.returncode = os.waitstatus_to_exitcode(status)
        return self.returncode


def _child(spec: dict, niceness: int, worker: int) -> int:
    from ..jobs import render_child as rc
    from ..jobs.parent_watch import die_with_parent
    from .build_child import run

    rc._parent = worker  # if the worker dies, the build stops
    die_with_parent(signal.SIGTERM)
    rc._stop = False
    signal.signal(signal.SIGTERM, rc._on_term)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        os.nice(niceness)
    except OSError:
        pass
    sys.stdout = os.fdopen(1, "w", buffering=1)
    try:
        return run(spec)
    finally:
        sys.stdout.flush()
