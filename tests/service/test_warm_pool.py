"""The warm render process of a worker (earfold.service.jobs.warm): reused between jobs,
replaced when it dies, fails or is cancelled, and never outliving its worker."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time

import pytest
from numpy.testing import assert_array_equal
from stem_factory import FS, files_field, write_stem

from earfold.renderer.io import read_audio
from earfold.service.jobs.warm import WarmSlot
from earfold.service.jobs.worker import Worker, child_environment

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


@pytest.fixture
def slot():
    warm = WarmSlot(child_environment())
    warm.prepare()
    yield warm
    warm.close()


def _worker(client, warm: WarmSlot | None) -> Worker:
    worker = Worker(client.app.state.settings, queue=client.app.state.queue, name="w")
    worker.warm = warm
    return worker


def _stem(client, tmp_path, frames=FS // 10, channels=6, name="take.wav") -> dict:
    path = write_stem(tmp_path / name, frames, channels)
    return client.post("/v1/stems", files=files_field([path])).json()


def _render(client, stem: dict, **options) -> dict:
    body = {"stem_id": stem["id"], "layout": "5.1", **options}
    return client.post("/v1/renders", json=body).json()


def _view(client, job: dict) -> dict:
    return client.get(f"/v1/renders/{job['id']}").json()


def _audio(client, job: dict):
    resp = client.get(f"/v1/renders/{job['id']}/audio")
    assert resp.status_code == 200
    return resp.content


def test_jobs_reuse_the_warm_process_and_match_a_fresh_child(make_client, tmp_path, slot):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    first, second = _render(client, stem), _render(client, stem)
    host = slot.host.pid
    _worker(client, slot).run(once=True)
    _worker(client, slot).run(once=True)
    assert _view(client, first)["state"] == "done" and _view(client, second)["state"] == "done"
    assert slot.started == 1 and slot.reused == 1
    assert slot.host.pid == host and slot.host.poll() is None
    # the same render in a fresh child of its own: the same bytes
    fresh = _render(client, stem)
    _worker(client, None).run(once=True)
    assert _view(client, fresh)["state"] == "done"
    assert _audio(client, first) == _audio(client, fresh) == _audio(client, second)


def test_a_comparison_build_runs_in_the_warm_process_after_a_render(make_client, tmp_path, slot):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path, frames=FS * 2, channels=2)
    job = _render(client, stem, layout="2.0")
    _worker(client, slot).run(once=True)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "2.0"}, {"layout": "2.0", "room": "small"}],
        "mode": "ab",
        "trials": 4,
        "excerpt": {"start": 0.0, "length": 1.0},
    }
    session = client.post("/v1/comparisons", json=body).json()
    _worker(client, slot).run(once=True)
    view = client.get(f"/v1/comparisons/{session['id']}").json()
    assert _view(client, job)["state"] == "done"
    assert view["state"] == "ready", view
    assert slot.started == 1 and slot.reused == 1


def test_a_dead_process_is_replaced(make_client, tmp_path, slot):
    client = make_client(**FAST, max_attempts=3)
    stem = _stem(client, tmp_path)
    # killed while idle: the next job starts a fresh one and succeeds
    os.kill(slot.host.pid, signal.SIGKILL)
    slot.host.wait()
    job = _render(client, stem)
    _worker(client, slot).run(once=True)
    assert _view(client, job)["state"] == "done"
    assert slot.started == 2
    # killed mid-render: the job goes back to the queue with the attempt counted (as for
    # a child that crashed), the process is replaced, and the job then completes
    long = _stem(client, tmp_path, frames=FS * 60, channels=2, name="long.wav")
    job = _render(client, long, layout="2.0", block_size=64)
    worker = _worker(client, slot)
    thread = threading.Thread(target=worker.run, kwargs={"once": True})
    thread.start()
    _wait_running(client, job)
    victim = slot.host.pid
    os.kill(victim, signal.SIGKILL)
    thread.join(timeout=30)
    view = _view(client, job)
    assert view["state"] == "queued" and view["attempts"] == 1, view
    assert slot.started == 3 and slot.host.pid != victim and slot.host.poll() is None
    client.delete(f"/v1/renders/{job['id']}")
    job = _render(client, stem)
    _worker(client, slot).run(once=True)
    assert _view(client, job)["state"] == "done"


def _wait_running(client, job: dict) -> None:
    deadline = time.monotonic() + 60
    while _view(client, job)["progress"] <= 0:
        assert time.monotonic() < deadline, "the render never started"
        time.sleep(0.02)


def test_cancel_mid_render_then_a_good_job_on_the_same_pool(make_client, tmp_path, slot):
    client = make_client(**FAST)
    long = _stem(client, tmp_path, frames=FS * 60, channels=2, name="long.wav")
    job = _render(client, long, layout="2.0", block_size=64)
    worker = _worker(client, slot)
    thread = threading.Thread(target=worker.run, kwargs={"once": True})
    thread.start()
    _wait_running(client, job)
    cancelled_host = slot.host.pid
    t0 = time.monotonic()
    assert client.delete(f"/v1/renders/{job['id']}").json()["state"] == "cancelled"
    thread.join(timeout=10)
    assert not thread.is_alive() and time.monotonic() - t0 < 3.0
    folder = client.app.state.storage.root / "renders" / job["id"]
    assert not any(folder.glob("*.wav")) and not any(folder.glob(".*.part"))
    # the cancelled process is not reused: a fresh one renders the next job
    stem = _stem(client, tmp_path)
    good = _render(client, stem)
    _worker(client, slot).run(once=True)
    assert _view(client, good)["state"] == "done"
    assert slot.host.pid != cancelled_host and slot.started == 2


def test_a_failed_job_is_followed_by_a_good_one(make_client, tmp_path, slot):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    broken = _stem(client, tmp_path, name="gone.wav")
    bad = _render(client, broken)
    for f in (client.app.state.storage.root / "stems" / broken["id"]).glob("00*"):
        f.unlink()  # the stem's audio disappears before the render
    good = _render(client, stem)
    failed_host = slot.host.pid
    _worker(client, slot).run(once=True)
    failed = _view(client, bad)
    assert failed["state"] == "failed" and "gone.wav" in failed["message"], failed
    _worker(client, slot).run(once=True)
    assert _view(client, good)["state"] == "done"
    # the process that failed a job is never handed another
    assert slot.host.pid != failed_host and slot.started == 2 and slot.reused == 0
    reference = _render(client, stem)
    _worker(client, None).run(once=True)
    assert _audio(client, good) == _audio(client, reference)


@pytest.mark.parametrize(
    ("bound", "started", "reused"),
    [("MAX_JOBS = 2", 2, 1), ("MAX_RSS_BYTES = 1", 4, 0)],
    ids=["job count", "memory"],
)
def test_a_process_retires_past_its_bounds(make_client, tmp_path, bound, started, reused):
    code = "\n".join(
        ["import sys", "from earfold.service.jobs import warm_host as h", f"h.{bound}"]
        + ["sys.exit(h.main())"]
    )
    warm = WarmSlot(child_environment(), [sys.executable, "-c", code])
    try:
        client = make_client(**FAST)
        stem = _stem(client, tmp_path)
        jobs = [_render(client, stem) for _ in range(3)]
        for _ in jobs:
            _worker(client, warm).run(once=True)
        # every job done, none counted as a crash: a retiring process says so first (and
        # a replacement is started after each retirement, the last one included)
        assert [_view(client, j)["state"] for j in jobs] == ["done"] * 3
        assert [_view(client, j)["attempts"] for j in jobs] == [1] * 3
        assert warm.started == started and warm.reused == reused
    finally:
        warm.close()


def test_the_warm_process_dies_with_its_worker(tmp_path):
    code = (
        "import sys, time\n"
        "from earfold.service.jobs.warm import WarmSlot\n"
        "from earfold.service.jobs.worker import child_environment\n"
        "slot = WarmSlot(child_environment()); slot.prepare()\n"
        "print(slot.host.pid, flush=True)\n"
        "time.sleep(60)\n"
    )
    worker = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        assert worker.stdout is not None
        host = int(worker.stdout.readline())
        worker.kill()
        worker.wait()
        deadline = time.monotonic() + 10
        while _alive(host):
            assert time.monotonic() < deadline, "the warm process outlived its worker"
            time.sleep(0.05)
    finally:
        worker.kill()
        worker.wait()
        if worker.stdout is not None:
            worker.stdout.close()


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split()[2] != "Z"
    except FileNotFoundError:
        return False


def test_same_output_bytes_through_the_warm_process(make_client, tmp_path, slot):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path, frames=FS // 4, channels=2)
    job = _render(client, stem, layout="2.0", room="small")
    _worker(client, slot).run(once=True)
    fresh = _render(client, stem, layout="2.0", room="small")
    _worker(client, None).run(once=True)
    a = read_audio(client.app.state.storage.root / "renders" / job["id"] / "output.wav")[0]
    b = read_audio(client.app.state.storage.root / "renders" / fresh["id"] / "output.wav")[0]
    assert_array_equal(a, b)


def test_a_host_reads_its_own_peak_memory_not_its_parents():
    # Linux keeps ru_maxrss across fork and exec: a host started by a parent that once held
    # 400 MB would read 400 MB. Its own high-water mark (VmHWM) starts afresh at exec. This
    # failed the whole suite once: the test process had grown past the 1 GiB bound, so every
    # warm host retired after its first job.
    import subprocess
    import sys

    code = (
        "import numpy as np, subprocess, sys\n"
        "held = np.ones(400 << 20, dtype=np.uint8)\n"
        "held[::4096] = 2\n"
        "out = subprocess.run([sys.executable, '-c', 'from earfold.service.jobs.warm_host "
        "import peak_rss_bytes; print(peak_rss_bytes())'], capture_output=True, text=True,"
        " check=True).stdout\n"
        "print(out.strip())\n"
    )
    child = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert int(child.stdout.strip()) < 300 << 20, child.stdout
