"""The render's report: what was rendered, how, and what came out (JSON-ready)."""

from __future__ import annotations

import platform
import time
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from .options import RenderSettings
from .plan import RenderPlan
from .plot_data import OutputSpectrum, plot_section

__all__ = ["render_report"]


def render_report(
    plan: RenderPlan,
    settings: RenderSettings,
    out_path: Path,
    streamed: dict[str, Any],
    delivery: dict[str, Any] | None,
    *,
    subtype: str,
    timings: tuple[float, float, float, float],
    spectrum: OutputSpectrum | None = None,
) -> dict[str, Any]:
    """The report of a finished render.

    ``warnings`` hold real problems (clipping, a limiter that had to work hard, a channel
    order that did not fit ...); ``notes`` hold information every render of the kind
    shows (the layout guessed when none was named, the shipped set's diffuse-field
    boost limit, options a fold-down leaves out): neutral, not alarms.

    Parameters
    ----------
    plan : RenderPlan
    settings : RenderSettings
    out_path : Path
        The delivered file (read once more for the plots).
    streamed : dict
        What the streaming pass returned (:func:`earfold.renderer.render.stream.stream`).
    delivery : dict or None
        The delivery stage's section, None without one.
    subtype : str
        The output's sample format.
    timings : (float, float, float, float)
        ``time.perf_counter()`` at the start, after the plan, after the render pass and
        at the end.
    spectrum : OutputSpectrum, optional
        The output's spectrum, fed by the delivery stage as it wrote the file
        (:func:`~earfold.renderer.render.plot_data.plot_section`).
    """
    stem = plan.stem
    t0, t_plan, t_render, t_end = timings
    warnings = list(stem.warnings) + list(plan.warnings)
    notes = list(plan.notes)
    if delivery is not None:
        warnings.extend(delivery["warnings"])
        clipped = delivery["clipped_samples"]
        out_format = delivery["output"]["format"]
        peak_dbfs = delivery["output"].get("sample_peak_dbfs")
    else:
        clipped = streamed["clipped"]
        out_format = streamed["format"]
        peak = streamed["peak"]
        peak_dbfs = round(20 * np.log10(peak), 2) if peak > 0 else None
        warnings.append(
            "the true-peak limiter is off and no loudness target is set: the output keeps the "
            "render's level, peaks included"
        )
        if clipped:
            warnings.append(
                f"{clipped} output samples exceeded full scale and were clipped; lower the "
                "stem's level, set a loudness target, or write FLOAT"
            )
    done = streamed["frames"]
    duration = stem.frames / stem.samplerate
    hset = plan.hrir_set
    report: dict[str, Any] = {
        "earfold_version": __version__,
        "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "input": {
            "files": [Path(p).name for p in stem.paths],
            "format": stem.format,
            "subtype": stem.subtype,
            "samplerate": stem.samplerate,
            "channels": stem.channels,
            "frames": stem.frames,
            "duration_s": round(duration, 6),
            "channel_mask": None if stem.channel_mask is None else f"0x{stem.channel_mask:X}",
            "excerpt_start_s": round(stem.start / stem.samplerate, 6) if stem.start else None,
        },
        "layout": plan.layout.to_dict(),
        "channel_order": {
            "labels": [plan.layout.speakers[i].label for i in plan.order],
            "source": plan.order_source,
        },
        "hrtf": None
        if hset is None
        else {
            "name": hset.name,
            "file": Path(hset.source).name,
            "sha256": hset.sha256,
            "convention": hset.convention,
            "measurements": hset.measurements,
            "samplerate": hset.samplerate,
            "taps": hset.taps,
        },
        "fold": plan.fold,
        "scene": plan.scene,
        "solo": plan.solo,
        "adm": plan.adm,
        "speakers": list(plan.speakers),
        "lfe": {
            "cutoff_hz": settings.lfe.cutoff_hz,
            "gain_db": settings.lfe.gain_db,
            "order": settings.lfe.order,
        },
        "output": {
            "file": out_path.name,
            "format": out_format,
            "subtype": subtype,
            "samplerate": stem.samplerate,
            "channels": 2,
            "frames": done,
            "filter_length": plan.length,
            "peak_dbfs": peak_dbfs,
            "clipped_samples": clipped,
            "dither": "TPDF" if subtype == "PCM_16" else None,
            "seed": settings.seed,
        },
        "engine": streamed["engine"],
        "delivery": delivery,
        "room": plan.room,
        "eq": plan.eq,
        "calibration": plan.calibration,
        "timings_s": {
            "plan": round(t_plan - t0, 4),
            "render": round(t_render - t_plan, 4),
            "delivery": round(t_end - t_render, 4),
            "total": round(t_end - t0, 4),
            "x_real_time": round(duration / max(t_end - t_plan, 1e-9), 1),
        },
        "platform": {"python": platform.python_version(), "machine": platform.machine()},
        "plots": plot_section(plan, out_path, delivery, spectrum),
        "warnings": warnings,
        "notes": notes,
    }
    return report
