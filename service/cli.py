"""The ``earfold`` command line.

Each subcommand is a thin shell over the renderer's public functions. Errors in what
the user gave (files, layouts, options) print one line on stderr and exit with status 2;
progress goes to stderr only when it is a terminal.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

import earfold.renderer
from earfold.renderer import RendererError

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


class _Progress:
    """A one-line progress display on stderr, silent when stderr is not a terminal."""

    def __init__(self, label: str, enabled: bool | None = None) -> None:
        self.label = label
        self.enabled = sys.stderr.isatty() if enabled is None else enabled
        self.start = time.monotonic()
        self.last = -1.0

    def __call__(self, fraction: float) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if fraction < 1.0 and now - self.last < 0.1:
            return
        self.last = now
        elapsed = now - self.start
        eta = elapsed * (1 - fraction) / fraction if fraction > 0 else 0.0
        bar = "#" * int(fraction * 30)
        sys.stderr.write(
            f"\r{self.label} [{bar:<30}] {fraction * 100:5.1f}%  {elapsed:5.1f}s"
            f"  ~{eta:4.0f}s left "
        )
        sys.stderr.flush()

    def done(self) -> None:
        if self.enabled:
            sys.stderr.write("\n")
            sys.stderr.flush()


def _print_json(data: object) -> None:
    json.dump(data, sys.stdout, indent=2)
    sys.stdout.write("\n")


# -- render ----------------------------------------------------------------------------


def _default_report_path(output: str) -> str:
    p = Path(output)
    return str(p.with_name(p.stem + ".report.json"))


def _write_json(path: str, data: object) -> None:
    tmp = Path(path).with_name("." + Path(path).name + ".part")
    tmp.write_text(json.dumps(data, indent=2) + "\n")
    os.replace(tmp, path)


def _option_type(spec: Any) -> Callable[[str], Any]:
    """argparse ``type`` of a declared render option: its own parser and messages."""

    def convert(text: str) -> Any:
        try:
            value = spec.parse(text)
        except RendererError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None
        if value is None and spec.kind == "level":
            # "none"/"off": kept as the word, since a value of None means "the default".
            return next(c for c in spec.choices if c in ("none", "off"))
        return value

    convert.__name__ = spec.name  # argparse names the type in some messages
    return convert


def add_render_options(parser: argparse.ArgumentParser) -> None:
    """Add every render option of the declaration offered on the command line.

    Flags, metavars, choices, defaults and help all come from
    :data:`earfold.renderer.render.RENDER_OPTIONS`.
    """
    from earfold.renderer.render import RENDER_OPTIONS

    for spec in RENDER_OPTIONS:
        if not spec.cli:
            continue
        kwargs: dict[str, Any] = {
            "dest": spec.name,
            "default": spec.default,
            "help": spec.help,
            "type": _option_type(spec),
        }
        if spec.kind == "choice":
            kwargs["choices"] = spec.choices
        else:
            kwargs["metavar"] = spec.metavar or spec.name.upper()
        parser.add_argument(spec.flag, **kwargs)


def render_settings_from_args(args: argparse.Namespace) -> Any:
    """RenderSettings from the parsed ``render`` arguments (the declaration's options)."""
    from earfold.renderer.render import RENDER_OPTIONS, settings_from_options

    return settings_from_options({s.name: getattr(args, s.name) for s in RENDER_OPTIONS if s.cli})


def cmd_render(args: argparse.Namespace) -> int:
    from earfold.renderer.render import render

    settings = render_settings_from_args(args)
    progress = _Progress("rendering", enabled=False if args.quiet else None)
    try:
        report = render(args.inputs, args.output, settings, progress=progress)
    finally:
        progress.done()
    report_path = (
        None if args.report == "none" else (args.report or _default_report_path(args.output))
    )
    if report_path:
        _write_json(report_path, report)
    if not args.quiet:
        out = report["output"]
        level = ""
        d = report.get("delivery")
        if d:
            o = d["output"]
            level = (
                f", {o['integrated_lufs'] if o['integrated_lufs'] is not None else '-inf'} LUFS"
                f", true peak {d['true_peak_after_dbtp']} dBTP"
            )
        print(
            f"wrote {args.output}: {out['frames'] / out['samplerate']:.2f} s, "
            f"{out['samplerate']} Hz, {out['subtype']}{level}, "
            f"{report['timings_s']['x_real_time']}x real time"
            + (f"; report {report_path}" if report_path else ""),
            file=sys.stderr,
        )
        for w in report["warnings"]:
            print(f"warning: {w}", file=sys.stderr)
    return 0


def cmd_loudness(args: argparse.Namespace) -> int:
    from earfold.renderer.layouts import get_layout
    from earfold.renderer.loudness import format_measurement, measure_for_layout

    # The layout's weights go only to files with its channel count (the stem); any other
    # file, such as the stem's binaural render, is measured with plain weights.
    layout = get_layout(args.layout) if args.layout else None
    results = [(path, measure_for_layout(path, layout)) for path in args.files]
    if args.json:
        _print_json([{"file": Path(p).name, **m.to_dict(series=args.series)} for p, m in results])
        return 0
    for path, measured in results:
        print(f"{path}:")
        print(format_measurement(measured.result, weights=measured.weights_text))
    return 0


# -- layouts ---------------------------------------------------------------------------


def cmd_layouts(args: argparse.Namespace) -> int:
    from earfold.renderer.layouts import LAYOUTS

    if args.json:
        _print_json([layout.to_dict() for layout in LAYOUTS.values()])
        return 0
    for layout in LAYOUTS.values():
        print(f"{layout.name:<7} {layout.channels:>2} channels  {layout.description}")
        cells = []
        for s in layout.speakers:
            cells.append(
                f"{s.label}(LFE)" if s.lfe else f"{s.label} {s.azimuth:+g}/{s.elevation:+g}"
            )
        print("        " + ", ".join(cells))
    print("\nAngles: azimuth/elevation in degrees, azimuth positive to the left (ITU-R BS.2051).")
    print("Channel order shown is the default file order; override with --channel-order.")
    return 0


def cmd_rooms(args: argparse.Namespace) -> int:
    from earfold.renderer.room import ROOMS

    if args.json:
        _print_json([room.to_dict() for room in ROOMS.values()])
        return 0
    for room in ROOMS.values():
        d = room.to_dict()
        x, y, z = room.dimensions
        rt = ", ".join(f"{t:.2f}" for t in room.rt60)
        print(
            f"{room.name:<7} {x:g} x {y:g} x {z:g} m, {d.get('volume_m3', x * y * z):.0f} m3  "
            f"{room.description}"
        )
        print(
            f"        RT60 (Eyring) 125 Hz-8 kHz: {rt} s; mixing time "
            f"{float(room.mixing_time) * 1e3:.0f} ms; critical distance "
            f"{np.mean(room.critical_distance):.2f} m"
        )
    print("\nA custom room is a JSON file: see examples/rooms/.")
    return 0


# -- hrtf ------------------------------------------------------------------------------


def cmd_hrtf_list(args: argparse.Namespace) -> int:
    from earfold.hrtf_sets import DEFAULT_SET, list_shipped

    sets = list_shipped()
    if args.json:
        _print_json(
            [
                {
                    "name": s.name,
                    "file": s.filename,
                    "title": s.title,
                    "citation": s.citation,
                    "licence": s.licence,
                    "default": s.name == DEFAULT_SET,
                }
                for s in sets
            ]
        )
        return 0
    for s in sets:
        mark = " (default)" if s.name == DEFAULT_SET else ""
        print(f"{s.name}{mark}: {s.title}")
        print(f"    file {s.filename}; {s.licence}")
        print(f"    cite: {s.citation}")
    return 0


def cmd_hrtf_inspect(args: argparse.Namespace) -> int:
    from earfold.renderer.tools import inspect_sofa

    summary = inspect_sofa(args.file, emitter=args.emitter)
    if args.json:
        _print_json(summary)
        return 0
    print(f"{summary['file']}: usable")
    width = max(len(k) for k in summary["text"])
    for key, value in summary["text"].items():
        print(f"  {key:<{width}}  {value}")
    df = summary.get("diffuse_field")
    if df:
        bands = "  ".join(
            f"{fc}: {'-' if v is None else f'{v:+.1f}'}" for fc, v in df["octave_bands_db"].items()
        )
        print("  diffuse-field response (dB re 500 Hz-2 kHz, by octave band centre in Hz):")
        print(f"    {bands}")
    for w in summary["warnings"]:
        print(f"  warning: {w}")
    return 0


# -- bench and demo --------------------------------------------------------------------


def cmd_bench(args: argparse.Namespace) -> int:
    from earfold.renderer.tools import format_bench, run_bench

    result = run_bench(
        seconds=args.seconds,
        layouts=[args.layout] if args.layout else None,
        memory_check=not args.no_memory,
        room=args.room,
        progress=None if args.json else lambda msg: print(msg, file=sys.stderr),
    )
    if args.json:
        _print_json(result)
    else:
        print(format_bench(result))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from earfold.renderer.tools import run_demo

    progress = _Progress("rendering demo")
    try:
        result = run_demo(args.dir, progress=progress)
    finally:
        progress.done()
    print(f"demo stem:   {result['stem']}  (7.1.4, {result['duration_s']:.1f} s)")
    print(f"binaural:    {result['output']}")
    print(f"report:      {result['report']}")
    print("Listen on headphones at a low volume first.")
    return 0


# -- parser ----------------------------------------------------------------------------


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="earfold",
        description="Render multichannel loudspeaker stems to binaural headphone mixes.",
    )
    parser.add_argument(
        "--version", action="version", version=f"earfold {earfold.renderer.__version__}"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser(
        "render",
        help="render a stem to a binaural file",
        description="Render one interleaved multichannel file, or several mono files, to a "
        "two-channel binaural file. Mono files get their channel labels from their names "
        "(mix.L.wav, mix_Ls.wav, ...) or from --channel-order.",
    )
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="stem file(s)")
    p.add_argument("-o", "--output", required=True, help="output file (.wav or .flac)")
    add_render_options(p)
    p.add_argument(
        "--report",
        metavar="FILE.json",
        help="where to write the JSON report (default: OUTPUT's name + .report.json; "
        "'none' to skip)",
    )
    p.add_argument("-q", "--quiet", action="store_true", help="no progress or summary")
    p.set_defaults(func=cmd_render)

    p = sub.add_parser(
        "loudness",
        help="measure loudness, loudness range and true peak of audio files",
        description="ITU-R BS.1770-4 integrated loudness, maximum momentary and short-term "
        "loudness, EBU Tech 3342 loudness range, and 4x-oversampled true peak of each file. "
        "Give --layout to weight a multichannel stem's surrounds (+1.5 dB) and leave out its LFE.",
    )
    p.add_argument("files", nargs="+", metavar="FILE")
    p.add_argument("--layout", help="the stem's layout, for BS.1770 channel weights")
    p.add_argument("--json", action="store_true")
    p.add_argument("--series", action="store_true", help="with --json: include the 10 Hz series")
    p.set_defaults(func=cmd_loudness)

    p = sub.add_parser("layouts", help="list loudspeaker layouts with labels and angles")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_layouts)

    p = sub.add_parser("rooms", help="list the room presets with their figures")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_rooms)

    p = sub.add_parser("hrtf", help="list shipped HRTF sets or inspect a SOFA file")
    hsub = p.add_subparsers(dest="hrtf_command", metavar="ACTION")
    q = hsub.add_parser("list", help="the shipped HRTF sets")
    q.add_argument("--json", action="store_true")
    q.set_defaults(func=cmd_hrtf_list)
    q = hsub.add_parser("inspect", help="summarise a SOFA file or say why it cannot be used")
    q.add_argument("file", metavar="FILE.sofa")
    q.add_argument("--emitter", type=int, help="emitter to use in a GeneralFIR-E file")
    q.add_argument("--json", action="store_true")
    q.set_defaults(func=cmd_hrtf_inspect)
    p.set_defaults(func=lambda a, parser=p: _missing_action(parser))

    p = sub.add_parser(
        "bench",
        help="measure render speed against a baseline and the I/O floor",
        description="Render generated noise stems and compare, in one run, our engine with a "
        "per-filter scipy.signal.oaconvolve baseline and with the cost of reading and writing "
        "alone. Peak memory is measured in a separate process per case.",
    )
    p.add_argument("--json", action="store_true")
    p.add_argument("--seconds", type=float, default=60.0, help="stem length (default 60)")
    p.add_argument("--layout", help="only this layout (default: 2.0, 5.1, 7.1.4)")
    p.add_argument(
        "--room",
        default="none",
        help="render in this room (e.g. large); the baseline "
        "then convolves full room responses, and the exact mode is timed too",
    )
    p.add_argument(
        "--no-memory", action="store_true", help="skip the memory-growth check (a 10x longer stem)"
    )
    p.set_defaults(func=cmd_bench)

    from earfold.service.serve_cli import add_serve_parser

    add_serve_parser(sub)

    from earfold.service.worker_cli import add_worker_parser

    add_worker_parser(sub)

    p = sub.add_parser("demo", help="synthesise a demo 7.1.4 stem and render it")
    p.add_argument(
        "dir", nargs="?", default="earfold-demo", help="folder for the files (default earfold-demo)"
    )
    p.set_defaults(func=cmd_demo)
    return parser


def _missing_action(parser: argparse.ArgumentParser) -> int:
    parser.print_help(sys.stderr)
    return EXIT_BAD_INPUT


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    try:
        return int(args.func(args) or 0)
    except RendererError as exc:
        print(f"earfold: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except (FileNotFoundError, IsADirectoryError, PermissionError) as exc:
        print(f"earfold: error: {exc.strerror}: {exc.filename!r}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("earfold: interrupted; no partial output was kept", file=sys.stderr)
        return EXIT_INTERRUPTED


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
