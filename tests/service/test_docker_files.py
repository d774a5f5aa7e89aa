"""docker/Dockerfile and docker/compose.yaml, checked without a Docker engine.

The files are read as data (the Dockerfile's instructions, the compose file as YAML) and
checked for what the deployment needs; then the very commands the image runs (its
ENTRYPOINT with the compose commands, and both health checks) are run here as plain
processes, with the image's paths and host names replaced by a temporary folder, a free
port and the test Redis. A render submitted to that API is rendered by that worker.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
import yaml
from stem_factory import FS, files_field, write_stem

from earfold.service.tools.local_server import free_port

REPO = Path(__file__).resolve().parents[2]
DOCKER = REPO / "docker"
TOKEN = "docker-test-token-0123456789"


def dockerfile() -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) of docker/Dockerfile, continuation lines joined."""
    out, current = [], ""
    for line in (DOCKER / "Dockerfile").read_text().splitlines():
        if not current and (not line.strip() or line.lstrip().startswith("#")):
            continue
        current += line.rstrip("\\").strip() + " "
        if not line.endswith("\\"):
            word, _, rest = current.strip().partition(" ")
            out.append((word.upper(), rest.strip()))
            current = ""
    return out


def instruction(name: str) -> list[str]:
    return [args for word, args in dockerfile() if word == name]


def compose() -> dict:
    return yaml.safe_load((DOCKER / "compose.yaml").read_text())


def test_dockerfile_slim_base_non_root_healthcheck_and_sets():
    (base,) = instruction("FROM")
    assert base.startswith("python:") and base.endswith("-slim")
    users = instruction("USER")
    assert users and users[-1] not in ("root", "0")
    (health,) = instruction("HEALTHCHECK")
    assert "/v1/health" in health
    assert json.loads(instruction("ENTRYPOINT")[0]) == ["earfold"]
    copied = " ".join(instruction("COPY"))
    assert "hrtf_sets" in copied and "renderer" in copied and "service" in copied
    # A regular install, so the shipped SOFA sets come as package data.
    run = " ".join(instruction("RUN"))
    assert "pip install '.[redis]'" in run and "-e " not in run
    # the image checks that /docs has its assets (they come from a package, not a CDN)
    assert "assets_dir()" in run
    ignore = (DOCKER / "Dockerfile.dockerignore").read_text().split()
    assert "!hrtf_sets/" in ignore


def test_shipped_sets_are_package_data():
    import tomllib

    project = tomllib.loads((REPO / "pyproject.toml").read_text())
    assert "*.sofa" in project["tool"]["setuptools"]["package-data"]["earfold.hrtf_sets"]
    assert list((REPO / "hrtf_sets").glob("*.sofa"))
    # The queue libraries are the [redis] extra, which the image installs.
    extra = " ".join(project["project"]["optional-dependencies"]["redis"])
    assert "dramatiq" in extra and "redis" in extra


def test_compose_has_api_scalable_workers_redis_and_a_shared_volume():
    services = compose()["services"]
    assert {"api", "worker", "redis"} <= set(services)
    worker, api, redis = services["worker"], services["api"], services["redis"]
    # Scalable: no fixed container name or host port on the worker.
    assert "container_name" not in worker and "ports" not in worker
    assert worker["command"][0] == "worker"
    for svc in (worker, api, redis):
        assert svc["restart"] in ("unless-stopped", "always", "on-failure")
    volume = api["volumes"][0].split(":")[0]
    assert worker["volumes"][0].split(":")[0] == volume
    assert volume in compose()["volumes"]
    assert "--appendonly" in redis["command"]
    assert api["environment"]["EARFOLD_TOKENS"].startswith("${EARFOLD_TOKENS:?")
    assert "--check" in worker["healthcheck"]["test"]
    readme = (REPO / "README.md").read_text()
    assert "docker compose -f docker/compose.yaml up --scale worker=4" in readme


def _local(argv: list[str], data: Path, port: int, queue_url: str) -> list[str]:
    """An image command as a local process: paths, port and Redis host replaced."""
    out = []
    for arg in argv:
        arg = arg.replace("redis://redis:6379/0", queue_url).replace("8000", str(port))
        out.append(str(data) if arg == "/data" else arg)
    if out and out[0] == "earfold":
        out = [sys.executable, "-m", "earfold.service.cli", *out[1:]]
    elif out and out[0] == "python":
        out = [sys.executable, *out[1:]]
    return out


@pytest.fixture
def procs():
    started: list[subprocess.Popen] = []
    yield started
    for proc in started:
        if proc.poll() is None:
            proc.terminate()
            try:
                proc.wait(20)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()


def test_the_image_commands_run_and_render(tmp_path, redis_queue_url, procs):
    data = tmp_path / "data"
    data.mkdir()
    port = free_port()
    env = {**os.environ, "EARFOLD_TOKENS": TOKEN}
    entry = json.loads(instruction("ENTRYPOINT")[0])
    services = compose()["services"]
    api_cmd = _local(entry + services["api"]["command"], data, port, redis_queue_url)
    assert json.loads(instruction("CMD")[0]) == services["api"]["command"]
    worker_cmd = _local(entry + services["worker"]["command"], data, port, redis_queue_url)
    procs.append(subprocess.Popen(api_cmd, cwd=tmp_path, env=env, stderr=subprocess.DEVNULL))
    procs.append(subprocess.Popen(worker_cmd, cwd=tmp_path, env=env, stderr=subprocess.DEVNULL))

    health = instruction("HEALTHCHECK")[0]
    health_cmd = _local(
        json.loads(health[health.index("CMD") + 3 :].strip()), data, port, redis_queue_url
    )
    deadline = time.monotonic() + 60
    while subprocess.run(health_cmd, capture_output=True, timeout=30).returncode != 0:
        assert procs[0].poll() is None, "the API command exited"
        assert time.monotonic() < deadline, "the image's health check never passed"
        time.sleep(0.2)
    worker_check = _local(
        services["worker"]["healthcheck"]["test"][1:], data, port, redis_queue_url
    )
    checked = subprocess.run(worker_check, capture_output=True, text=True, timeout=60, env=env)
    assert checked.returncode == 0, checked.stderr

    auth = {"Authorization": f"Bearer {TOKEN}"}
    with httpx.Client(base_url=f"http://127.0.0.1:{port}", headers=auth, timeout=30) as http:
        path = write_stem(tmp_path / "a.wav", FS // 10, 6, seed=2)
        stem = http.post("/v1/stems", files=files_field([path])).json()
        job = http.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1"}).json()
        deadline = time.monotonic() + 60
        while (job := http.get(f"/v1/renders/{job['id']}").json())["state"] in (
            "queued",
            "running",
        ):
            assert time.monotonic() < deadline, job
            time.sleep(0.1)
        assert job["state"] == "done", job
        assert http.get(job["links"]["audio"]).status_code == 200
