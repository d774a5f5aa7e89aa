"""``earfold bench``: speed and memory of the render, as ratios measured in one run.

For each layout a noise stem (48 kHz, PCM_24 WAV) is generated, then three cases run,
each in a fresh process so that its peak memory is its own:

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
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

BENCH_LAYOUTS = ("2.0", "5.1", "7.1.4")
BENCH_SAMPLERATE = 48000
BENCH_HRTF = "mit-kemar"
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


def make_noise_stem(
    path: str | os.PathLike,
    channels: int,
    seconds: float,
    samplerate: int = BENCH_SAMPLERATE,
    seed: int = 1,
) -> None:
    """Write a white-noise stem at -20 dBFS RMS per channel, in blocks."""
    from ..io import OutputWriter

    rng = np.random.default_rng(seed)
    frames = int(seconds * samplerate)
    block = 1 << 16
    with OutputWriter(path, samplerate, channels, subtype="PCM_24", frames_hint=frames) as w:
        for start in range(0, frames, block):
            n = min(block, frames - start)
            w.write((0.1 * rng.standard_normal((n, channels))).astype(np.float32))


def _settings(layout: str, room: str, mode: str = "shared", delivered: bool = False):
    from ..render import RenderSettings

    # The speed cases render raw (no loudness gain, no limiter): the engine and its I/O.
    # The delivered case adds the default delivery stage (-23 LUFS, limiter at -1 dBTP).
    extra = {} if delivered else {"loudness": None, "true_peak": None}
    return RenderSettings(layout=layout, hrtf=BENCH_HRTF, room=room, room_mode=mode, **extra)


def _case_ours(stem: str, layout: str, out: str, room: str) -> dict:
    from ..render import render

    report = render([stem], out, _settings(layout, room))
    return {"seconds": report["timings_s"]["render"], "block_size": report["engine"]["block_size"]}


def _case_delivered(
    stem: str, layout: str, out: str, room: str, loudness: float | None = None
) -> dict:
    import dataclasses

    from ..render import render

    settings = _settings(layout, room, delivered=True)
    if loudness is not None:
        settings = dataclasses.replace(settings, loudness=loudness)
    report = render([stem], out, settings)
    t = report["timings_s"]
    return {
        "seconds": t["render"] + t["delivery"],
        "samples_limited": report["delivery"]["limiter"]["samples_limited"],
    }


def _case_ours_exact(stem: str, layout: str, out: str, room: str) -> dict:
    from ..render import render

    report = render([stem], out, _settings(layout, room, "exact"))
    return {"seconds": report["timings_s"]["render"]}


def _case_baseline(stem: str, layout: str, out: str, room: str) -> dict:
    from ..engine import convolve_reference
    from ..io import read_audio, write_audio
    from ..render import plan_render

    # With a room the baseline convolves the full room response of every loudspeaker.
    plan = plan_render([stem], _settings(layout, room, "exact"))
    t0 = time.perf_counter()
    data, rate = read_audio(stem)
    y = convolve_reference(data, plan.filters)
    write_audio(out, y.astype(np.float32), rate, subtype="PCM_24")
    return {"seconds": time.perf_counter() - t0}


def _case_io_floor(stem: str, layout: str, out: str, room: str) -> dict:
    from ..engine import DEFAULT_BLOCK_SIZE
    from ..io import OutputWriter, StemReader
    from ..render import plan_render

    plan = plan_render([stem], _settings(layout, room))
    info = plan.stem
    tail = plan.length - 1
    t0 = time.perf_counter()
    with (
        StemReader(info) as reader,
        OutputWriter(
            out, info.samplerate, 2, subtype="PCM_24", frames_hint=info.frames + tail
        ) as writer,
    ):
        for block in reader.blocks(DEFAULT_BLOCK_SIZE):
            # Two of the input's channels stand in for the ears: same size, same entropy.
            writer.write(block[:, :2] if block.shape[1] >= 2 else np.repeat(block, 2, axis=1))
        writer.write(np.zeros((tail, 2), dtype=np.float32))
    return {"seconds": time.perf_counter() - t0}


def _case_eq(stem: str, layout: str, out: str, room: str, eq: str, cold: bool = False) -> dict:
    import dataclasses

    from ..hrtf.hrir import _load_cached
    from ..render import render

    if cold:  # the set is read, resampled (and equalised) again
        _load_cached.cache_clear()
    report = render([stem], out, dataclasses.replace(_settings(layout, room), eq=eq))
    t = report["timings_s"]
    return {"seconds": t["render"], "plan_seconds": t["plan"]}


#: Rounds of the EQ comparison (off and on, interleaved; see the module's notes).
EQ_ROUNDS = 7

#: Rounds of the delivery comparison (raw, default delivery, loud delivery).
DELIVERY_ROUNDS = 5

#: Loudness target of the delivery case whose limiter works: on the bench's noise stems
#: (true peak about 9 dB over the integrated loudness) -9 LUFS puts the peaks over the
#: -1 dBTP ceiling, and the limiter lowers about 5 % of the frames of a 7.1.4 render.
LOUD_TARGET_LUFS = -9.0


def interleaved(variants: dict[str, Callable[[], dict]], rounds: int) -> dict[str, list[dict]]:
    """Run each variant once per round, the order reversed every other round.

    Returns every variant's results, round by round, so that they can be compared
    round by round (:func:`round_ratios`).
    """
    names = list(variants)
    runs: dict[str, list[dict]] = {name: [] for name in names}
    for i in range(rounds):
        for name in names if i % 2 == 0 else names[::-1]:
            runs[name].append(variants[name]())
    return runs


def round_ratios(runs: list[dict], reference: list[dict]) -> list[float]:
    """Each round's time over the reference's time in the same round."""
    return [r["seconds"] / ref["seconds"] for r, ref in zip(runs, reference)]


def _summary(runs: list[dict], reference: list[dict] | None = None) -> dict:
    out = {
        "seconds": min(r["seconds"] for r in runs),
        "all_seconds": [round(r["seconds"], 4) for r in runs],
    }
    if "plan_seconds" in runs[0]:
        out["plan_seconds"] = min(r["plan_seconds"] for r in runs)
    if reference is not None:
        ratios = round_ratios(runs, reference)
        out["round_ratios"] = [round(x, 4) for x in ratios]
        out["median_ratio"] = float(np.median(ratios))
    return out


def _case_eq_pair(stem: str, layout: str, out: str, room: str) -> dict:
    # The one-off preparation: planning from a cold cache, once each, with the render.
    cold = {
        eq: _case_eq(stem, layout, out, room, eq, cold=True) for eq in ("none", "diffuse-field")
    }
    # Then the render passes with both sets prepared, as a process holds them (cached per
    # set and rate): the equalisation is precomputed, and what is left to compare is its
    # effect on the render itself.
    runs = interleaved(
        {
            "off": lambda: _case_eq(stem, layout, out, room, "none"),
            "on": lambda: _case_eq(stem, layout, out, room, "diffuse-field"),
        },
        EQ_ROUNDS,
    )
    on = {
        **_summary(runs["on"], runs["off"]),
        "plan_seconds": cold["diffuse-field"]["plan_seconds"],
    }
    off = {**_summary(runs["off"]), "plan_seconds": cold["none"]["plan_seconds"]}
    return {**on, "off": off, "engine": _eq_engine_work(stem, layout, room)}


#: Rounds and length of the EQ's engine-alone comparison.
EQ_ENGINE_ROUNDS = 10
EQ_ENGINE_SECONDS = 20.0


def _eq_engine_work(stem: str, layout: str, room: str) -> dict:
    """The engine alone, EQ off and on: the same blocks, each timed on its own.

    Every block is processed once per round by each engine, rounds interleaved; the
    figure is the sum over blocks of each block's fastest time. The machine's other work
    only ever adds to a block's time, so the fastest of several tries is the block's own
    cost, and the sum compares the engines' work without the minute-scale drift that
    whole renders see. (What the EQ could change is only here: it changes the filters,
    nothing else in the render.)
    """
    import dataclasses

    from ..engine import FoldEngine
    from ..io import StemReader
    from ..render import plan_render

    settings = _settings(layout, room)
    plans = {
        eq: plan_render([stem], dataclasses.replace(settings, eq=eq))
        for eq in ("none", "diffuse-field")
    }
    limit = int(EQ_ENGINE_SECONDS * BENCH_SAMPLERATE)
    blocks = []
    with StemReader(plans["none"].stem) as reader:
        for block in reader.blocks(settings.block_size):
            blocks.append(block)
            if len(blocks) * settings.block_size >= limit:
                break

    def run(eq: str) -> dict:
        plan = plans[eq]
        engine = FoldEngine(
            plan.filters,
            settings.block_size,
            tail=plan.tail,
            tail_weights=plan.tail_weights,
            tail_offset=plan.tail_offset,
            headphone=None if plan.headphone is None else plan.headphone.filters(),
        )
        times = []
        try:
            for block in blocks:
                t0 = time.perf_counter()
                engine.process(block)
                times.append(time.perf_counter() - t0)
        finally:
            engine.close()
        return {"seconds": sum(times), "blocks": times}

    runs = interleaved(
        {"off": lambda: run("none"), "on": lambda: run("diffuse-field")}, EQ_ENGINE_ROUNDS
    )
    best = {k: float(np.min([r["blocks"] for r in v], axis=0).sum()) for k, v in runs.items()}
    return {
        "blocks": len(blocks),
        "rounds": EQ_ENGINE_ROUNDS,
        "off_seconds": round(best["off"], 5),
        "on_seconds": round(best["on"], 5),
        "ratio": best["on"] / best["off"],
    }


def _case_delivery(stem: str, layout: str, out: str, room: str) -> dict:
    runs = interleaved(
        {
            "raw": lambda: _case_ours(stem, layout, out, room),
            "default": lambda: _case_delivered(stem, layout, out, room),
            "loud": lambda: _case_delivered(stem, layout, out, room, LOUD_TARGET_LUFS),
        },
        DELIVERY_ROUNDS,
    )
    return {
        **_summary(runs["default"], runs["raw"]),
        "raw": _summary(runs["raw"]),
        "loud": {
            **_summary(runs["loud"], runs["raw"]),
            "target_lufs": LOUD_TARGET_LUFS,
            "samples_limited": runs["loud"][0]["samples_limited"],
        },
    }


_CASES = {
    "earfold": _case_ours,
    "delivery": _case_delivery,
    "earfold_exact": _case_ours_exact,
    "baseline": _case_baseline,
    "io_floor": _case_io_floor,
    "eq_pair": _case_eq_pair,
}
#: Cases that repeat themselves (their own interleaved rounds) instead of REPEATS times.
_SELF_REPEATING = {"eq_pair", "delivery"}
#: Cases run only by the memory check.
_MEMORY_CASES = {"earfold_delivered": _case_delivered}


def _child(
    conn, case: str, stem: str, layout: str, out: str, room: str, repeats: int = REPEATS
) -> None:
    try:
        import earfold.renderer.render  # noqa: F401  (imports outside the measured memory)

        before = _rss_bytes()
        # Best of REPEATS: the machine's other work only ever adds time, so the minimum is
        # the steadiest estimate of a case's own cost (common practice in benchmarking).
        fn = _CASES.get(case) or _MEMORY_CASES[case]
        if case in _SELF_REPEATING:
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
) -> dict:
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(child, case, stem, layout, out, room, repeats))
    proc.start()
    child.close()
    try:
        status, payload = parent.recv()
    except EOFError:
        status, payload = "error", f"the {case} process died (exit code {proc.exitcode})"
    proc.join()
    if status != "ok":
        raise RuntimeError(f"bench case {case} on {layout} failed: {payload}")
    return payload


def run_bench(
    seconds: float = 60.0,
    layouts: list[str] | None = None,
    *,
    memory_check: bool = True,
    progress: Callable[[str], None] | None = None,
    workdir: str | os.PathLike | None = None,
    room: str = "none",
) -> dict:
    """Run the benchmark and return its figures (JSON-ready).

    With a ``room``, earfold renders with the shared tail, an extra case renders the exact
    mode (a full room response per loudspeaker), and the baseline convolves those full
    responses.
    """
    from ..layouts import get_layout

    say = progress or (lambda msg: None)
    layouts = list(layouts or BENCH_LAYOUTS)
    results: dict = {
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
            row: dict = {"channels": layout.channels}
            cases = [c for c in _CASES if room != "none" or c != "earfold_exact"]
            for case in cases:
                say(f"bench: {layout.name} {case}")
                r = _run_case(case, stem, layout.name, str(Path(tmp) / f"out-{case}.wav"), room)

                def figures(r: dict) -> dict:
                    f = {
                        "seconds": round(r["seconds"], 4),
                        "runs_s": r["all_seconds"],
                        "x_real_time": round(seconds / r["seconds"], 1),
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
            mem: dict = {"layout": layout.name}
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


def format_bench(result: dict) -> str:
    """The benchmark figures as a plain-text table."""
    lines = [
        f"earfold bench: {result['seconds']:g} s noise stems at {result['samplerate']} Hz, "
        f"HRTF {result['hrtf']}, room {result.get('room', 'none')}, {result['cpu_count']} CPU(s), "
        f"numpy {result['numpy']}",
        "",
        f"{'layout':<7} {'ch':>3} {'earfold xRT':>12} {'baseline xRT':>13} {'I/O floor xRT':>14}"
        f" {'speed-up':>9} {'ours/floor':>11} {'peak MB':>8}",
    ]
    for name, row in result["layouts"].items():
        lines.append(
            f"{name:<7} {row['channels']:>3} {row['earfold']['x_real_time']:>12.1f} "
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
        "xRT = seconds of audio per second of wall time (higher is faster); "
        "baseline = scipy.signal.oaconvolve per filter on the whole stem; "
        "delivery = loudness + limiter + final write, as a share of the raw render "
        "(default -23 LUFS, and a loud target at which the limiter works); "
        "EQ on = a raw render pass with diffuse-field equalisation against one without, "
        "and the engine alone, each block's fastest of several interleaved tries; "
        "preparation = its one-off cost per HRTF set and rate. Delivery and EQ are "
        "medians of per-round ratios of renders interleaved in one process.",
    ]
    return "\n".join(lines)
