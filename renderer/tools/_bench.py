"""``earfold bench``: speed and memory of the render, as ratios measured in one run.

For each layout a noise stem (48 kHz, PCM_24 WAV) is generated, then three cases run,
each in a fresh process so that its peak memory is its own. ``hoa3`` is an order-3
Ambisonic scene (16 channels of noise read as ACN/SN3D, decoded by the default MagLS
decoder); each row has ``channel_x_real_time`` (xRT times the input channels), and a
scene's row also ``scene_per_channel``: the scene and a 7.1.4 stem of the same length
rendered raw in interleaved rounds in one process, the median of the rounds' ratios of
their speeds per input channel (issue 17 asks for at least 1):

* **earfold** — the streaming engine, end to end (read, convolve, write), raw: no
  loudness gain, no limiter;
* **delivery** — the raw render against the same with the default delivery stage
  (-23 LUFS, true-peak limiter at -1 dBTP), and with a loud one (:data:`LOUD_TARGET_LUFS`,
  where the limiter has work to do on the noise stem), in :data:`DELIVERY_ROUNDS`
  interleaved rounds in one process: what delivery adds is reported as a share of the
  raw render, the median over the rounds of each round's ratio;
* **baseline** — the whole stem read into memory, ``scipy.signal.oaconvolve`` once per
  (channel, ear) filter, summed, written; the same filters as ours;
* **I/O floor** — only reading the stem in blocks and writing an output of the same size;
* **eq_on / eq_off** — the raw render with and without diffuse-field equalisation (the
  render pass, as for the other cases), in :data:`EQ_ROUNDS` interleaved rounds in one
  process (the median of the rounds' ratios counts), with the sets prepared as a process
  keeps them (cached per set and rate); and the engine alone on the first
  :data:`EQ_ENGINE_SECONDS` of the stem, block by block (:func:`_eq_engine_work`), which
  is steadier. The one-off preparation per set and rate (the
  diffuse-field response, the inverse, the filtered set) is timed apart, as the planning
  time of a first render from a cold cache with EQ on, less the same with EQ off.

Why rounds: the machines this runs on drift by 20-50 % over tens of seconds (other work,
clock and cache state), far more than the few per cent the EQ and delivery figures look
for. Cases run one after the other in separate processes compare different moments;
variants alternated in one process, in an order reversed every round (A B, B A, ...), and
compared round by round see the same moment, and the median of the rounds' ratios ignores
a round that was disturbed (common practice in benchmarking: paired, interleaved trials).

The planning step (reading and resampling the HRIR set) is excluded from every case: it
is the same for all and does not grow with the stem. The other cases run three times in
their process and the fastest run counts. Peak memory is the process's
maximum resident set size minus its size just before the case started.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import platform
import resource
import tempfile
from collections.abc import Callable
from multiprocessing.connection import Connection
from pathlib import Path
from typing import Any

import numpy as np

from ._bench_cases import (
    BENCH_HRTF,
    BENCH_SAMPLERATE,
    CASES,
    MEMORY_CASES,
    SCENE_CASES,
    SELF_REPEATING,
    Figures,
    make_noise_stem,
)

__all__ = ["BENCH_LAYOUTS", "MEMORY_FACTOR", "REPEATS", "format_bench", "run_bench"]

#: The default layouts; ``hoa3`` is an order-3 Ambisonic scene (16 channels) rendered
#: through the scene decoder, to compare per input channel with 7.1.4.
BENCH_LAYOUTS = ("2.0", "5.1", "7.1.4", "hoa3")
#: Runs of each case in its process; the fastest counts.
REPEATS = 3
#: The memory-growth check renders a stem this many times longer than the speed cases.
MEMORY_FACTOR = 10


def _maxrss_bytes() -> int:
    # ru_maxrss is in KiB on Linux (bytes on macOS).
    scale = 1 if platform.system() == "Darwin" else 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * scale


def _rss_bytes() -> int:
    try:
        with open("/proc/self/statm") as fh:
            return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")
    except OSError:  # not Linux: fall back to the peak so far
        return _maxrss_bytes()


def _child(
    conn: Connection, case: str, stem: str, layout: str, out: str, room: str, repeats: int = REPEATS
) -> None:
    try:
        # The render wing and all it imports load before the memory baseline is taken.
        from .. import render  # noqa: F401

        before = _rss_bytes()
        # Best of REPEATS: the machine's other work only ever adds time, so the minimum is
        # the steadiest estimate of a case's own cost (common practice in benchmarking).
        fn = CASES.get(case) or MEMORY_CASES[case]
        if case in SELF_REPEATING:
            result = fn(stem, layout, out, room)
        else:
            runs = [fn(stem, layout, out, room) for _ in range(repeats)]
            result = min(runs, key=lambda r: r["seconds"])
            result["all_seconds"] = [round(r["seconds"], 4) for r in runs]
        result["peak_memory_bytes"] = max(_maxrss_bytes() - before, 0)
        conn.send(("ok", result))
    except BaseException as exc:  # report any failure to the parent, never hang it
        conn.send(("error", f"{type(exc).__name__}: {exc}"))
    finally:
        conn.close()


def _run_case(
    case: str, stem: str, layout: str, out: str, room: str = "none", repeats: int = REPEATS
) -> Figures:
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(child, case, stem, layout, out, room, repeats))
    proc.start()
    child.close()
    status: str
    payload: Any
    try:
        status, payload = parent.recv()
    except EOFError:
        status, payload = "error", f"the {case} process died (exit code {proc.exitcode})"
    proc.join()
    if status != "ok":
        raise RuntimeError(f"bench case {case} on {layout} failed: {payload}")
    result: Figures = payload
    return result


def run_bench(
    seconds: float = 60.0,
    layouts: list[str] | None = None,
    *,
    memory_check: bool = True,
    progress: Callable[[str], None] | None = None,
    workdir: str | os.PathLike[str] | None = None,
    room: str = "none",
) -> dict[str, Any]:
    """Run the benchmark and return its figures (JSON-ready).

    With a ``room``, earfold renders with the shared tail, an extra case renders the exact
    mode (a full room response per loudspeaker), and the baseline convolves those full
    responses.
    """
    from ..layouts import get_layout

    say = progress or (lambda msg: None)
    layouts = list(layouts or BENCH_LAYOUTS)
    results: dict[str, Any] = {
        "samplerate": BENCH_SAMPLERATE,
        "seconds": seconds,
        "hrtf": BENCH_HRTF,
        "room": room,
        "cpu_count": os.cpu_count(),
        "machine": platform.machine(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "layouts": {},
    }
    with tempfile.TemporaryDirectory(prefix="earfold-bench-", dir=workdir) as tmp:
        for name in layouts:
            layout = get_layout(name)
            stem = str(Path(tmp) / f"noise-{layout.name}.wav")
            say(f"bench: generating {seconds:g} s {layout.name} noise stem")
            make_noise_stem(stem, layout.channels, seconds)
            row: dict[str, Any] = {"channels": layout.channels}
            cases = [
                c
                for c in CASES
                if (room != "none" or c != "earfold_exact")
                and (c not in SCENE_CASES or layout.kind == "scene")
            ]
            for case in cases:
                say(f"bench: {layout.name} {case}")
                r = _run_case(case, stem, layout.name, str(Path(tmp) / f"out-{case}.wav"), room)

                def figures(r: Figures, channels: int = layout.channels) -> dict[str, Any]:
                    f = {
                        "seconds": round(r["seconds"], 4),
                        "runs_s": r["all_seconds"],
                        "x_real_time": round(seconds / r["seconds"], 1),
                        # Seconds of one input channel rendered per second of wall time.
                        "channel_x_real_time": round(channels * seconds / r["seconds"], 1),
                    }
                    if "plan_seconds" in r:
                        f["plan_seconds"] = round(r["plan_seconds"], 4)
                    return f

                peak = round(r["peak_memory_bytes"] / 1e6, 1)
                if case == "eq_pair":
                    row["eq_on"] = {
                        **figures(r),
                        "peak_memory_mb": peak,
                        "round_ratios": r["round_ratios"],
                    }
                    row["eq_off"] = {**figures(r["off"]), "peak_memory_mb": peak}
                    # What diffuse-field equalisation adds to a raw render's pass, and its
                    # one-off preparation (once per set and rate in a process).
                    row["eq_added"] = round(r["median_ratio"] - 1, 3)
                    row["eq_engine"] = {k: v for k, v in r["engine"].items() if k != "ratio"}
                    row["eq_engine_added"] = round(r["engine"]["ratio"] - 1, 4)
                    row["eq_prepare_s"] = round(r["plan_seconds"] - r["off"]["plan_seconds"], 3)
                elif case == "scene_pair":
                    # Issue 17: per input channel against 7.1.4, interleaved in one process.
                    row["scene_per_channel"] = {
                        "reference": r["reference"]["layout"],
                        "median_ratio": round(r["median_channel_ratio"], 3),
                        "round_ratios": r["channel_ratios"],
                        "scene_seconds": round(r["seconds"], 4),
                        "reference_seconds": round(r["reference"]["seconds"], 4),
                    }
                elif case == "delivery":
                    # What the delivery stage (measure, gain, limiter, final write) adds.
                    row["earfold_delivered"] = {
                        **figures(r),
                        "peak_memory_mb": peak,
                        "round_ratios": r["round_ratios"],
                    }
                    row["earfold_delivered_loud"] = {
                        **figures(r["loud"]),
                        "round_ratios": r["loud"]["round_ratios"],
                        "target_lufs": r["loud"]["target_lufs"],
                        "samples_limited": r["loud"]["samples_limited"],
                    }
                    row["delivery_raw"] = figures(r["raw"])
                    row["delivery_added"] = round(r["median_ratio"] - 1, 3)
                    row["delivery_loud_added"] = round(r["loud"]["median_ratio"] - 1, 3)
                else:
                    row[case] = {**figures(r), "peak_memory_mb": peak}
                if "block_size" in r:
                    row["block_size"] = r["block_size"]

            row["speedup_vs_baseline"] = round(
                row["baseline"]["seconds"] / row["earfold"]["seconds"], 2
            )
            row["ratio_to_io_floor"] = round(
                row["earfold"]["seconds"] / row["io_floor"]["seconds"], 2
            )
            if "earfold_exact" in row:
                row["exact_vs_shared"] = round(
                    row["earfold_exact"]["seconds"] / row["earfold"]["seconds"], 2
                )
            results["layouts"][layout.name] = row
            os.remove(stem)
        if memory_check:
            name = "7.1.4" if "7.1.4" in layouts else layouts[-1]
            layout = get_layout(name)
            mem: dict[str, Any] = {"layout": layout.name}
            for label, length in (("short", seconds), ("long", seconds * MEMORY_FACTOR)):
                stem = str(Path(tmp) / f"mem-{label}.wav")
                say(f"bench: memory check, {length:g} s {layout.name} stem")
                make_noise_stem(stem, layout.channels, length)
                r = _run_case("earfold", stem, layout.name, str(Path(tmp) / "mem-out.wav"), room)
                # The delivered render too: its two passes stream, so it must stay flat.
                say(f"bench: memory check, {length:g} s {layout.name} stem, delivered")
                d = _run_case(
                    "earfold_delivered",
                    stem,
                    layout.name,
                    str(Path(tmp) / "mem-out.wav"),
                    room,
                    repeats=1,
                )
                mem[label] = {
                    "seconds_of_audio": length,
                    "peak_memory_mb": round(r["peak_memory_bytes"] / 1e6, 1),
                    "delivered_peak_memory_mb": round(d["peak_memory_bytes"] / 1e6, 1),
                }
                os.remove(stem)
            mem["growth_mb"] = round(
                mem["long"]["peak_memory_mb"] - mem["short"]["peak_memory_mb"], 1
            )
            mem["delivered_growth_mb"] = round(
                mem["long"]["delivered_peak_memory_mb"] - mem["short"]["delivered_peak_memory_mb"],
                1,
            )
            results["memory"] = mem
    return results


def format_bench(result: dict[str, Any]) -> str:
    """The benchmark figures as a plain-text table."""
    lines = [
        f"earfold bench: {result['seconds']:g} s noise stems at {result['samplerate']} Hz, "
        f"HRTF {result['hrtf']}, room {result.get('room', 'none')}, {result['cpu_count']} CPU(s), "
        f"numpy {result['numpy']}",
        "",
        f"{'layout':<7} {'ch':>3} {'earfold xRT':>12} {'per ch':>7} {'baseline xRT':>13} "
        f"{'I/O floor xRT':>14} {'speed-up':>9} {'ours/floor':>11} {'peak MB':>8}",
    ]
    for name, row in result["layouts"].items():
        lines.append(
            f"{name:<7} {row['channels']:>3} {row['earfold']['x_real_time']:>12.1f} "
            f"{row['earfold'].get('channel_x_real_time', 0.0):>7.0f} "
            f"{row['baseline']['x_real_time']:>13.1f} {row['io_floor']['x_real_time']:>14.1f} "
            f"{row['speedup_vs_baseline']:>8.2f}x {row['ratio_to_io_floor']:>10.2f}x "
            f"{row['earfold']['peak_memory_mb']:>8.1f}"
            + f"   delivery {row['delivery_added'] * 100:+.0f} % "
            f"(limiting, {row['earfold_delivered_loud']['target_lufs']:g} LUFS: "
            f"{row['delivery_loud_added'] * 100:+.0f} %)"
            + f"   EQ on {row['eq_added'] * 100:+.1f} %, engine per block "
            f"{row['eq_engine_added'] * 100:+.1f} % (preparation {row['eq_prepare_s']:+.2f} s once)"
            + (
                f"   exact mode {row['earfold_exact']['x_real_time']:.1f} xRT "
                f"({row['exact_vs_shared']:.2f}x the shared time)"
                if "earfold_exact" in row
                else ""
            )
        )
    for name, row in result["layouts"].items():
        scene = row.get("scene_per_channel")
        if scene:
            lines += [
                "",
                f"{name} per input channel against {scene['reference']}: "
                f"{scene['median_ratio']:.2f}x as fast (median of {len(scene['round_ratios'])} "
                "interleaved rounds in one process)",
            ]
    mem = result.get("memory")
    if mem:
        lines += [
            "",
            f"memory growth ({mem['layout']}): {mem['short']['seconds_of_audio']:g} s -> "
            f"{mem['short']['peak_memory_mb']:.1f} MB, {mem['long']['seconds_of_audio']:g} s -> "
            f"{mem['long']['peak_memory_mb']:.1f} MB (growth {mem['growth_mb']:+.1f} MB)",
        ]
        if "delivered_growth_mb" in mem:
            lines.append(
                f"delivered ({mem['layout']}):     {mem['short']['seconds_of_audio']:g} s -> "
                f"{mem['short']['delivered_peak_memory_mb']:.1f} MB, "
                f"{mem['long']['seconds_of_audio']:g} s -> "
                f"{mem['long']['delivered_peak_memory_mb']:.1f} MB "
                f"(growth {mem['delivered_growth_mb']:+.1f} MB)"
            )
    lines += [
        "",
        "xRT = seconds of audio per second of wall time (higher is faster); per ch = xRT "
        "times the input channels (hoa3: an order-3 Ambisonic scene, 16 channels); "
        "baseline = scipy.signal.oaconvolve per filter on the whole stem; "
        "delivery = loudness + limiter + final write, as a share of the raw render "
        "(default -23 LUFS, and a loud target at which the limiter works); "
        "EQ on = a raw render pass with diffuse-field equalisation against one without, "
        "and the engine alone, each block's fastest of several interleaved tries; "
        "preparation = its one-off cost per HRTF set and rate. Delivery and EQ are "
        "medians of per-round ratios of renders interleaved in one process.",
    ]
    return "\n".join(lines)
