"""The process that builds one comparison for a worker:
``python -m earfold.service.comparisons.build_child``.

It speaks the protocol of :mod:`earfold.service.jobs.render_child` (a JSON spec on stdin; JSON
lines ``{"progress": f}``, then ``{"done": ...}``, ``{"error": message}`` or
``{"cancelled": true}`` on stdout) and writes ``prepared.json`` into the comparison's
folder when the trial files are in place; the session reads as ready from then on.
:func:`child_spec` is what the worker hands it.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import sys
import time
from pathlib import Path

from ..job_inputs import resolve_job_inputs
from ..storage import Storage, write_json_atomic
from .session import PREPARED


def child_spec(storage: Storage, payload: dict, job_id: str) -> dict:
    """The JSON spec of a build child; ValueError (or a 404 Problem) if the stem is gone."""
    session_id = payload["comparison_id"]
    stem = storage.read_meta("stems", payload["stem_id"])
    folder = storage.path("stems", payload["stem_id"])
    inputs = [str(folder / f["stored"]) for f in stem["files"]]
    names = {str(folder / f["stored"]): f["name"] for f in stem["files"]}
    names.update({f["stored"]: f["name"] for f in stem["files"]})
    variants = []
    target = storage.path("comparisons", session_id)
    for i, v in enumerate(payload["variants"]):
        options = resolve_job_inputs(storage, dict(v["options"]), target, names, i)
        if v.get("hrtf_id"):
            hrtf = storage.read_meta("hrtf", v["hrtf_id"])
            path = storage.path("hrtf", v["hrtf_id"]) / hrtf["stored"]
            options["hrtf"] = str(path)
            names[str(path)] = hrtf["name"]
            names[hrtf["stored"]] = hrtf["name"]
        variants.append(options)
    return {
        "inputs": inputs,
        "variants": variants,
        "excerpt": payload["excerpt"],
        "folder": str(target),
        "output": str(target / PREPARED),
        "names": names,
    }


def run(spec: dict) -> int:
    """Build the comparison of ``spec``; returns the exit status."""
    from earfold.renderer.errors import RenderCancelled, RendererError

    from ..jobs import render_child as rc
    from .builder import BUILD_PROCESSES, BuildError, build

    names = spec.get("names", {})
    last = [0.0]

    def progress(fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] >= rc.PROGRESS_INTERVAL_S or fraction >= 1.0:
            last[0] = now
            rc._emit({"progress": round(float(fraction), 4)})

    folder = Path(spec["folder"])
    try:
        prepared = build(
            spec["inputs"],
            spec["variants"],
            spec["excerpt"],
            folder,
            progress=progress,
            cancelled=rc._cancelled,
            processes=spec.get("processes", BUILD_PROCESSES),
        )
    except RenderCancelled:
        rc._emit({"cancelled": True})
        return rc.EXIT_CANCELLED
    except (RendererError, BuildError) as exc:
        if rc.disk_full(exc):
            return _disk_full(spec)
        rc._emit({"error": rc._clean(str(exc), names)})
        return rc.EXIT_BAD_INPUT
    except Exception as exc:
        if rc.disk_full(exc, folder):
            return _disk_full(spec)
        raise
    try:
        write_json_atomic(Path(spec["output"]), prepared)
    except OSError as exc:
        if rc.disk_full(exc):
            return _disk_full(spec)
        raise
    rc._emit(
        {
            "done": {
                "common_lufs": prepared["common_lufs"],
                "frames": prepared["frames"],
                "samplerate": prepared["samplerate"],
            }
        }
    )
    return 0


def _disk_full(spec: dict) -> int:
    """Out of disk space: remove the trial files and the build's record, say so."""
    from ..jobs import render_child as rc

    shutil.rmtree(Path(spec["folder"]) / "audio", ignore_errors=True)
    rc.discard_outputs(spec)
    rc._emit({"error": rc.DISK_FULL_MESSAGE, "disk_full": True})
    return rc.EXIT_DISK_FULL


def main() -> int:
    from ..jobs import render_child as rc

    try:
        os.nice(rc.RENDER_NICENESS)
    except OSError:
        pass
    signal.signal(signal.SIGTERM, rc._on_term)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    return run(json.loads(sys.stdin.read()))


if __name__ == "__main__":
    sys.exit(main())
