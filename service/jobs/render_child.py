"""The process that runs one render for a worker: ``python -m earfold.service.jobs.render_child``.

It reads a JSON spec on stdin and writes JSON lines on stdout: ``{"progress": f}`` as
blocks are written, then one of ``{"done": summary}``, ``{"error": message}`` (bad input,
exit status 2), ``{"cancelled": true}`` (exit status 3) or ``{"error": message,
"disk_full": true}`` (exit status 4: the disk ran out of space; nothing is left behind,
and the worker fails the job at once instead of retrying it as a crash). JSON, not
pickle, crosses the process boundary. SIGTERM asks it to stop: the renderer polls
:func:`_cancelled` once per block and removes its temporary output. A child whose
worker died (its parent changes) stops too, so an orphan never keeps rendering.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import signal
import sys
import time
from pathlib import Path
from typing import Any

from ..files import write_json_atomic
from .parent_watch import die_with_parent, expected_parent, parent_gone

EXIT_BAD_INPUT = 2
EXIT_CANCELLED = 3
EXIT_DISK_FULL = 4

#: errno values that mean the disk (or the user's quota on it) is full.
DISK_FULL_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT})

#: Free space under which an unexplained write failure is taken for a full disk (bytes):
#: the audio library reports a failed write without the system's reason.
DISK_FULL_MARGIN_BYTES = 1 << 20

#: The job's message when its render ran out of disk space.
DISK_FULL_MESSAGE = (
    "the server's disk ran out of space while writing the result (disk full); nothing "
    "was kept. Free some space (delete finished renders, comparisons or stems you no "
    "longer need) and submit it again"
)

#: Least time between two progress lines (s); the worker reports a few times a second.
PROGRESS_INTERVAL_S = 0.1

_stop = False
#: The worker this child renders for (see :mod:`.parent_watch`).
_parent = expected_parent()


def _on_term(signum: int, frame: object) -> None:
    global _stop
    _stop = True


def _cancelled() -> bool:
    return _stop or parent_gone(_parent)


def _emit(obj: dict) -> None:
    sys.stdout.write(json.dumps(obj) + "\n")
    sys.stdout.flush()


def _clean(text: str, names: dict[str, str]) -> str:
    """Replace stored paths and names in a message by the user's file names."""
    for stored, user in sorted(names.items(), key=lambda kv: -len(kv[0])):
        text = text.replace(stored, user)
    return text


def clean_tree(value: Any, names: dict[str, str]) -> Any:
    """``value`` (a report: dicts, lists, strings, numbers) with :func:`_clean` applied
    to every string in it, keys included."""
    if isinstance(value, str):
        return _clean(value, names)
    if isinstance(value, dict):
        return {clean_tree(k, names): clean_tree(v, names) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_tree(v, names) for v in value]
    return value


def disk_full(exc: BaseException, folder: Path | None = None) -> bool:
    """True if ``exc`` (or an exception it was raised from) says the disk is full, or,
    for an error that gives no reason, if ``folder``'s disk has (almost) no space left."""
    seen: set[int] = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        if isinstance(current, OSError) and current.errno in DISK_FULL_ERRNOS:
            return True
        text = str(current)
        if any(os.strerror(code) in text for code in DISK_FULL_ERRNOS):
            return True
        current = current.__cause__ or current.__context__
    if folder is None:
        return False
    try:
        return shutil.disk_usage(folder).free < DISK_FULL_MARGIN_BYTES
    except OSError:
        return False


def discard_outputs(spec: dict) -> None:
    """Remove everything a render of ``spec`` may have written: the audio, the report
    and their temporary ``.part`` files."""
    paths = [Path(spec[key]) for key in ("output", "report") if spec.get(key)]
    for path in paths:
        path.unlink(missing_ok=True)
    for folder in {path.parent for path in paths}:
        for leftover in folder.glob(".*.part"):
            leftover.unlink(missing_ok=True)


def build_settings(options: dict) -> Any:
    """RenderSettings from a job's JSON options, each checked against the renderer's
    declaration (:data:`earfold.renderer.render.RENDER_OPTIONS`); an unknown key, or a
    value outside its declared type, range or choices, raises OptionError."""
    from earfold.renderer.render import settings_from_options

    return settings_from_options(options)


def run(spec: dict) -> int:
    """Render ``spec`` (inputs, output, report, options, names); returns the exit status."""
    from earfold.renderer.errors import RenderCancelled, RendererError

    names = spec.get("names", {})
    last = [0.0]

    def progress(fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] >= PROGRESS_INTERVAL_S or fraction >= 1.0:
            last[0] = now
            _emit({"progress": round(float(fraction), 4)})

    try:
        return _run(spec, names, progress)
    except RenderCancelled:
        _emit({"cancelled": True})
        return EXIT_CANCELLED
    except Exception as exc:
        if disk_full(exc, None if isinstance(exc, RendererError) else Path(spec["output"]).parent):
            discard_outputs(spec)
            _emit({"error": DISK_FULL_MESSAGE, "disk_full": True})
            return EXIT_DISK_FULL
        if isinstance(exc, RendererError):
            _emit({"error": _clean(str(exc), names)})
            return EXIT_BAD_INPUT
        raise


def _run(spec: dict, names: dict[str, str], progress: Any) -> int:
    from earfold.renderer.render import render

    settings = build_settings(spec["options"])
    report = render(
        spec["inputs"], spec["output"], settings, progress=progress, cancelled=_cancelled
    )
    # Every message and name in the report the user sees is in the user's words: the
    # stored names of the stem's files and of an uploaded HRTF set are replaced.
    report = clean_tree(report, names)
    report["input"]["files"] = spec.get("input_names") or report["input"]["files"]
    report["output"]["file"] = spec.get("output_name") or report["output"]["file"]
    report_path = Path(spec["report"])
    write_json_atomic(report_path, report)
    out = report["output"]
    _emit(
        {
            "done": {
                "frames": out["frames"],
                "samplerate": out["samplerate"],
                "format": out["format"],
                "subtype": out["subtype"],
                "peak_dbfs": out["peak_dbfs"],
                "clipped_samples": out["clipped_samples"],
                "x_real_time": report["timings_s"]["x_real_time"],
                "warnings": list(report["warnings"]),
                "notes": list(report.get("notes", [])),
            }
        }
    )
    return 0


#: Niceness added to a render: renders are batch work, and the API's answers (polls,
#: downloads) should not wait behind them for a CPU.
RENDER_NICENESS = 10


def main() -> int:
    die_with_parent(signal.SIGTERM)  # a worker that dies takes its render with it
    if parent_gone(_parent):
        return EXIT_CANCELLED
    try:
        os.nice(RENDER_NICENESS)
    except OSError:
        pass
    signal.signal(signal.SIGTERM, _on_term)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the worker, which decides
    spec = json.loads(sys.stdin.read())
    return run(spec)


if __name__ == "__main__":
    sys.exit(main())
