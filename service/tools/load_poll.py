"""Bounded load check: submit-to-running latency and ``GET /v1/renders/{id}`` latency.

Run against a server you started (``ossicle serve --workers 2``)::

    python -m service.tools.load_poll --url http://127.0.0.1:8000 --pollers 50 --seconds 10

It uploads a generated stereo stem, submits one render to an idle worker and measures
the time until the job reads ``running``; then starts two long renders and has
``--pollers`` concurrent clients poll them (each pausing ``--interval`` s between
requests) for ``--seconds`` seconds, and prints
the latency percentiles (milliseconds, clock resolution printed alongside). It stops by
itself and cancels what it queued.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import statistics
import sys
import time

import httpx
import numpy as np


def _wav(seconds: float, rate: int = 48000) -> bytes:
    from renderer.audio_io import write_audio
    import tempfile
    from pathlib import Path

    rng = np.random.default_rng(0)
    data = (0.05 * rng.standard_normal((int(seconds * rate), 2))).astype(np.float32)
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "load.wav"
        write_audio(p, data, rate, subtype="PCM_16")
        return p.read_bytes()


def _percentile(values: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(values), q))


async def run(url: str, pollers: int, seconds: float, token: str | None,
              interval: float = 0.25) -> dict:
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    async with httpx.AsyncClient(base_url=url, headers=headers, timeout=30,
                                 limits=httpx.Limits(max_connections=pollers + 4)) as http:
        stem = (await http.post("/v1/stems", files=[("file", ("load.wav", _wav(40),
                                                               "audio/wav"))])).json()
        body = {"stem_id": stem["id"], "layout": "2.0"}
        # Submit-to-running with idle workers.
        t0 = time.perf_counter()
        first = (await http.post("/v1/renders", json=body)).json()
        while (await http.get(f"/v1/renders/{first['id']}")).json()["state"] == "queued":
            await asyncio.sleep(0.005)
        submit_to_running_ms = (time.perf_counter() - t0) * 1000
        await http.delete(f"/v1/renders/{first['id']}")
        slow = {**body, "block_size": 64}
        jobs = [(await http.post("/v1/renders", json=slow)).json()["id"] for _ in range(2)]
        latencies: list[float] = []
        deadline = time.perf_counter() + seconds

        async def poll(job_id: str) -> None:
            while time.perf_counter() < deadline:
                t = time.perf_counter()
                r = await http.get(f"/v1/renders/{job_id}")
                latencies.append((time.perf_counter() - t) * 1000)
                r.raise_for_status()
                await asyncio.sleep(interval)

        await asyncio.gather(*(poll(jobs[i % 2]) for i in range(pollers)))
        states = [(await http.get(f"/v1/renders/{j}")).json()["state"] for j in jobs]
        for j in jobs:
            await http.delete(f"/v1/renders/{j}")
    return {
        "submit_to_running_ms": round(submit_to_running_ms, 1),
        "pollers": pollers,
        "interval_s": interval,
        "requests": len(latencies),
        "renders_running_at_end": states.count("running"),
        "get_ms": {"p50": round(_percentile(latencies, 50), 2),
                   "p99": round(_percentile(latencies, 99), 2),
                   "max": round(max(latencies), 2),
                   "mean": round(statistics.fmean(latencies), 2)},
        "clock_resolution_ms": time.get_clock_info("perf_counter").resolution * 1000,
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m service.tools.load_poll")
    p.add_argument("--url", default="http://127.0.0.1:8000")
    p.add_argument("--pollers", type=int, default=50)
    p.add_argument("--seconds", type=float, default=10.0)
    p.add_argument("--interval", type=float, default=0.25,
                   help="pause of each poller between requests (s); 0 = saturate")
    p.add_argument("--token")
    args = p.parse_args(argv)
    result = asyncio.run(run(args.url, args.pollers, args.seconds, args.token,
                             args.interval))
    json.dump(result, sys.stdout, indent=2)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
