"""A render process kept warm between jobs: ``python -m earfold.service.jobs.warm_host``.

A fresh render child spends a second or more importing numpy, scipy and the renderer and
loading the HRIR set before its first block. A warm host does that once, ahead of any
job (its worker starts it when the worker starts, and a replacement as soon as one
retires), then runs the jobs its worker hands it one after the other, so the renderer's
in-process caches (the HRIR sets of :func:`earfold.renderer.hrtf.load_hrir_set`) stay
loaded between jobs.

Protocol: one JSON line per job on stdin, ``{"kind": "render" | "comparison", "spec":
{...}}``; the job's lines on stdout are those of :mod:`.render_child` (or of a
comparison build), followed by ``{"end": status, "retiring": bool}``: the job's exit
status, and whether the host exits now instead of waiting for the next job. Stdin
closed: the host exits. SIGTERM cancels the job in hand (the renderer polls for it
once per block).

A host is reused only after a job that ended well: after a failure, a cancellation, a
signal, :data:`MAX_JOBS` jobs or a peak memory over :data:`MAX_RSS_BYTES`, it sends the
job's end and exits, and its worker starts a fresh one. Like a render child it lowers
its priority, keeps its numeric libraries single-threaded (its worker's environment)
and dies with its worker (:mod:`.parent_watch`).
"""

from __future__ import annotations

import json
import os
import resource
import signal
import sys

from . import render_child as rc
from .parent_watch import die_with_parent, parent_gone

__all__ = ["MAX_JOBS", "MAX_RSS_BYTES", "run_host"]

#: Jobs a host runs before it retires (and its worker starts a fresh one): a bound on
#: what a long-lived process can accumulate (memory fragmentation, caches).
MAX_JOBS = 200

#: Peak resident memory past which a host retires after its job (bytes). One large
#: render may legitimately use much memory; it is not kept around for the next.
MAX_RSS_BYTES = 1 << 30

#: Exit status of a host that retires after a job that ended well.
EXIT_RETIRED = 0


def peak_rss_bytes() -> int:
    """This process's own peak resident memory (bytes).

    On Linux ``VmHWM`` of ``/proc/self/status``: the high-water mark of this program's
    memory, which starts afresh at ``exec``. Not ``ru_maxrss``: Linux keeps that across
    ``fork`` and ``exec``, so a host started by a parent that once used more than
    :data:`MAX_RSS_BYTES` would read the parent's peak and retire after every job.
    Elsewhere ``ru_maxrss`` (KiB on Linux, bytes on macOS).
    """
    try:
        with open("/proc/self/status", encoding="ascii", errors="replace") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak) * (1 if sys.platform == "darwin" else 1024)


#: The warm-up render: this many seconds of noise on a stem of :data:`WARM_UP_LAYOUT`.
WARM_UP_SECONDS = 0.25

#: Layout of the warm-up render: with height loudspeakers, so the set prepares what
#: directions between its measurements need (onsets, aligned responses), which a layout
#: on measured directions only would leave for the first job.
WARM_UP_LAYOUT = "7.1.4"


def warm_up() -> None:
    """Import what a render and a comparison build need, load the default HRIR set, and
    render a short stem with it (nothing kept).

    Loading alone leaves much for the first job: the modules a render imports on first
    use, and what the set computes once and keeps (onsets, alignment, the direction
    grid). A first render several times slower than the next is what the warm process
    is there to avoid, so a throw-away render pays for it while no job waits.
    """
    import tempfile

    import numpy as np

    from earfold.renderer.io import write_audio
    from earfold.renderer.render import render, settings_from_options

    from ..comparisons.forked import WARM_SAMPLERATE
    from ..comparisons.forked import warm_up as warm_builds

    warm_builds()
    rng = np.random.default_rng(0)
    channels = 12  # 7.1.4
    noise = 0.1 * rng.standard_normal((int(WARM_UP_SECONDS * WARM_SAMPLERATE), channels))
    with tempfile.TemporaryDirectory(prefix="earfold-warm-up-") as folder:
        stem = f"{folder}/stem.wav"
        write_audio(stem, noise.astype(np.float32), WARM_SAMPLERATE)
        settings = settings_from_options({"layout": WARM_UP_LAYOUT})
        render([stem], f"{folder}/out.wav", settings)


def run_one(message: dict) -> int:
    """Run one job of the protocol; returns its exit status."""
    rc._stop = False
    if message.get("kind") == "comparison":
        from ..comparisons.build_child import run as build

        return build(message["spec"])
    return rc.run(message["spec"])


def run_host(stdin=None, max_jobs: int | None = None, max_rss: int | None = None) -> int:
    """Read jobs from ``stdin`` until it closes or the host retires (after ``max_jobs``
    jobs or past ``max_rss`` bytes; default :data:`MAX_JOBS`, :data:`MAX_RSS_BYTES`);
    returns the exit status."""
    stdin = sys.stdin if stdin is None else stdin
    max_jobs = MAX_JOBS if max_jobs is None else max_jobs
    max_rss = MAX_RSS_BYTES if max_rss is None else max_rss
    jobs = 0
    for line in stdin:
        if not line.strip():
            continue
        # An unexpected exception ends the host with a traceback and no end line: to
        # the worker that is a crash, counted against the job like a child's crash.
        code = run_one(json.loads(line))
        jobs += 1
        retire = code != 0 or rc._stop or jobs >= max_jobs or peak_rss_bytes() > max_rss
        # The end line says whether the host exits now, so its worker never hands a
        # job to a host on its way out.
        rc._emit({"end": code, "retiring": retire})
        if retire:
            return code
    return 0


def main() -> int:
    die_with_parent(signal.SIGTERM)  # a worker that dies takes its host with it
    if parent_gone(rc._parent):
        return rc.EXIT_CANCELLED
    try:
        os.nice(rc.RENDER_NICENESS)
    except OSError:
        pass
    signal.signal(signal.SIGTERM, rc._on_term)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the worker, which decides
    try:
        warm_up()
    except Exception:  # noqa: BLE001 - a job meets the same problem and reports it
        pass
    return run_host()


if __name__ == "__main__":
    sys.exit(main())
