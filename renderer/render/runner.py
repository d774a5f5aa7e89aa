"""One render: the plan, the streaming pass, the delivery stage and the report."""

from __future__ import annotations

import math
import os
import time
import uuid
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..io import subtype_for
from ..loudness import DeliveryOptions, deliver
from .options import RenderSettings, output_format
from .plan import RenderPlan, plan_render
from .plot_data import OutputSpectrum
from .report import render_report
from .stream import HOT_INPUT_SCALE, EngineOverflow, stream

__all__ = ["RENDER_PROGRESS_SHARE", "render"]

#: Fraction of the progress bar given to the render pass; the delivery stage's pass over
#: the two-channel render takes the rest.
RENDER_PROGRESS_SHARE = 0.85


def render(
    inputs: Sequence[str | os.PathLike[str]],
    output: str | os.PathLike[str],
    settings: RenderSettings,
    *,
    progress: Callable[[float], None] | None = None,
    cancelled: Callable[[], bool] | None = None,
) -> dict[str, Any]:
    """Render a stem to a binaural file and return the report.

    Parameters
    ----------
    inputs : sequence of path
        One multichannel file, or several mono files.
    output : path
        The output file; written under a temporary name and renamed when complete.
    settings : RenderSettings
        Layout, channel order, HRTF set, LFE, output format.
    progress : callable, optional
        Called with the fraction done (0 to 1) as blocks are written.
    cancelled : callable, optional
        Polled once per block; when it returns True the render stops, leaves no output
        and raises :class:`RenderCancelled`.

    Returns
    -------
    dict
        The report (JSON-ready): input, layout, channel order, HRTF set, loudspeakers,
        output, engine, delivery, room, equalisation, calibration, timings, plots and
        warnings.

    Examples
    --------
    A tenth of a second of noise on a stereo stem, rendered without a delivery stage:

    >>> import tempfile
    >>> import numpy as np
    >>> from earfold.renderer.io import write_audio
    >>> from earfold.renderer.render import RenderSettings, render
    >>> folder = tempfile.mkdtemp()
    >>> noise = np.random.default_rng(0).standard_normal((4800, 2)).astype(np.float32)
    >>> write_audio(f"{folder}/stem.wav", 0.1 * noise, 48000)
    >>> settings = RenderSettings(layout="2.0", loudness=None, true_peak=None)
    >>> report = render([f"{folder}/stem.wav"], f"{folder}/out.wav", settings)
    >>> report["output"]["channels"], report["output"]["samplerate"]
    (2, 48000)
    >>> report["output"]["frames"] == 4800 + report["output"]["filter_length"] - 1
    True
    >>> [s["label"] for s in report["speakers"]]
    ['L', 'R']
    """
    t0 = time.perf_counter()
    subtype = subtype_for(settings.subtype)
    output_format(output, settings.format)  # refused before any work, not after the render
    options = DeliveryOptions(loudness=settings.loudness, true_peak=settings.true_peak)
    plan = plan_render(inputs, settings)
    t_plan = time.perf_counter()
    out_path = Path(output)
    direct = options.loudness is None and options.true_peak is None
    # With a delivery stage the engine writes a float32 render beside the output, which
    # the stage reads back (gain, limiter, dither, final subtype) and then removes.
    temp = (
        out_path
        if direct
        else out_path.with_name(f".{out_path.name}.{uuid.uuid4().hex[:8]}.render.wav")
    )
    share = 1.0 if direct else RENDER_PROGRESS_SHARE
    scale = 1.0
    try:
        for scale in (1.0, HOT_INPUT_SCALE):
            try:
                streamed = _stream_quietly(
                    plan,
                    temp,
                    block_size=settings.block_size,
                    seed=settings.seed,
                    subtype=subtype if direct else "FLOAT",
                    fmt=settings.format if direct else "wav",
                    progress=None if progress is None else (lambda f: progress(share * f)),
                    cancelled=cancelled,
                    meter_input=options.loudness == "match",
                    meter_output=not direct,
                    scratch=not direct,
                    input_scale=scale,
                )
                break
            except EngineOverflow:
                # Without a delivery stage the output would keep the scale: refused.
                if direct or scale != 1.0:
                    raise
        t_render = time.perf_counter()
        delivery: dict[str, Any] | None = None
        spectrum: OutputSpectrum | None = None
        if not direct:
            # The report's spectra are taken from the delivered samples as they are
            # written, on a thread of their own, instead of reading the file again.
            spectrum = OutputSpectrum(plan.stem.samplerate, 2, streamed["frames"])
            delivery = deliver(
                temp,
                out_path,
                options,
                input_loudness=streamed["input_loudness"],
                subtype=subtype,
                format=settings.format,
                seed=settings.seed,
                progress=None
                if progress is None
                else (lambda f: progress(share + (1 - share) * f)),
                cancelled=cancelled,
                render_meter=streamed["render_meter"],
                observe=spectrum,
            )
    finally:
        if not direct:
            temp.unlink(missing_ok=True)
    if scale != 1.0 and delivery is not None:
        _unscale(delivery, 20.0 * math.log10(scale))
    t_end = time.perf_counter()
    return render_report(
        plan,
        settings,
        out_path,
        streamed,
        delivery,
        subtype=subtype,
        timings=(t0, t_plan, t_render, t_end),
        spectrum=spectrum,
    )


def _stream_quietly(plan: RenderPlan, path: Path, **kwargs: Any) -> dict[str, Any]:
    """:func:`stream`, without numpy's warnings of an overflow: the stream finds it
    (:class:`EngineOverflow`) and :func:`render` handles it."""
    with np.errstate(over="ignore", invalid="ignore"):
        return stream(plan, path, **kwargs)


def _unscale(delivery: dict[str, Any], scale_db: float) -> None:
    """Report a render retried at an input scale of ``scale_db`` in the stem's own terms.

    The delivered file is what it would have been (the loudness gain undid the scale);
    the figures measured before the gain are moved back by the scale.
    """
    for key in ("render_integrated_lufs", "input_integrated_lufs"):
        if delivery.get(key) is not None:
            delivery[key] = round(delivery[key] - scale_db, 2)
    delivery["gain_db"] = round(delivery["gain_db"] + scale_db, 2)
    delivery["warnings"].append(
        f"the stem is too hot for the engine's float32 arithmetic (above about 1e33, "
        f"+660 dBFS): it was rendered {-scale_db:.1f} dB down (an exact power of two), "
        "which the loudness gain undid"
    )
