"""Scale-out on Redis with real processes: ``earfold serve --queue redis://...`` (API
only) and ``earfold worker`` processes sharing one data directory, as on several machines.

Against a real Redis (skipped where none answers, required when CI=true; each test under
its own key prefix). The oracle of every finished render is the renderer run directly on
the same file with the same settings: the samples must be identical. Lease, tick and
broker heartbeat are shortened through the CLI's hidden options so tests take seconds.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from numpy.testing import assert_array_equal
from stem_factory import FS, files_field, write_stem

from earfold.renderer.io import read_audio
from earfold.renderer.render import RenderSettings, render
from earfold.service.jobs.redis_store import RedisJobQueue
from earfold.service.tools.local_server import free_port

REPO = Path(__file__).resolve().parents[2]
FAST = ["--lease-seconds", "2", "--tick-seconds", "0.05"]


class Api:
    """``earfold serve --queue URL --workers 0`` on a free port."""

    def __init__(self, data_dir: Path, queue_url: str, workers: int = 0) -> None:
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "earfold.service.serve_cli",
                "--port",
                str(self.port),
                "--data-dir",
                str(data_dir),
                "--workers",
                str(workers),
                "--queue",
                queue_url,
                "--min-free-mb",
                "0",
                *FAST,
            ],
            cwd=REPO,
            stderr=subprocess.PIPE,
            text=True,
        )
        self.http = httpx.Client(base_url=self.url, timeout=30)
        deadline = time.monotonic() + 30
        while True:
            try:
                if self.http.get("/v1/health").status_code == 200:
                    break
            except httpx.TransportError:
                pass
            if self.proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"server did not start: {self.proc.stderr.read()}")
            time.sleep(0.1)

    def wait(
        self, job_id: str, states=("done", "failed", "cancelled"), timeout: float = 90
    ) -> dict:
        deadline = time.monotonic() + timeout
        while True:
            job = self.http.get(f"/v1/renders/{job_id}").json()
            if job["state"] in states:
                return job
            assert time.monotonic() < deadline, job
            time.sleep(0.05)

    def stop(self) -> None:
        self.http.close()
        _stop(self.proc)


class Workers:
    """``earfold worker --queue URL --data-dir DIR --processes N`` (its own machine)."""

    def __init__(self, data_dir: Path, queue_url: str, processes: int = 1) -> None:
        self.proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "earfold.service.cli",
                "worker",
                "--queue",
                queue_url,
                "--data-dir",
                str(data_dir),
                "--processes",
                str(processes),
                *FAST,
                "--broker-heartbeat-seconds",
                "4",
            ],
            cwd=REPO,
            stderr=subprocess.PIPE,
            text=True,
        )

    def stop(self) -> None:
        _stop(self.proc)


def _stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    proc.stderr.close()


@pytest.fixture
def cluster(tmp_path, redis_queue_url):
    """Start APIs and worker groups on one data directory and one Redis prefix."""
    data = tmp_path / "data"
    data.mkdir()
    started: list = []

    class Cluster:
        url = redis_queue_url
        data_dir = data

        def api(self, workers: int = 0) -> Api:
            started.append(Api(data, redis_queue_url, workers))
            return started[-1]

        def workers(self, processes: int = 1) -> Workers:
            started.append(Workers(data, redis_queue_url, processes))
            return started[-1]

        def store(self) -> RedisJobQueue:
            q = RedisJobQueue(redis_queue_url, deliver=False)
            started.append(q)
            return q

    yield Cluster()
    for thing in reversed(started):
        if isinstance(thing, RedisJobQueue):
            thing.close()
        else:
            thing.stop()


def _submit(api: Api, path: Path, **options) -> str:
    stem = api.http.post("/v1/stems", files=files_field([path]))
    assert stem.status_code == 201, stem.text
    resp = api.http.post("/v1/renders", json={"stem_id": stem.json()["id"], **options})
    assert resp.status_code == 202, resp.text
    return resp.json()["id"]


def _download(api: Api, job: dict, dest: Path):
    resp = api.http.get(job["links"]["audio"])
    assert resp.status_code == 200, resp.text
    dest.write_bytes(resp.content)
    return read_audio(dest)[0]


def _reference(path: Path, dest: Path, **options):
    render([path], dest, RenderSettings(**options))
    return read_audio(dest)[0]


def _wait_running(store: RedisJobQueue, job_id: str, timeout: float = 60):
    deadline = time.monotonic() + timeout
    while True:
        job = store.get(job_id)
        if job.state.value == "running" and 0 < job.progress < 0.5:
            return job
        assert job.state.value in ("queued", "running"), job
        assert time.monotonic() < deadline, "never caught the render running"
        time.sleep(0.01)


def test_render_through_a_worker_matches_the_renderer(cluster, tmp_path):
    api = cluster.api()
    cluster.workers(1)
    path = write_stem(tmp_path / "scene.wav", FS // 2, 12, seed=3)
    job = api.wait(_submit(api, path, layout="7.1.4", seed=5, subtype="PCM_16"))
    assert job["state"] == "done" and job["attempts"] == 1, job
    got = _download(api, job, tmp_path / "got.wav")
    ref = _reference(path, tmp_path / "ref.wav", layout="7.1.4", seed=5, subtype="PCM_16")
    assert_array_equal(got, ref)
    assert api.http.get("/v1/health").json()["queue"]["done"] == 1


def _children(pid: int) -> set[int]:
    """Live child processes of ``pid`` (Linux lists them per thread that started them)."""
    found = set()
    for task in Path(f"/proc/{pid}/task").iterdir():
        found |= {int(c) for c in (task / "children").read_text().split()}
    return found


def test_sigkill_of_a_worker_mid_render_is_redelivered_to_the_other(cluster, tmp_path):
    api = cluster.api()
    groups = [cluster.workers(1), cluster.workers(1)]
    store = cluster.store()
    path = write_stem(tmp_path / "long.wav", FS * 30, 2, seed=8)
    job_id = _submit(api, path, layout="2.0", block_size=64)
    job = _wait_running(store, job_id)
    first = job.worker
    os.kill(int(first.split(":")[1]), signal.SIGKILL)
    killed_at = time.monotonic()
    running = api.wait(job_id, states=("running", "done", "failed"), timeout=60)
    while running["state"] == "running" and store.get(job_id).worker in (None, first):
        running = api.wait(job_id, states=("running", "done", "failed"), timeout=60)
        time.sleep(0.05)
    taken_after = time.monotonic() - killed_at
    done = api.wait(job_id, timeout=120)
    assert done["state"] == "done" and done["attempts"] == 2, done
    assert taken_after < 15, f"taken again only after {taken_after:.1f} s"
    got = _download(api, done, tmp_path / "got.wav")
    assert_array_equal(got, _reference(path, tmp_path / "ref.wav", layout="2.0", block_size=64))
    assert list((cluster.data_dir / "renders" / job_id).glob(".*.part")) == []
    # earfold worker replaced the process that was killed.
    killed = int(first.split(":")[1])
    alive = [_children(g.proc.pid) for g in groups]
    assert all(len(c) == 1 for c in alive) and killed not in set().union(*alive), alive


def test_two_apis_share_jobs_and_cancel_stops_a_running_render(cluster, tmp_path):
    one, two = cluster.api(), cluster.api()
    cluster.workers(1)
    cluster.workers(1)
    store = cluster.store()
    short = write_stem(tmp_path / "short.wav", FS // 2, 2, seed=1)
    long = write_stem(tmp_path / "long.wav", FS * 30, 2, seed=2)
    # Submitted to one API, visible and downloadable through the other.
    job_id = _submit(one, short, layout="2.0", seed=4)
    seen = two.http.get(f"/v1/renders/{job_id}")
    assert seen.status_code == 200 and seen.json()["id"] == job_id
    done = two.wait(job_id)
    assert done["state"] == "done", done
    got = _download(two, done, tmp_path / "got.wav")
    assert_array_equal(got, _reference(short, tmp_path / "ref.wav", layout="2.0", seed=4))
    assert any(j["id"] == job_id for j in two.http.get("/v1/renders").json())
    # Submitted to one, cancelled through the other while running: it stops within seconds.
    slow = _submit(one, long, layout="2.0", block_size=64)
    _wait_running(store, slow)
    asked = time.monotonic()
    resp = two.http.delete(f"/v1/renders/{slow}")
    assert resp.status_code in (200, 202, 204), resp.text
    assert one.http.get(f"/v1/renders/{slow}").json()["state"] == "cancelled"
    # The worker notices at its next tick and kills the render child: the lease entry
    # goes and no temporary output stays behind.
    deadline = time.monotonic() + 10
    while list((cluster.data_dir / "renders" / slow).glob(".*.part")):
        assert time.monotonic() < deadline, "the cancelled render kept writing"
        time.sleep(0.05)
    assert time.monotonic() - asked < 10
    assert store.get(slow).state.value == "cancelled"


def test_cancel_of_a_long_queued_job_holds_when_workers_come(cluster, tmp_path):
    api = cluster.api()
    path = write_stem(tmp_path / "a.wav", FS // 10, 2)
    ids = [_submit(api, path, layout="2.0", seed=i) for i in range(3)]
    assert api.http.delete(f"/v1/renders/{ids[1]}").status_code in (200, 202, 204)
    time.sleep(3)  # longer than the resend delay: its message is in the broker all along
    cluster.workers(1)
    assert api.wait(ids[0])["state"] == "done"
    assert api.wait(ids[2])["state"] == "done"
    store = cluster.store()
    job = store.get(ids[1])
    assert job.state.value == "cancelled" and job.attempts == 0
    assert not (cluster.data_dir / "renders" / ids[1] / "output.wav").exists()


def test_queue_limit_answers_429(cluster, tmp_path):
    data = cluster.data_dir
    api = Api(data, cluster.url)
    try:
        path = write_stem(tmp_path / "a.wav", FS // 10, 2)
        stem = api.http.post("/v1/stems", files=files_field([path])).json()
    finally:
        api.stop()
    # A second API with a small queue limit, same Redis prefix.
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "earfold.service.serve_cli",
            "--port",
            str(port := free_port()),
            "--data-dir",
            str(data),
            "--workers",
            "0",
            "--queue",
            cluster.url,
            "--min-free-mb",
            "0",
            "--max-queued",
            "2",
        ],
        cwd=REPO,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        with httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=30) as http:
            deadline = time.monotonic() + 30
            while True:
                try:
                    if http.get("/v1/health").status_code == 200:
                        break
                except httpx.TransportError:
                    time.sleep(0.1)
                assert time.monotonic() < deadline
            codes = [
                http.post("/v1/renders", json={"stem_id": stem["id"], "layout": "2.0"}).status_code
                for _ in range(3)
            ]
            assert codes == [202, 202, 429]
    finally:
        _stop(proc)
