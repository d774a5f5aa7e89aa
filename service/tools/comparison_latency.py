"""Time from ``POST /v1/comparisons`` to the first playable trial.

::

    python -m earfold.service.tools.comparison_latency               # spawns its own server
    python -m earfold.service.tools.comparison_latency --auto        # automatic (loudest) excerpt
    python -m earfold.service.tools.comparison_latency --url http://127.0.0.1:8000 --token T

Without ``--url`` it starts ``earfold serve --workers 2`` (the embedded SQLite queue) on a
free loopback port with a temporary data directory, removed afterwards. It uploads a
generated 7.1.4 stem (``--stem-seconds``, 48 kHz, 16-bit noise whose level changes every
second), then, ``--runs`` times: posts a comparison of four variants (KEMAR dry, KEMAR
small room, KEMAR medium room, rigid sphere dry) with a ``--length`` s excerpt, polls the
session every ``POLL_S`` until it is ready, and downloads every label's audio of the first
trial. It prints, per run and as the median, the POST's own latency, POST-to-ready and
POST-to-playable (ready and the first trial's audio received; the browser's decoding is
not included), in seconds to the millisecond, with the poll interval as resolution.

``--modes fresh,warm`` compares how builds start instead: each round starts one spawned
server per mode in turn, ``fresh`` with ``EARFOLD_WARM_PROCESS=0`` (each build forks from
its worker, which loaded the renderer once) and ``warm`` as shipped (each build runs in
the worker's warm render process, which keeps the HRIR sets it loaded); the modes
alternate for ``--rounds`` rounds so both see the same machine load, and per mode the
best round's median is printed.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time

import httpx

from .load_poll import wav_bytes
from .local_server import LocalServer, require_loopback

#: Pause between two polls of the session (s): the resolution of POST-to-ready.
POLL_S = 0.02

VARIANTS = [
    {"name": "KEMAR, no room", "layout": "7.1.4", "hrtf": "mit-kemar", "room": "none"},
    {"name": "KEMAR, small room", "layout": "7.1.4", "hrtf": "mit-kemar", "room": "small"},
    {"name": "KEMAR, medium room", "layout": "7.1.4", "hrtf": "mit-kemar", "room": "medium"},
    {"name": "sphere, no room", "layout": "7.1.4", "hrtf": "rigid-sphere", "room": "none"},
]


def one_run(http: httpx.Client, stem_id: str, length: float, start: float | None) -> dict:
    excerpt = {"length": length} if start is None else {"start": start, "length": length}
    body = {
        "stem_id": stem_id,
        "variants": VARIANTS,
        "mode": "ab",
        "trials": 10,
        "excerpt": excerpt,
    }
    t0 = time.perf_counter()
    resp = http.post("/v1/comparisons", json=body)
    t_post = time.perf_counter()
    resp.raise_for_status()
    view = resp.json()
    while view["state"] == "preparing":
        time.sleep(POLL_S)
        view = http.get(f"/v1/comparisons/{view['id']}").json()
    t_ready = time.perf_counter()
    if view["state"] != "ready":
        raise RuntimeError(f"the comparison {view['state']}: {view['message']}")
    trial = view["trials"][view["next_trial"]]
    sizes = [len(http.get(url).content) for url in trial["audio"].values()]
    t_play = time.perf_counter()
    http.delete(f"/v1/comparisons/{view['id']}")
    return {
        "post_s": round(t_post - t0, 3),
        "ready_s": round(t_ready - t0, 3),
        "playable_s": round(t_play - t0, 3),
        "audio_bytes": sizes,
        "excerpt": view["excerpt"],
        "level_lufs": view["level_lufs"],
    }


def measure(
    url: str, token: str | None, runs: int, stem_seconds: float, length: float, start: float | None
) -> dict:
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    with httpx.Client(base_url=url, headers=headers, timeout=120) as http:
        data = wav_bytes(stem_seconds, 12, seed=1)
        resp = http.post("/v1/stems", files=[("file", ("city-at-dusk.wav", data, "audio/wav"))])
        resp.raise_for_status()
        stem_id = resp.json()["id"]
        results = [one_run(http, stem_id, length, start) for _ in range(runs)]
        http.delete(f"/v1/stems/{stem_id}")
    return {
        "variants": len(VARIANTS),
        "layout": "7.1.4",
        "excerpt_s": length,
        "automatic_excerpt": start is None,
        "stem_s": stem_seconds,
        "poll_s": POLL_S,
        "runs": results,
        "median": {
            k: round(statistics.median(r[k] for r in results), 3)
            for k in ("post_s", "ready_s", "playable_s")
        },
    }


#: The environment variable that turns the warm render process off (see
#: earfold.service.jobs.worker.WARM_ENV; repeated so this tool does not import the worker).
WARM_ENV = "EARFOLD_WARM_PROCESS"

MODES = {"fresh": "0", "warm": "1"}


def compare_modes(args: argparse.Namespace, modes: list[str], start: float | None) -> dict:
    """Alternate one spawned server per mode for ``args.rounds`` rounds."""
    rounds = []
    before = os.environ.get(WARM_ENV)
    try:
        for _ in range(args.rounds):
            row = {}
            for mode in modes:
                os.environ[WARM_ENV] = MODES[mode]
                with LocalServer(workers=args.workers) as server:
                    time.sleep(args.settle)
                    row[mode] = measure(
                        server.url, None, args.runs, args.stem_seconds, args.length, start
                    )
            rounds.append(row)
    finally:
        if before is None:
            os.environ.pop(WARM_ENV, None)
        else:
            os.environ[WARM_ENV] = before
    best = {m: min((r[m]["median"] for r in rounds), key=lambda x: x["playable_s"]) for m in modes}
    return {"rounds": rounds, "best_round_median": best}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--url", help="a running server (loopback only); default: start one")
    p.add_argument("--token", help="API token for --url")
    p.add_argument("--workers", type=int, default=2, help="workers of the spawned server")
    p.add_argument("--runs", type=int, default=3)
    p.add_argument("--stem-seconds", type=float, default=60.0)
    p.add_argument("--length", type=float, default=15.0, help="excerpt length (s)")
    p.add_argument("--start", type=float, default=20.0, help="excerpt start (s)")
    p.add_argument("--auto", action="store_true", help="automatic excerpt (loudest window)")
    p.add_argument("--json", action="store_true", help="print JSON only")
    p.add_argument("--modes", help="compare build start-up: comma-separated fresh, warm")
    p.add_argument("--rounds", type=int, default=2, help="rounds of --modes")
    p.add_argument("--settle", type=float, default=4.0, help="idle wait after start (s)")
    args = p.parse_args(argv)
    start = None if args.auto else args.start
    if args.modes:
        modes = [m.strip() for m in args.modes.split(",") if m.strip()]
        if args.url or not modes or any(m not in MODES for m in modes):
            p.error(f"--modes takes {', '.join(MODES)} and spawns its own servers (no --url)")
        if not 1 <= args.rounds <= 10:
            p.error("--rounds 1-10")
        compared = compare_modes(args, modes, start)
        if args.json:
            print(json.dumps(compared, indent=2))
            return 0
        for i, row in enumerate(compared["rounds"], 1):
            for mode, res in row.items():
                m = res["median"]
                print(
                    f"round {i} {mode:>5}: ready {m['ready_s']:.3f} s, first trial playable "
                    f"{m['playable_s']:.3f} s (median of {len(res['runs'])})"
                )
        for mode, m in compared["best_round_median"].items():
            print(f"best round, {mode:>5}: playable {m['playable_s']:.3f} s")
        return 0
    if args.url:
        out = measure(
            require_loopback(args.url), args.token, args.runs, args.stem_seconds, args.length, start
        )
    else:
        with LocalServer(workers=args.workers) as server:
            out = measure(server.url, None, args.runs, args.stem_seconds, args.length, start)
    if args.json:
        print(json.dumps(out, indent=2))
    else:
        for i, r in enumerate(out["runs"], 1):
            print(
                f"run {i}: POST {r['post_s']:.3f} s, ready {r['ready_s']:.3f} s, "
                f"first trial playable {r['playable_s']:.3f} s (excerpt {r['excerpt']})"
            )
        m = out["median"]
        print(
            f"median of {len(out['runs'])}: POST {m['post_s']:.3f} s, ready "
            f"{m['ready_s']:.3f} s, playable {m['playable_s']:.3f} s "
            f"(4 variants, 7.1.4, {out['excerpt_s']:g} s excerpt; resolution {POLL_S} s)"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
