"""How fast a queued render starts: claim-to-first-progress, with and without warm processes.

::

    python -m earfold.service.tools.job_start                 # both modes, interleaved
    python -m earfold.service.tools.job_start --modes warm --trials 20

For each round and each mode it starts ``earfold serve --workers N`` (the embedded SQLite
queue) on a free loopback port with a temporary data directory: ``fresh`` with
``EARFOLD_WARM_PROCESS=0`` (every render starts a new child process), ``warm`` as
shipped (each worker keeps a warm render process, earfold.service.jobs.warm). Once the
server answers it waits ``--settle`` s (an idle service, its warm processes ready), then
submits ``--trials`` short renders one at a time (a ``--stem-seconds`` 5.1 stem to
stereo, and with ``--room`` a room) and, polling every ``SPIN_S``, notes when each is
first seen with progress above zero. Per render:

* ``submit_to_claim_ms``: the server's ``created`` -> ``started`` stamps (ms resolution);
* ``claim_to_first_progress_ms``: ``started`` to the first read showing progress (or to
  ``finished``, if earlier), on the same machine's clock: an upper bound (resolution:
  the spin interval plus one status read) of the time until the job has started
  computing and written its first block;
* ``claim_to_done_ms``: ``started`` -> ``finished`` stamps.

The modes alternate (fresh, warm, fresh, warm ... for ``--rounds`` rounds), so that both
see the same machine load; it prints each round's medians and per mode the best round.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import time

import httpx

from .load_poll import _stamp, wav_bytes
from .local_server import LocalServer

#: Pause between two status reads while waiting for progress (s).
SPIN_S = 0.002

#: The environment variable that turns the warm render process off (see
#: earfold.service.jobs.worker.WARM_ENV; repeated so this tool does not import the worker).
WARM_ENV = "EARFOLD_WARM_PROCESS"

MODES = {"fresh": "0", "warm": "1"}


def trials(url: str, count: int, stem_seconds: float, room: str | None) -> list[dict]:
    """Submit ``count`` renders one at a time; the figures of each."""
    out = []
    with httpx.Client(base_url=url, timeout=120) as http:
        data = wav_bytes(stem_seconds, 6, seed=2)
        stem = http.post("/v1/stems", files=[("file", ("short.wav", data, "audio/wav"))]).json()
        body: dict = {"stem_id": stem["id"], "layout": "5.1"}
        if room:
            body["room"] = room
        for _ in range(count):
            job = http.post("/v1/renders", json=body).json()
            seen: float | None = None
            while True:
                view = http.get(f"/v1/renders/{job['id']}").json()
                if seen is None and (view["progress"] > 0 or view["state"] == "done"):
                    seen = time.time()
                if view["state"] not in ("queued", "running"):
                    break
                time.sleep(SPIN_S)
            if view["state"] != "done":
                raise RuntimeError(f"a render {view['state']}: {view.get('message')}")
            started, created = _stamp(view["started"]), _stamp(view["created"])
            finished = _stamp(view["finished"])
            assert seen is not None
            # A render that finished before a read showed its progress had made progress
            # by its finish: the earlier of the two bounds the first progress from above.
            seen = min(seen, finished)
            out.append(
                {
                    "submit_to_claim_ms": round((started - created) * 1000, 1),
                    "claim_to_first_progress_ms": round((seen - started) * 1000, 1),
                    "claim_to_done_ms": round((finished - started) * 1000, 1),
                }
            )
            http.delete(f"/v1/renders/{job['id']}")
            time.sleep(0.2)  # the worker goes back to waiting
        http.delete(f"/v1/stems/{stem['id']}")
    return out


def medians(rows: list[dict]) -> dict:
    return {k: round(statistics.median(r[k] for r in rows), 1) for k in rows[0]}


def run_mode(mode: str, args: argparse.Namespace) -> dict:
    before = os.environ.get(WARM_ENV)
    os.environ[WARM_ENV] = MODES[mode]
    try:
        with LocalServer(workers=args.workers) as server:
            time.sleep(args.settle)
            rows = trials(server.url, args.trials, args.stem_seconds, args.room)
    finally:
        if before is None:
            os.environ.pop(WARM_ENV, None)
        else:
            os.environ[WARM_ENV] = before
    return {"mode": mode, "median": medians(rows), "trials": rows}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(
        prog="python -m earfold.service.tools.job_start", description=__doc__.split("\n\n")[0]
    )
    p.add_argument("--modes", default="fresh,warm", help="comma-separated: fresh, warm")
    p.add_argument("--rounds", type=int, default=2)
    p.add_argument("--trials", type=int, default=8, help="renders per mode and round")
    p.add_argument("--workers", type=int, default=2, help="workers of the spawned servers")
    p.add_argument("--stem-seconds", type=float, default=2.0)
    p.add_argument("--room", help="a room for the renders (e.g. small)")
    p.add_argument("--settle", type=float, default=4.0, help="idle wait after start (s)")
    p.add_argument("--json", action="store_true", help="print JSON only")
    args = p.parse_args(argv)
    modes = [m.strip() for m in args.modes.split(",") if m.strip()]
    if not modes or any(m not in MODES for m in modes):
        p.error(f"--modes takes {', '.join(MODES)}")
    if not (1 <= args.trials <= 200 and 1 <= args.rounds <= 10 and 0 < args.stem_seconds <= 60):
        p.error("--trials 1-200, --rounds 1-10, --stem-seconds up to 60")
    rounds = [[run_mode(m, args) for m in modes] for _ in range(args.rounds)]
    best = {
        m: min(
            (r["median"] for rnd in rounds for r in rnd if r["mode"] == m),
            key=lambda x: x["claim_to_first_progress_ms"],
        )
        for m in modes
    }
    out = {
        "workers": args.workers,
        "stem": f"5.1, {args.stem_seconds:g} s, 48 kHz",
        "room": args.room,
        "spin_ms": SPIN_S * 1000,
        "rounds": rounds,
        "best_round_median": best,
    }
    if args.json:
        print(json.dumps(out, indent=2))
        return 0
    for i, rnd in enumerate(rounds, 1):
        for r in rnd:
            m = r["median"]
            print(
                f"round {i} {r['mode']:>5}: submit->claim {m['submit_to_claim_ms']:.1f} ms, "
                f"claim->first progress {m['claim_to_first_progress_ms']:.1f} ms, "
                f"claim->done {m['claim_to_done_ms']:.1f} ms (median of {len(r['trials'])})"
            )
    for mode, m in best.items():
        print(
            f"best round, {mode:>5}: claim->first progress {m['claim_to_first_progress_ms']:.1f} "
            f"ms, claim->done {m['claim_to_done_ms']:.1f} ms"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
