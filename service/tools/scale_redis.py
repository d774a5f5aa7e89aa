"""Scale-out measurement on the Redis backend: throughput of 1 vs 2 workers, queue overhead.

::

    python -m earfold.service.tools.scale_redis                         # Redis on 127.0.0.1:6379/0
    python -m earfold.service.tools.scale_redis --redis redis://127.0.0.1:6380/0 --seconds 30

It starts ``earfold serve --queue redis://...?prefix=UNIQUE --workers 0`` on a free
loopback port (temporary data directory) and, in the same run:

1. Throughput: a batch of ``--batch`` 7.1.4 renders of generated ``--seconds``-second
   stems, submitted at once, with ``earfold worker --processes 1`` and then with
   ``--processes 2``. The batch time is from the first ``created`` to the last
   ``finished`` stamp of the job records (server clocks, microsecond resolution); the
   ratio of the two is the speed-up.
2. Queue overhead: with two idle workers, ``--trials`` tiny renders submitted one at a
   time; the overhead of each is its record's ``created`` (API) to ``started`` (worker)
   stamp, both ``time.time()`` on this machine; p50 and p99 in milliseconds.

Its Redis keys (one prefix) are deleted at the end; it never touches other keys.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
import uuid
from urllib.parse import urlsplit

import httpx
import numpy as np

from .load_poll import wav_bytes
from .local_server import LocalServer, require_loopback

#: How long a batch may take before the script gives up (s).
BATCH_TIMEOUT_S = 1800.0


def _wait(http: httpx.Client, ids: list[str], timeout: float) -> list[dict]:
    deadline = time.monotonic() + timeout
    pending = set(ids)
    jobs: dict[str, dict] = {}
    while pending:
        for job_id in list(pending):
            job = http.get(f"/v1/renders/{job_id}").json()
            if job["state"] not in ("queued", "running"):
                if job["state"] != "done":
                    raise RuntimeError(f"render {job_id} ended {job['state']}: {job}")
                jobs[job_id] = job
                pending.discard(job_id)
        if time.monotonic() > deadline:
            raise RuntimeError(f"{len(pending)} renders not done after {timeout:.0f} s")
        time.sleep(0.1)
    return [jobs[i] for i in ids]


def _stamp(store, job: dict, key: str) -> float:
    """A time stamp of the job's record, at full resolution (the API rounds to ms)."""
    return float(getattr(store.get(job["id"]), key))


def _workers(url: str, data_dir: str, processes: int) -> subprocess.Popen:
    return subprocess.Popen(
        [
            sys.executable,
            "-m",
            "earfold.service.cli",
            "worker",
            "--queue",
            url,
            "--data-dir",
            data_dir,
            "--processes",
            str(processes),
        ],
        stderr=subprocess.DEVNULL,
    )


def _stop(proc: subprocess.Popen) -> None:
    proc.terminate()
    try:
        proc.wait(30)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


def _warm(http: httpx.Client, stem_id: str, processes: int) -> None:
    """One tiny render per worker process, so that imports are not in the figures."""
    ids = [
        http.post("/v1/renders", json={"stem_id": stem_id, "layout": "2.0"}).json()["id"]
        for _ in range(processes * 2)
    ]
    _wait(http, ids, 120)


def most_concurrent(intervals: list[tuple[float, float]]) -> int:
    """Most intervals (start, end) open at one time."""
    events = sorted([(a, 1) for a, _ in intervals] + [(b, -1) for _, b in intervals])
    most = now = 0
    for _, step in events:
        now += step
        most = max(most, now)
    return most


def batch(
    store, http: httpx.Client, url: str, data_dir: str, stems: list[str], tiny: str, processes: int
) -> tuple[float, int]:
    """Seconds from the first submit to the last finish of a batch with ``processes``, and
    the most renders that ran at once (a check that the workers did run side by side)."""
    proc = _workers(url, data_dir, processes)
    try:
        _warm(http, tiny, processes)
        ids = [
            http.post("/v1/renders", json={"stem_id": s, "layout": "7.1.4"}).json()["id"]
            for s in stems
        ]
        jobs = _wait(http, ids, BATCH_TIMEOUT_S)
    finally:
        _stop(proc)
    spans = [(_stamp(store, j, "started"), _stamp(store, j, "finished")) for j in jobs]
    return (
        max(_stamp(store, j, "finished") for j in jobs)
        - min(_stamp(store, j, "created") for j in jobs)
    ), most_concurrent(spans)


def overhead(
    store, http: httpx.Client, url: str, data_dir: str, tiny: str, trials: int
) -> list[float]:
    """Enqueue-to-start (ms) of ``trials`` renders submitted one at a time to 2 idle workers."""
    proc = _workers(url, data_dir, 2)
    out = []
    try:
        _warm(http, tiny, 2)
        for _ in range(trials):
            job_id = http.post("/v1/renders", json={"stem_id": tiny, "layout": "2.0"}).json()["id"]
            (job,) = _wait(http, [job_id], 120)
            out.append((_stamp(store, job, "started") - _stamp(store, job, "created")) * 1000)
            time.sleep(0.2)  # the workers are idle again
    finally:
        _stop(proc)
    return out


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(
        prog="python -m earfold.service.tools.scale_redis", description=__doc__.split("\n\n")[0]
    )
    p.add_argument("--redis", default="redis://127.0.0.1:6379/0", help="Redis (loopback only)")
    p.add_argument("--batch", type=int, default=8, help="renders per batch (default 8)")
    p.add_argument("--seconds", type=float, default=20.0, help="stem length (default 20)")
    p.add_argument("--trials", type=int, default=30, help="overhead trials (default 30)")
    p.add_argument("--json", action="store_true")
    args = p.parse_args(argv)
    host = urlsplit(args.redis).hostname or ""
    require_loopback(f"http://{host}/")
    url = f"{args.redis}?prefix=earfold-measure-{uuid.uuid4().hex[:10]}"

    from earfold.service.jobs.redis_store import RedisJobQueue

    store = RedisJobQueue(url, deliver=False)
    store.ping()
    results: dict = {"batch": args.batch, "seconds": args.seconds, "layout": "7.1.4"}
    try:
        with (
            LocalServer(0, ["--queue", url, "--max-queued", "1000"]) as server,
            httpx.Client(base_url=server.url, timeout=60) as http,
        ):
            data_dir = str(server.data_dir)
            files = [
                ("file", (f"batch{i}.wav", wav_bytes(args.seconds, 12, seed=i), "audio/wav"))
                for i in range(args.batch)
            ]
            stems = [http.post("/v1/stems", files=[f]).json()["id"] for f in files]
            tiny = http.post(
                "/v1/stems", files=[("file", ("tiny.wav", wav_bytes(0.05, 2), "audio/wav"))]
            ).json()["id"]
            load_before = os.getloadavg()[0]
            (one, side1) = batch(store, http, url, data_dir, stems, tiny, 1)
            (two, side2) = batch(store, http, url, data_dir, stems, tiny, 2)
            waits = np.array(overhead(store, http, url, data_dir, tiny, args.trials))
        results.update(
            {
                "one_worker_s": round(one, 3),
                "two_workers_s": round(two, 3),
                "speedup": round(one / two, 3),
                "most_at_once": [side1, side2],
                "load_average_1min": [round(load_before, 2), round(os.getloadavg()[0], 2)],
                "cores": os.cpu_count(),
                "overhead_ms": {
                    "p50": round(float(np.percentile(waits, 50)), 1),
                    "p99": round(float(np.percentile(waits, 99)), 1),
                    "max": round(float(waits.max()), 1),
                    "trials": len(waits),
                },
                "resolution": "job-record stamps, time.time() (about 1 us); one run, not averaged",
            }
        )
    finally:
        store.purge()
        store.close()
    if args.json:
        print(json.dumps(results, indent=2))
    else:
        print(
            f"batch of {args.batch} 7.1.4 renders of {args.seconds:g} s: 1 worker "
            f"{results['one_worker_s']:.2f} s, 2 workers {results['two_workers_s']:.2f} s, "
            f"speed-up {results['speedup']:.2f}x (most renders at once: "
            f"{side1} and {side2})"
        )
        print(
            f"load average (1 min) before/after: {results['load_average_1min']} on "
            f"{results['cores']} cores (other work on the machine lowers the speed-up)"
        )
        o = results["overhead_ms"]
        print(
            f"queue overhead (created -> started, idle workers, {o['trials']} trials): "
            f"p50 {o['p50']:.1f} ms, p99 {o['p99']:.1f} ms, max {o['max']:.1f} ms"
        )
        print(f"resolution: {results['resolution']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
