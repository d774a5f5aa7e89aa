"""Bounded load check: submit-to-running latency and ``GET /v1/renders/{id}`` latency.

::

    python -m earfold.service.tools.load_poll                      # spawns its own server
    python -m earfold.service.tools.load_poll --url http://127.0.0.1:8000 --token T

Without ``--url`` it starts ``earfold serve --workers 2`` on a free loopback port with a
temporary data directory (removed afterwards), so it can also read the server's CPU time.

1. Submit-to-running with idle workers: ``--trials`` renders submitted one at a time;
   each is polled every ``SPIN_S`` until it reads ``running`` (client view, resolution
   the spin interval) and the server's own ``created`` -> ``started`` stamps are
   reported too (millisecond resolution).
2. Two long renders are started; once both run, ``--pollers`` clients poll them for
   ``--seconds`` seconds, each on its own keep-alive connection, pausing ``--interval``
   s between requests, starting at random phases (real clients are not in step;
   ``--in-step`` starts them together, the worst case). Latency percentiles are printed
   in milliseconds with the clock's resolution, with the CPU used by the poller process
   and the API process, and whether both renders were still running at the end.

3. ``--burst N`` instead: one long render is started; once it runs, ``--concurrency``
   clients (default 200), each on its own new connection, started together, send
   ``N`` status reads in all (``GET /v1/renders/{id}``, back to back), as a crowd of
   pages opened at once does. Each latency counts from the request's start, connecting
   included for a client's first request. Percentiles in milliseconds as above.

The pollers speak HTTP/1.1 over raw asyncio streams: an HTTP client library costs
about as much CPU per request as the server does, and on a 2-core machine that CPU is
taken from the server being measured. It stops by itself and cancels what it queued.
"""

from __future__ import annotations

import argparse
import asyncio
import io
import json
import random
import resource
import sys
import time
import wave
from urllib.parse import urlsplit

import httpx
import numpy as np

from .local_server import LocalServer, cpu_seconds, require_loopback

#: Pause between two polls while waiting for ``running`` (s): the resolution of the
#: client-side submit-to-running figure.
SPIN_S = 0.002

#: The long renders: a 7.1.4 stem of this many seconds in 64-frame blocks (the engine's
#: smallest block, the most work per second of audio), long enough to outlast the window.
LONG_STEM_S = 120.0


def wav_bytes(seconds: float, channels: int, rate: int = 48000, seed: int = 0) -> bytes:
    """A 16-bit WAV of low-level noise, built in memory (stdlib ``wave``)."""
    rng = np.random.default_rng(seed)
    data = rng.integers(-2000, 2000, size=(int(seconds * rate), channels), dtype=np.int16)
    buf = io.BytesIO()
    with wave.open(buf, "wb") as w:
        w.setnchannels(channels)
        w.setsampwidth(2)
        w.setframerate(rate)
        w.writeframes(data.tobytes())
    return buf.getvalue()


def percentiles(values: list[float]) -> dict[str, float]:
    a = np.asarray(values)
    return {
        "p50": round(float(np.percentile(a, 50)), 2),
        "p90": round(float(np.percentile(a, 90)), 2),
        "p99": round(float(np.percentile(a, 99)), 2),
        "max": round(float(a.max()), 2),
        "mean": round(float(a.mean()), 2),
    }


def _stamp(iso: str) -> float:
    """Seconds since the epoch from the API's ``YYYY-MM-DDTHH:MM:SS.mmmZ``."""
    import calendar

    whole, frac = iso.rstrip("Z").split(".")
    return calendar.timegm(time.strptime(whole, "%Y-%m-%dT%H:%M:%S")) + int(frac) / 1000


class RawPoller:
    """One keep-alive HTTP/1.1 connection that GETs one path again and again."""

    def __init__(self, url: str, path: str, token: str | None) -> None:
        parts = urlsplit(url)
        self.host, self.port = parts.hostname, parts.port or 80
        auth = f"Authorization: Bearer {token}\r\n" if token else ""
        self.request = (
            f"GET {path} HTTP/1.1\r\nHost: {parts.netloc}\r\n{auth}Accept: application/json\r\n\r\n"
        ).encode()
        self.reader: asyncio.StreamReader | None = None
        self.writer: asyncio.StreamWriter | None = None

    async def get(self) -> int:
        if self.writer is None:
            self.reader, self.writer = await asyncio.open_connection(self.host, self.port)
        assert self.reader is not None
        self.writer.write(self.request)
        head = await self.reader.readuntil(b"\r\n\r\n")
        status = int(head.split(b" ", 2)[1])
        length = 0
        for line in head.split(b"\r\n")[1:]:
            name, _, value = line.partition(b":")
            if name.strip().lower() == b"content-length":
                length = int(value)
        await self.reader.readexactly(length)
        return status

    async def close(self) -> None:
        if self.writer is not None:
            self.writer.close()
            await self.writer.wait_closed()


async def run(
    url: str,
    *,
    pollers: int,
    seconds: float,
    interval: float,
    trials: int,
    token: str | None,
    in_step: bool,
    server_pid: int | None,
) -> dict:
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    async with httpx.AsyncClient(base_url=url, headers=headers, timeout=120) as http:
        short = (
            await http.post(
                "/v1/stems", files=[("file", ("short.wav", wav_bytes(5, 2), "audio/wav"))]
            )
        ).json()
        # 1. Submit-to-running with idle workers.
        client_ms, server_ms = [], []
        for _ in range(trials):
            t0 = time.perf_counter()
            job = (
                await http.post("/v1/renders", json={"stem_id": short["id"], "layout": "2.0"})
            ).json()
            while True:
                view = (await http.get(f"/v1/renders/{job['id']}")).json()
                if view["state"] != "queued":
                    break
                await asyncio.sleep(SPIN_S)
            client_ms.append((time.perf_counter() - t0) * 1000)
            if view["started"]:
                server_ms.append((_stamp(view["started"]) - _stamp(view["created"])) * 1000)
            while view["state"] in ("queued", "running"):  # let the worker go idle again
                await asyncio.sleep(0.05)
                view = (await http.get(f"/v1/renders/{job['id']}")).json()
            await http.delete(f"/v1/renders/{job['id']}")
            await asyncio.sleep(0.3)

        # 2. Polls while two renders run.
        long = (
            await http.post(
                "/v1/stems", files=[("file", ("long.wav", wav_bytes(LONG_STEM_S, 12), "audio/wav"))]
            )
        ).json()
        jobs = [
            (
                await http.post(
                    "/v1/renders", json={"stem_id": long["id"], "layout": "7.1.4", "block_size": 64}
                )
            ).json()["id"]
            for _ in range(2)
        ]
        deadline = time.monotonic() + 30
        while True:
            states = [(await http.get(f"/v1/renders/{j}")).json()["state"] for j in jobs]
            if states == ["running", "running"]:
                break
            if time.monotonic() > deadline:
                raise RuntimeError(
                    "the two long renders did not both start within 30 s; "
                    "does the server have 2 workers?"
                )
            await asyncio.sleep(0.05)

        latencies: list[float] = []
        errors: list[int] = []
        rng = random.Random(0)
        clients = [RawPoller(url, f"/v1/renders/{jobs[i % 2]}", token) for i in range(pollers)]
        end = time.perf_counter() + seconds

        async def poll(client: RawPoller) -> None:
            if not in_step:
                await asyncio.sleep(rng.uniform(0, interval))
            while time.perf_counter() < end:
                t = time.perf_counter()
                status = await client.get()
                latencies.append((time.perf_counter() - t) * 1000)
                if status != 200:
                    errors.append(status)
                await asyncio.sleep(interval)

        cpu0 = resource.getrusage(resource.RUSAGE_SELF)
        server_cpu0 = cpu_seconds(server_pid) if server_pid else None
        wall0 = time.perf_counter()
        await asyncio.gather(*(poll(c) for c in clients))
        wall = time.perf_counter() - wall0
        cpu1 = resource.getrusage(resource.RUSAGE_SELF)
        server_cpu = (
            cpu_seconds(server_pid) - server_cpu0
            if server_pid and server_cpu0 is not None
            else None
        )
        for c in clients:
            await c.close()
        states = [(await http.get(f"/v1/renders/{j}")).json()["state"] for j in jobs]
        for j in jobs:
            await http.delete(f"/v1/renders/{j}")
        for stem in (short, long):
            await http.delete(f"/v1/stems/{stem['id']}")

    own_cpu = (cpu1.ru_utime - cpu0.ru_utime) + (cpu1.ru_stime - cpu0.ru_stime)
    return {
        "submit_to_running": {
            "trials": trials,
            "client_ms": percentiles(client_ms),
            "client_resolution_ms": SPIN_S * 1000,
            "server_stamps_ms": percentiles(server_ms) if server_ms else None,
            "server_stamps_resolution_ms": 1.0,
        },
        "polls": {
            "pollers": pollers,
            "interval_s": interval,
            "phases": "in step" if in_step else "random",
            "window_s": round(wall, 2),
            "requests": len(latencies),
            "rate_per_s": round(len(latencies) / wall, 1),
            "non_200": len(errors),
            "get_ms": percentiles(latencies),
            "renders_running_at_end": states.count("running"),
            "poller_cpu_share": round(own_cpu / wall, 3),
            "api_process_cpu_share": None if server_cpu is None else round(server_cpu / wall, 3),
        },
        "clock_resolution_ms": time.get_clock_info("perf_counter").resolution * 1000,
    }


async def _start_long_render(http: httpx.AsyncClient, count: int) -> tuple[dict, list[str]]:
    """Upload the long stem and start ``count`` renders of it; wait until all run."""
    long = (
        await http.post(
            "/v1/stems", files=[("file", ("long.wav", wav_bytes(LONG_STEM_S, 12), "audio/wav"))]
        )
    ).json()
    jobs = [
        (
            await http.post(
                "/v1/renders", json={"stem_id": long["id"], "layout": "7.1.4", "block_size": 64}
            )
        ).json()["id"]
        for _ in range(count)
    ]
    deadline = time.monotonic() + 30
    while True:
        states = [(await http.get(f"/v1/renders/{j}")).json()["state"] for j in jobs]
        if states == ["running"] * count:
            return long, jobs
        if time.monotonic() > deadline:
            raise RuntimeError(f"{count} long render(s) did not start within 30 s")
        await asyncio.sleep(0.05)


async def run_burst(
    url: str,
    *,
    requests: int,
    concurrency: int,
    token: str | None,
    server_pid: int | None,
) -> dict:
    """A burst of ``requests`` status reads from ``concurrency`` clients, one render running."""
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    async with httpx.AsyncClient(base_url=url, headers=headers, timeout=120) as http:
        long, jobs = await _start_long_render(http, 1)
        path = f"/v1/renders/{jobs[0]}"
        clients = [RawPoller(url, path, token) for _ in range(concurrency)]
        latencies: list[float] = []
        errors: list[int] = []
        left = [requests]

        async def client_loop(client: RawPoller) -> None:
            while left[0] > 0:
                left[0] -= 1
                t = time.perf_counter()
                status = await client.get()
                latencies.append((time.perf_counter() - t) * 1000)
                if status != 200:
                    errors.append(status)

        server_cpu0 = cpu_seconds(server_pid) if server_pid else None
        wall0 = time.perf_counter()
        await asyncio.gather(*(client_loop(c) for c in clients))
        wall = time.perf_counter() - wall0
        server_cpu = (
            cpu_seconds(server_pid) - server_cpu0
            if server_pid and server_cpu0 is not None
            else None
        )
        for c in clients:
            await c.close()
        state = (await http.get(path)).json()["state"]
        await http.delete(path)
        await http.delete(f"/v1/stems/{long['id']}")
    return {
        "burst": {
            "requests": len(latencies),
            "clients": concurrency,
            "window_s": round(wall, 3),
            "rate_per_s": round(len(latencies) / wall, 1),
            "non_200": len(errors),
            "get_ms": percentiles(latencies),
            "render_running_at_end": state == "running",
            "api_process_cpu_share": None if server_cpu is None else round(server_cpu / wall, 3),
        },
        "clock_resolution_ms": time.get_clock_info("perf_counter").resolution * 1000,
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(
        prog="python -m earfold.service.tools.load_poll", description=__doc__.split("\n\n")[0]
    )
    p.add_argument("--url", help="a running server (loopback only); default: spawn one")
    p.add_argument("--workers", type=int, default=2, help="workers of a spawned server")
    p.add_argument("--pollers", type=int, default=50)
    p.add_argument("--seconds", type=float, default=10.0)
    p.add_argument(
        "--interval", type=float, default=0.25, help="pause of each poller between requests (s)"
    )
    p.add_argument("--trials", type=int, default=10, help="submit-to-running trials")
    p.add_argument("--in-step", action="store_true", help="start all pollers together")
    p.add_argument("--token")
    p.add_argument(
        "--burst",
        type=int,
        metavar="N",
        help="instead: N status reads at once from --concurrency clients, one render running",
    )
    p.add_argument("--concurrency", type=int, default=200, help="clients of --burst")
    args = p.parse_args(argv)
    if args.burst is not None and not (0 < args.burst <= 100_000 and 0 < args.concurrency <= 1000):
        p.error("--burst must be 1 to 100000 and --concurrency 1 to 1000")

    def go(url: str, pid: int | None) -> dict:
        if args.burst is not None:
            return asyncio.run(
                run_burst(
                    url,
                    requests=args.burst,
                    concurrency=args.concurrency,
                    token=args.token,
                    server_pid=pid,
                )
            )
        return asyncio.run(
            run(
                url,
                pollers=args.pollers,
                seconds=args.seconds,
                interval=args.interval,
                trials=args.trials,
                token=args.token,
                in_step=args.in_step,
                server_pid=pid,
            )
        )

    if args.url:
        result = go(require_loopback(args.url), None)
    else:
        with LocalServer(args.workers) as server:
            result = go(server.url, server.pid)
            result["server"] = {"workers": args.workers, "spawned": True}
    json.dump(result, sys.stdout, indent=2)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
