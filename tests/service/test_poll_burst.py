"""Status reads stay cheap under a burst while a render runs: the render work runs at a
lower scheduling priority than the API (workers and their render children are niced),
and a burst of status reads from many clients at once is answered without stalls.

The figure for the README (p99 of 1,000 reads from 200 clients, one render running) is
measured by ``python -m earfold.service.tools.load_poll --workers 1 --burst 1000``; the
test runs the same burst with a bound generous enough for a machine shared with other
work, which still catches the multi-second stalls of a blocked or starved API."""

from __future__ import annotations

import asyncio
import os
import time
from pathlib import Path

import pytest

from earfold.service.jobs.worker import WORKER_NICENESS
from earfold.service.tools.load_poll import run_burst
from earfold.service.tools.local_server import LocalServer

#: p99 bound of the test's burst (ms): the target is 300 ms (see the module docstring);
#: stalls of a blocked event loop or a starved API process reach seconds.
STALL_BOUND_MS = 1000.0


def _stat(pid: int) -> list[str]:
    text = Path(f"/proc/{pid}/stat").read_text()
    return text[text.rfind(")") + 2 :].split()


def _children(pid: int) -> list[int]:
    out = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                if int(_stat(int(entry))[1]) == pid:
                    out.append(int(entry))
            except (OSError, IndexError):
                pass
    return out


def _nice(pid: int) -> int:
    return int(_stat(pid)[16])


def test_a_burst_of_status_reads_during_a_render_is_answered_without_stalls():
    if not Path("/proc/self/stat").exists():
        pytest.skip("needs /proc")
    with LocalServer(1) as server:
        api_nice = _nice(server.pid)
        deadline = time.monotonic() + 30
        workers: list[int] = []
        while time.monotonic() < deadline:
            workers = _children(server.pid)
            if workers and all(_nice(w) >= api_nice + WORKER_NICENESS for w in workers):
                break
            time.sleep(0.1)
        assert workers and all(_nice(w) >= api_nice + WORKER_NICENESS for w in workers), workers
        result = asyncio.run(
            run_burst(server.url, requests=1000, concurrency=200, token=None, server_pid=None)
        )["burst"]
    assert result["requests"] == 1000 and result["non_200"] == 0, result
    assert result["render_running_at_end"], result
    assert result["get_ms"]["p99"] <= STALL_BOUND_MS, result
