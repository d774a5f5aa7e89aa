"""``earfold serve`` never leaves a worker behind: a stop signal to its process group at any
moment of start-up or shutdown ends every process, and a worker whose server is gone
(killed outright) exits by itself instead of holding the job store open."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

#: Start-up of the server and its workers takes about this long on a loaded 2-core machine
#: (s); the signals land at random moments inside it and a little past it.
STARTUP_WINDOW_S = 2.5

#: How long every process of a stopped server gets to be gone (s).
GONE_WITHIN_S = 20.0


def _serve(data_dir: Path, workers: int = 2) -> subprocess.Popen:
    """``earfold serve`` in a process group of its own, on a free loopback port."""
    return subprocess.Popen(
        [sys.executable, "-m", "earfold.service.cli", "serve", "--port", "0"]
        + ["--workers", str(workers), "--data-dir", str(data_dir)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )


def _stat_pgrp(pid: int) -> int | None:
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = stat[stat.rfind(")") + 2 :].split()
    if fields[0] == "Z":  # a zombie is gone, only not yet reaped
        return None
    return int(fields[2])


def _mentions(pid: int, text: bytes) -> bool:
    for name in ("environ", "cmdline"):
        try:
            if text in Path(f"/proc/{pid}/{name}").read_bytes():
                return True
        except OSError:
            pass
    return False


def _left(pgid: int, data_dir: Path) -> list[int]:
    """Processes of the group ``pgid`` or with ``data_dir`` in their environment or
    command line (this test process excluded)."""
    needle = str(data_dir).encode()
    found = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit() or int(entry) == os.getpid():
            continue
        pid = int(entry)
        if _stat_pgrp(pid) == pgid or (_stat_pgrp(pid) is not None and _mentions(pid, needle)):
            found.append(pid)
    return found


def _assert_all_gone(pgid: int, data_dir: Path, what: str) -> None:
    deadline = time.monotonic() + GONE_WITHIN_S
    left = _left(pgid, data_dir)
    while left and time.monotonic() < deadline:
        time.sleep(0.1)
        left = _left(pgid, data_dir)
    for pid in left:  # clean up before failing, so one failure does not leak processes
        try:
            os.kill(pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    assert not left, f"{what}: processes left behind: {left}"


def test_sigterm_to_the_server_group_during_startup_or_shutdown_leaves_no_worker(tmp_path):
    if not Path("/proc/self/stat").exists():
        import pytest

        pytest.skip("needs /proc to list processes")
    rng = random.Random(20261204)
    for attempt in range(6):
        data_dir = tmp_path / f"data{attempt}"
        proc = _serve(data_dir)
        pgid = proc.pid
        try:
            time.sleep(rng.uniform(0.0, STARTUP_WINDOW_S))
            os.killpg(pgid, signal.SIGTERM)
            if attempt % 2:  # a second signal while shutting down (a stop script repeating)
                time.sleep(rng.uniform(0.0, 1.0))
                try:
                    os.killpg(pgid, signal.SIGTERM)
                except ProcessLookupError:
                    pass
            proc.wait(GONE_WITHIN_S)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        _assert_all_gone(pgid, data_dir, f"try {attempt}")


def test_a_worker_whose_server_was_killed_exits_by_itself(tmp_path):
    # The server is killed outright (no signal reaches its workers) at random moments
    # from the instant its workers exist: still starting (importing, before their first
    # look at their parent), warming up, or idle. Each worker must notice and exit.
    rng = random.Random(4)
    for attempt, delay in enumerate([0.0, *(rng.uniform(0.0, 1.5) for _ in range(3))]):
        data_dir = tmp_path / f"data{attempt}"
        proc = _serve(data_dir, workers=2)
        pgid = proc.pid
        try:
            deadline = time.monotonic() + 30
            workers: list[int] = []
            while time.monotonic() < deadline and not workers:
                time.sleep(0.005)
                workers = [p for p in _left(pgid, data_dir) if p != proc.pid]
            assert workers, "the workers did not start"
            time.sleep(delay)
            os.kill(proc.pid, signal.SIGKILL)  # the server only
            proc.wait(10)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        _assert_all_gone(pgid, data_dir, f"server killed {delay:.2f} s after its workers started")


def test_a_rendering_worker_and_its_render_exit_when_the_server_is_killed():
    import asyncio

    import httpx

    from earfold.service.tools.load_poll import _start_long_render
    from earfold.service.tools.local_server import LocalServer

    async def start(url: str) -> None:
        async with httpx.AsyncClient(base_url=url, timeout=120) as http:
            await _start_long_render(http, 1)

    with LocalServer(1) as server:
        asyncio.run(start(server.url))  # returns once the render runs
        data_dir = server.data_dir
        rendering = [p for p in _left(-1, data_dir) if p != server.pid]
        assert len(rendering) >= 2, rendering  # the worker and its render child
        os.kill(server.pid, signal.SIGKILL)
        assert server.proc is not None
        server.proc.wait(10)
        _assert_all_gone(-1, data_dir, "server killed mid-render")
