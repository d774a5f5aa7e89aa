"""The process that runs one render for a worker: ``python -m earfold.service.jobs.render_child``.

It reads a JSON spec on stdin and writes JSON lines on stdout: ``{"progress": f}`` as
blocks are written, then one of ``{"done": summary}``, ``{"error": message}`` (bad input,
exit status 2) or ``{"cancelled": true}`` (exit status 3). JSON, not pickle, crosses the
process boundary. SIGTERM asks it to stop: the renderer polls :func:`_cancelled` once
per block and removes its temporary output. A child whose worker died (its parent
changes) stops too, so an orphan never keeps rendering.
"""

from __future__ import annotations

import json
import os
import signal
import sys
import time
from pathlib import Path
from typing import Any

from ..files import write_json_atomic
from .parent_watch import die_with_parent, expected_parent, parent_gone

EXIT_BAD_INPUT = 2
EXIT_CANCELLED = 3

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


def build_settings(options: dict) -> Any:
    """RenderSettings from a job's JSON options, each checked against the renderer's
    declaration (:data:`earfold.renderer.render.RENDER_OPTIONS`); an unknown key, or a
    value outside its declared type, range or choices, raises OptionError."""
    from earfold.renderer.render import settings_from_options

    return settings_from_options(options)


def run(spec: dict) -> int:
    """Render ``spec`` (inputs, output, report, options, names); returns the exit status."""
    from earfold.renderer.errors import RenderCancelled, RendererError
    from earfold.renderer.render import render

    names = spec.get("names", {})
    last = [0.0]

    def progress(fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] >= PROGRESS_INTERVAL_S or fraction >= 1.0:
            last[0] = now
            _emit({"progress": round(float(fraction), 4)})

    try:
        settings = build_settings(spec["options"])
        report = render(
            spec["inputs"], spec["output"], settings, progress=progress, cancelled=_cancelled
        )
    except RenderCancelled:
        _emit({"cancelled": True})
        return EXIT_CANCELLED
    except RendererError as exc:
        _emit({"error": _clean(str(exc), names)})
        return EXIT_BAD_INPUT
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
                "warnings": [_clean(w, names) for w in report["warnings"]],
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
