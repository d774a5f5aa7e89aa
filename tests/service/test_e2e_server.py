"""End to end against a real ``earfold serve`` process on a loopback port.

Uploads generated stems, renders, polls, downloads and compares the samples with the
renderer run directly on the same files with the same settings (the oracle: they must be
identical). Then crash recovery: SIGKILL the render's worker mid-render, and restart the
server with jobs queued. Lease and tick times are shortened through the CLI's hidden
options so the test takes seconds, not minutes.
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import httpx
import pytest
from numpy.testing import assert_array_equal
from stem_factory import FS, files_field, write_mono_set, write_stem

from earfold.renderer.io import read_audio
from earfold.renderer.render import RenderSettings, render
from earfold.service.jobs.sqlite_store import SqliteJobQueue
from earfold.service.tools.local_server import LocalServer


class Server(LocalServer):
    """A started ``earfold serve`` on ``data_dir`` with short lease and tick times."""

    def __init__(self, data_dir: Path, workers: int) -> None:
        super().__init__(
            workers,
            ["--lease-seconds", "2", "--tick-seconds", "0.05", "--min-free-mb", "0"],
            data_dir=data_dir,
        )
        self.__enter__()
        self.http = httpx.Client(base_url=self.url, timeout=30)

    def stop(self) -> None:
        self.http.close()
        self.__exit__(None, None, None)

    def wait_done(self, job_id: str, timeout: float = 60) -> dict:
        deadline = time.monotonic() + timeout
        while True:
            job = self.http.get(f"/v1/renders/{job_id}").json()
            if job["state"] in ("done", "failed", "cancelled"):
                return job
            assert time.monotonic() < deadline, job
            time.sleep(0.05)


@pytest.fixture
def servers(tmp_path):
    started: list[Server] = []

    def start(workers: int = 1) -> Server:
        server = Server(tmp_path / "data", workers)
        started.append(server)
        return server

    yield start
    for server in started:
        server.stop()


def _download(server: Server, job: dict, dest: Path):
    resp = server.http.get(job["links"]["audio"])
    assert resp.status_code == 200
    dest.write_bytes(resp.content)
    return read_audio(dest)[0]


def test_upload_render_poll_download_matches_the_renderer(servers, tmp_path):
    server = servers(1)
    one = write_stem(tmp_path / "scene.wav", FS // 2, 12, seed=3)
    monos = write_mono_set(tmp_path, "7.1.4", FS // 2, seed=4)
    cases = [([one], "7.1.4"), (monos, None)]
    for paths, layout in cases:
        stem = server.http.post("/v1/stems", files=files_field(paths))
        assert stem.status_code == 201, stem.text
        stem = stem.json()
        assert stem["channels"] == 12 and stem["suggested_layout"] == "7.1.4"
        body = {"stem_id": stem["id"], "seed": 5, "subtype": "PCM_16"}
        if layout:
            body["layout"] = layout
        resp = server.http.post("/v1/renders", json=body)
        assert resp.status_code == 202, resp.text
        job = server.wait_done(resp.json()["id"])
        assert job["state"] == "done", job
        got = _download(server, job, tmp_path / "got.wav")
        ref = tmp_path / "ref.wav"
        render(paths, ref, RenderSettings(layout="7.1.4", seed=5, subtype="PCM_16"))
        assert_array_equal(got, read_audio(ref)[0])


def test_sigkill_of_the_worker_mid_render_still_completes_identically(servers, tmp_path):
    server = servers(1)
    # Long enough, in small blocks, to be caught mid-render (a few seconds).
    path = write_stem(tmp_path / "long.wav", FS * 30, 2, seed=8)
    stem = server.http.post("/v1/stems", files=files_field([path])).json()
    job_id = server.http.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "block_size": 64}
    ).json()["id"]
    store = SqliteJobQueue(tmp_path / "data" / "jobs.sqlite3")
    deadline = time.monotonic() + 30
    while True:
        job = store.get(job_id)
        if job.state.value == "running" and 0 < job.progress < 0.5:
            break
        assert job.state.value in ("queued", "running"), job
        assert time.monotonic() < deadline, "never caught the render running"
        time.sleep(0.01)
    worker_pid = int(job.worker.split(":")[1])
    os.kill(worker_pid, signal.SIGKILL)
    done = server.wait_done(job_id, timeout=90)
    assert done["state"] == "done" and done["attempts"] == 2, done
    store.close()
    got = _download(server, done, tmp_path / "got.wav")
    ref = tmp_path / "ref.wav"
    render([path], ref, RenderSettings(layout="2.0", block_size=64))
    assert_array_equal(got, read_audio(ref)[0])
    leftovers = list((tmp_path / "data" / "renders" / job_id).glob(".*.part"))
    assert leftovers == []


def test_restart_with_jobs_queued_loses_none(servers, tmp_path):
    first = servers(0)  # API only: the jobs wait in the queue
    path = write_stem(tmp_path / "a.wav", FS // 10, 2)
    stem = first.http.post("/v1/stems", files=files_field([path])).json()
    ids = [
        first.http.post(
            "/v1/renders", json={"stem_id": stem["id"], "layout": "2.0", "seed": i}
        ).json()["id"]
        for i in range(3)
    ]
    first.stop()
    second = servers(1)
    for job_id in ids:
        assert second.wait_done(job_id)["state"] == "done"
