"""Redis going away and coming back while jobs wait, and the worker CLI's edges.

The outage test starts its own ``redis-server`` on a free port (append-only file in a
temporary folder, as a production Redis holding jobs should run) and stops and restarts
that one only. Skipped where redis-server is not installed, required when CI=true.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from stem_factory import FS, files_field, write_stem
from test_redis_scaleout import Api, Workers

from earfold.service.jobs import QueueUnavailable
from earfold.service.jobs.redis_store import RedisJobQueue, display_url, parse_url
from earfold.service.tools.local_server import free_port

REPO = Path(__file__).resolve().parents[2]


class OwnRedis:
    """A redis-server of this test on a free loopback port, with an append-only file."""

    def __init__(self, folder: Path) -> None:
        exe = shutil.which("redis-server")
        if exe is None:
            reason = "redis-server is not installed (the outage test starts its own)"
            if os.environ.get("CI") == "true":
                pytest.fail(f"CI=true but {reason}")
            pytest.skip(reason)
        self.exe, self.folder, self.port = exe, folder, free_port()
        self.url = f"redis://127.0.0.1:{self.port}/0"
        self.proc: subprocess.Popen | None = None
        self.start()

    def start(self) -> None:
        self.proc = subprocess.Popen(
            [
                self.exe,
                "--port",
                str(self.port),
                "--bind",
                "127.0.0.1",
                "--dir",
                str(self.folder),
                "--appendonly",
                "yes",
                "--appendfsync",
                "always",
                "--save",
                "",
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        client = RedisJobQueue(self.url, deliver=False)
        deadline = time.monotonic() + 10
        while True:
            try:
                client.ping()
                break
            except QueueUnavailable:
                assert time.monotonic() < deadline, "own redis-server did not start"
                time.sleep(0.05)
        client.close()

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            self.proc.wait(10)


@pytest.fixture
def own_redis(tmp_path):
    folder = tmp_path / "redis"
    folder.mkdir()
    server = OwnRedis(folder)
    yield server
    server.stop()


def test_outage_gives_503_and_the_service_recovers_without_a_restart(own_redis, tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    api = Api(data, own_redis.url)
    workers = None
    try:
        path = write_stem(tmp_path / "a.wav", FS // 10, 2)
        stem = api.http.post("/v1/stems", files=files_field([path])).json()
        body = {"stem_id": stem["id"], "layout": "2.0"}
        waiting = [api.http.post("/v1/renders", json=body).json()["id"] for _ in range(2)]

        own_redis.stop()
        health = api.http.get("/v1/health")
        assert health.status_code == 503, health.text
        problem = health.json()
        assert health.headers["content-type"].startswith("application/problem+json")
        assert problem["status"] == 503 and f"127.0.0.1:{own_redis.port}" in problem["detail"]
        submit = api.http.post("/v1/renders", json=body)
        assert submit.status_code == 503 and "Retry-After" in submit.headers, submit.text
        assert "nothing was changed" in submit.json()["detail"]
        assert api.http.get(f"/v1/renders/{waiting[0]}").status_code == 503
        # Workers started during the outage wait for Redis instead of exiting.
        workers = Workers(data, own_redis.url, 1)
        time.sleep(1.5)
        assert workers.proc.poll() is None

        own_redis.start()
        deadline = time.monotonic() + 20
        while api.http.get("/v1/health").status_code != 200:
            assert time.monotonic() < deadline, "the API did not recover"
            time.sleep(0.1)
        # The jobs that waited through the outage are kept and rendered; new ones too.
        late = api.http.post("/v1/renders", json=body)
        assert late.status_code == 202, late.text
        for job_id in [*waiting, late.json()["id"]]:
            assert api.wait(job_id, timeout=60)["state"] == "done"
        assert api.proc.poll() is None  # the API process never went down
    finally:
        if workers is not None:
            workers.stop()
        api.stop()


def test_store_calls_raise_queue_unavailable_when_nothing_listens():
    q = RedisJobQueue(f"redis://127.0.0.1:{free_port()}/0?prefix=nobody")
    with pytest.raises(QueueUnavailable, match="does not answer"):
        q.counts()
    with pytest.raises(QueueUnavailable):
        q.submit("a", "", {}, max_queued=10)
    q.close()


def test_queue_url_parsing():
    assert parse_url("redis://h:6380/2") == ("redis://h:6380/2", "earfold")
    assert parse_url("redis://h:6380/2?prefix=site-b") == ("redis://h:6380/2", "site-b")
    assert parse_url("redis://h/0?prefix=x&ssl_cert_reqs=none") == (
        "redis://h/0?ssl_cert_reqs=none",
        "x",
    )
    with pytest.raises(ValueError, match="prefix"):
        parse_url("redis://h/0?prefix=a:b")
    with pytest.raises(ValueError, match="not a Redis URL"):
        parse_url("amqp://h/")
    assert display_url("redis://user:secret@h:6380/1") == "redis://h:6380/1"


def test_unsent_messages_are_sent_again(redis_queue_url):
    clock = [1000.0]
    q = RedisJobQueue(redis_queue_url, clock=lambda: clock[0])
    sent: list[str] = []

    class Recorder:
        def send(self, job_id):
            sent.append(job_id)

        def close(self):
            pass

    q._delivery = Recorder()
    q._deliver = False  # submit as if the send had failed: the job stays "unsent"
    q.submit("a", "", {}, max_queued=10)
    q._deliver = True
    assert q.resend() == []  # not yet: a send may still be on its way
    clock[0] += 5
    assert q.resend() == ["a"] and sent == ["a"]
    assert q.resend() == []  # confirmed sent once
    q.close()


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "earfold.service.cli", *args],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=60,
    )


def test_worker_cli_refuses_bad_input_in_one_line(tmp_path):
    bad = _cli("worker", "--queue", "amqp://h/", "--data-dir", str(tmp_path))
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1
    assert "redis://HOST:PORT/DB" in bad.stderr
    missing = _cli(
        "worker", "--queue", "redis://127.0.0.1:1/0", "--data-dir", str(tmp_path / "nope")
    )
    assert missing.returncode == 2 and "does not exist" in missing.stderr


def test_worker_check(tmp_path, redis_queue_url):
    ok = _cli("worker", "--queue", redis_queue_url, "--data-dir", str(tmp_path), "--check")
    assert ok.returncode == 0, ok.stderr
    down = _cli(
        "worker",
        "--queue",
        f"redis://127.0.0.1:{free_port()}/0",
        "--data-dir",
        str(tmp_path),
        "--check",
    )
    assert down.returncode == 1 and "does not answer" in down.stderr


def test_poison_job_fails_after_its_attempts(redis_queue_url, tmp_path):
    # A render child that dies without a word every time (as under the OOM killer).
    from earfold.service.jobs.redis_worker import RedisWorker
    from earfold.service.settings import ServiceSettings
    from earfold.service.storage import Storage, new_id, write_json_atomic

    data = tmp_path / "data"
    storage = Storage(data)
    settings = ServiceSettings(
        data_dir=data, queue_url=redis_queue_url, lease_s=2, tick_s=0.05, max_attempts=3
    )
    stem_id = new_id()
    folder = storage.path("stems", stem_id)
    folder.mkdir(parents=True)
    write_stem(folder / "a.wav", FS // 10, 2)
    write_json_atomic(
        folder / "meta.json", {"id": stem_id, "files": [{"stored": "a.wav", "name": "a.wav"}]}
    )
    worker = RedisWorker(settings)
    worker.worker.child_command = [
        sys.executable,
        "-c",
        "import os, signal; os.kill(os.getpid(), signal.SIGKILL)",
    ]
    api_side = RedisJobQueue(redis_queue_url)
    job_id = new_id()
    api_side.submit(job_id, "", {"stem_id": stem_id, "options": {"layout": "2.0"}}, max_queued=10)
    runner = threading.Thread(target=worker.run)
    runner.start()
    try:
        deadline = time.monotonic() + 60
        while (job := api_side.get(job_id)).state.value in ("queued", "running"):
            assert time.monotonic() < deadline, job
            time.sleep(0.05)
    finally:
        worker.stop()
        runner.join(30)
        worker.queue.close()
        api_side.close()
    assert job.state.value == "failed" and job.attempts == 3, job.message
    assert "died 3 times" in job.message


def test_in_process_app_on_redis_reports_counts(redis_queue_url, make_client):
    client = make_client(queue_url=redis_queue_url)
    health = client.get("/v1/health")
    assert health.status_code == 200, health.text
    assert health.json()["queue"] == {
        "queued": 0,
        "running": 0,
        "done": 0,
        "failed": 0,
        "cancelled": 0,
    }


def test_retention_sweep_survives_an_outage(tmp_path):
    # The app's background sweep must outlive a job store that does not answer.
    import asyncio

    from earfold.service.app import _sweep_forever, create_app
    from earfold.service.settings import ServiceSettings

    down = f"redis://127.0.0.1:{free_port()}/0"
    app = create_app(ServiceSettings(data_dir=tmp_path / "data", queue_url=down, sweep_s=0.01))

    async def run() -> bool:
        task = asyncio.create_task(_sweep_forever(app))
        await asyncio.sleep(0.3)  # many sweeps, each meeting QueueUnavailable
        alive = not task.done()
        task.cancel()
        return alive

    assert asyncio.run(run())
    app.state.queue.close()


def test_a_second_api_on_a_shared_queue_keeps_uploads_in_progress(
    tmp_path, redis_queue_url, make_client
):
    # Several API processes share the data directory with Redis: one starting up must not
    # remove another's upload in progress from tmp/ (the embedded backend still does).
    first = make_client(queue_url=redis_queue_url)
    in_progress = tmp_path / "data" / "tmp" / "upload-in-progress.part"
    in_progress.write_bytes(b"RIFF")
    make_client(queue_url=redis_queue_url)
    assert in_progress.exists()
    make_client()  # sqlite: a single server owns the folder and clears it at start-up
    assert not in_progress.exists()
    assert first.get("/v1/health").status_code == 200


def test_retention_sweeps_of_two_apis_do_not_trip_over_each_other(tmp_path, redis_queue_url):
    from earfold.service.retention import sweep
    from earfold.service.storage import Storage

    storage = Storage(tmp_path / "data")
    one, two = RedisJobQueue(redis_queue_url), RedisJobQueue(redis_queue_url)
    one.submit("a", "", {}, max_queued=10)
    one.cancel("a")
    stale = list(one.list(active=False))
    two.delete("a")  # the other API's sweep got there first

    class Late:
        """``one`` as seen by a sweep that listed the job before it was deleted."""

        def list(self, *args, active=None, **kwargs):
            return stale if active is False else []

        def delete(self, job_id):
            return one.delete(job_id)

    assert sweep(storage, Late(), max_age_s=-1)["renders"] == 0
    one.close()
    two.close()
