"""``earfold bench --commands``: whole commands timed as a user times them.

Each case generates a noise stem (48 kHz, PCM_24 WAV) and runs, each as a process of its
own, from start to exit:

* **earfold** — ``earfold render STEM -o OUT --layout L [--room R]``, exactly as typed at
  a shell: imports, planning, the render and the default delivery stage (-23 LUFS,
  true-peak limiter), the report;
* **per_filter** — a short script a user could write instead: read the whole stem,
  ``scipy.signal.oaconvolve`` each channel with each ear's filter, sum, write a 2-channel
  PCM_24 file. Its filters are earfold's own for the same settings (with a room: the full
  room response of every loudspeaker, as the exact mode builds them), prepared before the
  timing and loaded from a ``.npy`` file; all in float32;
* **io_floor** — a script that only reads the stem (all channels, in blocks) and writes a
  2-channel PCM_24 file of the same length: what any tool must pay.

The ADM case (:data:`ADM_CASE`, alone with ``earfold bench --adm``) renders a synthetic
ADM master instead of a stem (:func:`~._bench_adm.make_adm_master`: a 7.1.4 bed and 16
moving objects, RF64 with ``axml`` and ``chna``), ``earfold render MASTER -o OUT`` with no
layout, as issue 18 times it; there is no per-filter script for moving sources, so its
figures are the real-time factor (against its target, :attr:`CommandCase.target_x_real_time`)
and the ratio to the I/O floor of reading the master's 28 tracks.

The commands of a case run in :data:`COMMAND_ROUNDS` interleaved rounds (the order reversed
every other round), and each command's fastest round counts: the machine's other work only
ever adds time. Ratios are taken between the fastest runs of one case, measured in the same
minute. Every run's time is kept in the result.
"""

from __future__ import annotations

import dataclasses
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ._bench_adm import ADM_BED, make_adm_master
from ._bench_cases import BENCH_SAMPLERATE, make_noise_stem

__all__ = [
    "ADM_CASE",
    "ADM_LAYOUT",
    "COMMAND_CASES",
    "COMMAND_ROUNDS",
    "CommandCase",
    "adm_case",
    "format_command_bench",
    "run_command_bench",
]

#: Rounds per case; each command's fastest round counts.
COMMAND_ROUNDS = 2

#: The shortest stem a scaled-down case generates, in seconds.
MIN_STEM_SECONDS = 0.05

#: The nominal length against which ``seconds`` scales the cases (``earfold bench``'s
#: default ``--seconds``): at 60 every case has its full length, at 6 a tenth of it.
NOMINAL_SECONDS = 60.0


@dataclass(frozen=True)
class CommandCase:
    """One row of the whole-command table."""

    name: str
    layout: str
    seconds: float
    room: str = "none"
    #: The scripts timed against ``earfold render`` in this case.
    against: tuple[str, ...] = ("io_floor",)
    #: Moving objects of an ADM master (``layout`` "adm"); 0 for a stem of ``layout``.
    objects: int = 0
    #: The real-time factor an issue asks of the whole command, if any.
    target_x_real_time: float | None = None

    @property
    def channels(self) -> int:
        """The input's channels: the layout's, or an ADM master's bed and objects."""
        if self.layout == ADM_LAYOUT:
            return len(ADM_BED) + self.objects
        from ..layouts import get_layout

        return get_layout(self.layout).channels


#: The ``layout`` of a case that renders the benchmark's ADM master.
ADM_LAYOUT = "adm"

#: Issue 18's case: a 60 s master, a 7.1.4 bed and 16 moving objects, at >= 100x real
#: time free field (>= 60x with the large room: :func:`adm_case`).
ADM_CASE = CommandCase(
    "ADM 7.1.4 + 16 objects 60 s", ADM_LAYOUT, 60.0, objects=16, target_x_real_time=100.0
)

COMMAND_CASES: tuple[CommandCase, ...] = (
    CommandCase("7.1.4 120 s", "7.1.4", 120.0, against=("per_filter", "io_floor")),
    CommandCase("5.1 600 s large room", "5.1", 600.0, room="large"),
    CommandCase("7.1.4 60 s large room", "7.1.4", 60.0, room="large", against=("per_filter",)),
    CommandCase("5.1 1 s", "5.1", 1.0),
    ADM_CASE,
)


def adm_case(room: str = "none") -> CommandCase:
    """The ADM case, in ``room`` (issue 18: >= 60x real time with the large room)."""
    if room == "none":
        return ADM_CASE
    return dataclasses.replace(
        ADM_CASE,
        name=f"{ADM_CASE.name} {room} room",
        room=room,
        target_x_real_time=60.0 if room == "large" else None,
    )


#: The per-filter script: argv = stem, filters (.npy, shape (C, 2, L)), output.
PER_FILTER_SCRIPT = """\
import sys
import numpy as np
import soundfile as sf
from scipy.signal import oaconvolve

stem, filters, out = sys.argv[1:4]
x, rate = sf.read(stem, dtype="float32", always_2d=True)
h = np.load(filters)
y = np.zeros((x.shape[0] + h.shape[2] - 1, 2), dtype=np.float32)
for c in range(x.shape[1]):
    for ear in range(2):
        y[:, ear] += oaconvolve(x[:, c], h[c, ear])
sf.write(out, y, rate, subtype="PCM_24")
"""

#: The I/O floor script: argv = stem, output.
IO_FLOOR_SCRIPT = """\
import sys
import soundfile as sf

stem, out = sys.argv[1:3]
info = sf.info(stem)
with sf.SoundFile(out, "w", info.samplerate, 2, subtype="PCM_24") as w:
    for block in sf.blocks(stem, blocksize=65536, dtype="float32", always_2d=True):
        w.write(block[:, :2])
"""


def earfold_command() -> list[str]:
    """How a user starts earfold from this environment: its console script when it is
    installed beside this interpreter (or on PATH), else ``python -m``."""
    beside = Path(sys.executable).with_name("earfold")
    if beside.is_file():
        return [str(beside)]
    found = shutil.which("earfold")
    if found:
        return [found]
    return [sys.executable, "-m", "earfold.service.cli"]


def _timed(argv: list[str], cwd: str) -> float:
    t0 = time.perf_counter()
    proc = subprocess.run(argv, cwd=cwd, capture_output=True, text=True, check=False)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        tail = (proc.stderr or proc.stdout).strip().splitlines()[-3:]
        raise RuntimeError(f"bench command {argv[0]!r} failed: {' | '.join(tail)}")
    return seconds


def _stages(report: Path, wall: float) -> dict[str, float]:
    """A render's stages from its report (planning, render pass, delivery pass) and the
    rest of the command's wall time: start-up (interpreter, imports), the report, exit."""
    timings = json.loads(report.read_text())["timings_s"]
    out = {k: float(timings[k]) for k in ("plan", "render", "delivery") if k in timings}
    out["outside_render"] = round(wall - float(timings["total"]), 4)
    return out


def _load_average() -> list[float] | None:
    """The system's 1, 5 and 15 minute load averages: how busy a shared machine was."""
    try:
        return [round(x, 2) for x in os.getloadavg()]
    except OSError:  # not available on this system
        return None


def _write_filters(stem: str, layout: str, room: str, path: str) -> int:
    """Save earfold's filters for these settings (the full room responses with a room) as
    float32 ``(C, 2, L)``; return their length in samples."""
    from ..render import plan_render, settings_from_options

    options: dict[str, Any] = {"layout": layout, "room": room}
    if room != "none":
        options["room_mode"] = "exact"
    plan = plan_render([stem], settings_from_options(options))
    np.save(path, np.asarray(plan.filters, dtype=np.float32))
    return int(plan.filters.shape[-1])


def scaled_seconds(case: CommandCase, seconds: float) -> float:
    """The case's stem length at the run's scale (see :data:`NOMINAL_SECONDS`)."""
    return max(case.seconds * seconds / NOMINAL_SECONDS, MIN_STEM_SECONDS)


def run_command_bench(
    seconds: float = NOMINAL_SECONDS,
    *,
    cases: tuple[CommandCase, ...] = COMMAND_CASES,
    rounds: int = COMMAND_ROUNDS,
    progress: Callable[[str], None] | None = None,
    workdir: str | os.PathLike[str] | None = None,
) -> dict[str, Any]:
    """Time the whole commands of every case and return the figures (JSON-ready)."""
    say = progress or (lambda msg: None)
    result: dict[str, Any] = {
        "kind": "commands",
        "samplerate": BENCH_SAMPLERATE,
        "scale": seconds / NOMINAL_SECONDS,
        "rounds": rounds,
        "cpu_count": os.cpu_count(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "earfold_command": Path(earfold_command()[0]).name,
        "cases": [],
    }
    with tempfile.TemporaryDirectory(prefix="earfold-bench-commands-", dir=workdir) as tmp:
        scripts = {}
        for name, text in (("per_filter", PER_FILTER_SCRIPT), ("io_floor", IO_FLOOR_SCRIPT)):
            scripts[name] = str(Path(tmp) / f"{name}.py")
            Path(scripts[name]).write_text(text)
        for case in cases:
            length = scaled_seconds(case, seconds)
            channels = case.channels
            stem = str(Path(tmp) / "stem.wav")
            adm = case.layout == ADM_LAYOUT
            if adm:
                say(f"bench: generating {length:g} s ADM master ({case.name})")
                make_adm_master(stem, length, objects=case.objects)
            else:
                say(f"bench: generating {length:g} s {case.layout} noise stem ({case.name})")
                make_noise_stem(stem, channels, length)
            report = Path(tmp) / "out-earfold.report.json"  # the command's default report
            argv: dict[str, list[str]] = {
                "earfold": [
                    *earfold_command(),
                    "render",
                    stem,
                    "-o",
                    str(Path(tmp) / "out-earfold.wav"),
                    *([] if adm else ["--layout", case.layout]),
                    *(["--room", case.room] if case.room != "none" else []),
                    "--quiet",
                ]
            }
            row: dict[str, Any] = {
                "name": case.name,
                "layout": case.layout,
                "channels": channels,
                "room": case.room,
                "seconds_of_audio": round(length, 4),
            }
            if adm:
                row["objects"] = case.objects
            if case.target_x_real_time is not None:
                row["target_x_real_time"] = case.target_x_real_time
            if "per_filter" in case.against:
                filters = str(Path(tmp) / "filters.npy")
                row["per_filter_taps"] = _write_filters(stem, case.layout, case.room, filters)
                argv["per_filter"] = [
                    sys.executable,
                    scripts["per_filter"],
                    stem,
                    filters,
                    str(Path(tmp) / "out-per-filter.wav"),
                ]
            if "io_floor" in case.against:
                argv["io_floor"] = [
                    sys.executable,
                    scripts["io_floor"],
                    stem,
                    str(Path(tmp) / "out-floor.wav"),
                ]
            row["load_average_before"] = _load_average()
            runs: dict[str, list[float]] = {name: [] for name in argv}
            stages: list[dict[str, float]] = []
            names = list(argv)
            for i in range(rounds):
                for name in names if i % 2 == 0 else names[::-1]:
                    say(f"bench: {case.name}: {name} (round {i + 1} of {rounds})")
                    runs[name].append(_timed(argv[name], tmp))
                    if name == "earfold":
                        stages.append(_stages(report, runs[name][-1]))
            row["commands"] = {
                name: {
                    "runs_s": [round(t, 6) for t in times],
                    "seconds": round(min(times), 6),
                    "x_real_time": round(length / min(times), 2),
                }
                for name, times in runs.items()
            }
            # Where the fastest earfold run's time went, from its own report.
            row["commands"]["earfold"]["stages_s"] = stages
            row["earfold_stages_s"] = stages[int(np.argmin(runs["earfold"]))]
            row["load_average_after"] = _load_average()
            row.update(command_ratios(row["commands"]))
            if case.target_x_real_time is not None:
                row["meets_target"] = (
                    row["commands"]["earfold"]["x_real_time"] >= case.target_x_real_time
                )
            result["cases"].append(row)
            for path in Path(tmp).glob("*.wav"):
                path.unlink()
    return result


def command_ratios(commands: dict[str, dict[str, Any]]) -> dict[str, float]:
    """The case's ratios from its fastest runs: how many times faster earfold is than the
    per-filter script, and how many times the I/O floor's time earfold takes."""
    ours = commands["earfold"]["seconds"]
    out: dict[str, float] = {}
    if "per_filter" in commands:
        out["speedup_vs_per_filter"] = round(commands["per_filter"]["seconds"] / ours, 2)
    if "io_floor" in commands:
        out["ratio_to_io_floor"] = round(ours / commands["io_floor"]["seconds"], 2)
    return out


def _first_load(result: dict[str, Any]) -> str:
    load = result["cases"][0].get("load_average_before") if result["cases"] else None
    return "unknown" if load is None else f"{load[0]:.2f}"


def format_command_bench(result: dict[str, Any]) -> str:
    """The whole-command figures as a plain-text table."""
    lines = [
        f"earfold bench --commands: whole commands, each the fastest of {result['rounds']} "
        f"interleaved rounds; {result['cpu_count']} CPU(s); lengths x{result['scale']:g}; "
        f"load average at the start {_first_load(result)}",
        "",
        f"{'case':<28} {'earfold':>10} {'xRT':>8} {'per-filter':>11} {'speed-up':>9} "
        f"{'I/O floor':>10} {'ours/floor':>11}   earfold's stages: plan, render, delivery, "
        "outside the render (start-up, imports, report, exit)",
    ]
    for row in result["cases"]:
        c = row["commands"]
        pf = c.get("per_filter")
        fl = c.get("io_floor")
        line = (
            f"{row['name']:<28} {c['earfold']['seconds']:>9.2f}s "
            f"{c['earfold']['x_real_time']:>8.1f} "
            + (f"{pf['seconds']:>10.2f}s " if pf else f"{'':>11} ")
            + (f"{row['speedup_vs_per_filter']:>8.2f}x " if pf else f"{'':>9} ")
            + (f"{fl['seconds']:>9.2f}s " if fl else f"{'':>10} ")
            + (f"{row['ratio_to_io_floor']:>10.2f}x" if fl else f"{'':>11}")
            + "   "
            + ", ".join(f"{v:.2f}" for v in row["earfold_stages_s"].values())
            + (
                f"   target >= {row['target_x_real_time']:g}x real time: "
                + ("met" if row["meets_target"] else "not met")
                if "target_x_real_time" in row
                else ""
            )
        )
        lines.append(line.rstrip())
    lines += [
        "",
        "earfold = 'earfold render' as typed at a shell, default delivery (-23 LUFS, "
        "true-peak limiter); per-filter = a script that reads the whole stem and calls "
        "scipy.signal.oaconvolve per (channel, ear) filter (with a room: the full room "
        "responses), float32; I/O floor = a script that reads the stem and writes 2 "
        "channels. Each a separate process, wall time from start to exit; xRT = seconds of "
        "audio per second. ADM: a synthetic master (7.1.4 bed and moving objects, no "
        "layout given); the floor reads all of its tracks.",
    ]
    return "\n".join(lines)
