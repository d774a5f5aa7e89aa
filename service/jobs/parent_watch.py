"""A process that exits with the process that started it.

Workers, render children and comparison builds must never outlive their parent: an
orphaned worker holds the job store open and keeps claiming jobs for a server that is
gone. Two guards, used together:

* :func:`die_with_parent` asks the Linux kernel to send a signal (SIGTERM by default, so
  the process hands its job back) when the parent dies (``prctl(PR_SET_PDEATHSIG)``,
  through ``ctypes``); elsewhere it does nothing and returns False.
* :func:`parent_gone` compares ``os.getppid()`` with the pid the parent announced
  (:data:`PARENT_ENV`), which the loops check as the portable fallback. The announced
  pid, not the parent seen at start, is the reference: a parent that died before the
  child's first line leaves the child already re-parented, and its first
  ``os.getppid()`` would otherwise be taken for the parent.
"""

from __future__ import annotations

import ctypes
import os
import signal
import sys

__all__ = ["PARENT_ENV", "die_with_parent", "expected_parent", "parent_gone"]

#: Environment variable with the pid of the process a worker or render child belongs to.
PARENT_ENV = "EARFOLD_PARENT_PID"

#: ``PR_SET_PDEATHSIG`` of <linux/prctl.h>.
_PR_SET_PDEATHSIG = 1


def die_with_parent(sig: int = signal.SIGTERM) -> bool:
    """Have the kernel send ``sig`` to this process when its parent dies (Linux only).

    Returns True if the request was accepted. Call :func:`parent_gone` right after: a
    parent that died before the request was made sends nothing.
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return int(libc.prctl(_PR_SET_PDEATHSIG, int(sig), 0, 0, 0)) == 0
    except (OSError, AttributeError):
        return False


def expected_parent(environ: dict[str, str] | None = None) -> int:
    """The pid this process belongs to: :data:`PARENT_ENV` if set and valid, else the
    current parent."""
    value = (os.environ if environ is None else environ).get(PARENT_ENV, "")
    try:
        pid = int(value)
    except ValueError:
        return os.getppid()
    return pid if pid > 0 else os.getppid()


def parent_gone(parent: int) -> bool:
    """True if this process is no longer the child of ``parent`` (it died; we were
    re-parented to init or a subreaper)."""
    return os.getppid() != parent
