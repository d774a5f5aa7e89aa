"""The ``earfold`` command line.

Each subcommand is a thin shell over the renderer's public functions. Errors in what
the user gave (files, layouts, options) print one line on stderr and exit with status 2;
progress goes to stderr only when it is a terminal.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from pathlib import Path

import earfold.renderer
from earfold.renderer import RendererError

from .cli_commands import add_demo_parser, add_listing_parsers
from .cli_output import EXIT_BAD_INPUT, EXIT_INTERRUPTED
from .cli_output import Progress as _Progress
from .cli_output import print_json as _print_json
from .files import write_json_atomic

__all__ = ["EXIT_BAD_INPUT", "EXIT_INTERRUPTED", "build_parser", "main"]


def _labels(value: str) -> list[str]:
    labels = [v.strip() for v in value.split(",") if v.strip()]
    if not labels:
        raise argparse.ArgumentTypeError(
            "expected comma-separated channel labels, e.g. L,R,C,LFE,Ls,Rs"
        )
    return labels


# -- render ----------------------------------------------------------------------------


def _default_report_path(output: str) -> str:
    p = Path(output)
    return str(p.with_name(p.stem + ".report.json"))


def _write_json(path: str, data: object) -> None:
    write_json_atomic(path, data)


def cmd_render(args: argparse.Namespace) -> int:
    from earfold.renderer.engine import LfeOptions
    from earfold.renderer.loudness import parse_loudness, parse_true_peak
    from earfold.renderer.render import RenderSettings, render

    settings = RenderSettings(
        layout=args.layout,
        channel_order=args.channel_order,
        hrtf=args.hrtf or "",
        lfe=LfeOptions(cutoff_hz=args.lfe_cutoff, gain_db=args.lfe_gain),
        subtype=args.subtype,
        format=args.format,
        seed=args.seed,
        room=args.room,
        room_mode=args.room_mode,
        loudness=parse_loudness(args.loudness),
        true_peak=parse_true_peak(args.true_peak),
        eq=args.eq,
        headphone_eq=args.headphone_eq,
        **({"block_size": args.block_size} if args.block_size else {}),
    )
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
    from earfold.renderer.loudness import channel_weights, format_measurement, measure_file

    results = []
    for path in args.files:
        weights = None
        if args.layout:
            weights = channel_weights(get_layout(args.layout))
        result = measure_file(path, weights)
        results.append((path, result))
    if args.json:
        _print_json([{"file": Path(p).name, **r.to_dict(series=args.series)} for p, r in results])
        return 0
    for path, result in results:
        print(f"{path}:")
        print(format_measurement(result))
    return 0


# -- parser ----------------------------------------------------------------------------


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="earfold",
        description="Render multichannel loudspeaker stems to binaural headphone mixes.",
        epilog="'earfold COMMAND -h' describes each command and its options.",
    )
    parser.add_argument(
        "--version", action="version", version=f"earfold {earfold.renderer.__version__}"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", help="what to do")

    p = sub.add_parser(
        "render",
        help="render a stem to a binaural file",
        description="Render one interleaved multichannel file, or several mono files, to a "
        "two-channel binaural file. Mono files get their channel labels from their names "
        "(mix.L.wav, mix_Ls.wav, ...) or from --channel-order.",
    )
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="stem file(s)")
    p.add_argument("-o", "--output", required=True, help="output file (.wav or .flac)")
    p.add_argument(
        "--layout", required=True, help="layout name (see 'earfold layouts') or a JSON file"
    )
    p.add_argument(
        "--channel-order",
        type=_labels,
        metavar="L,R,C,...",
        help="labels of the file's channels in file order",
    )
    p.add_argument(
        "--hrtf",
        metavar="NAME|FILE.sofa",
        help="shipped set name (see 'earfold hrtf list') or a SOFA file; default mit-kemar",
    )
    p.add_argument(
        "--room",
        default="none",
        metavar="none|small|medium|large|FILE.json",
        help="synthetic room around the loudspeakers (default none; 'earfold rooms' "
        "lists the presets)",
    )
    p.add_argument(
        "--room-mode",
        default="shared",
        choices=["shared", "exact"],
        help="shared: the diffuse tail rendered once for all loudspeakers (default); "
        "exact: a full room response per loudspeaker",
    )
    p.add_argument(
        "--loudness",
        default="-23",
        metavar="LUFS|match|none",
        help="integrated loudness of the output (ITU-R BS.1770): a LUFS target such as "
        "-23 (EBU R128, the default), -16 or -14; 'match' keeps the stem's own "
        "programme loudness; 'none' applies no gain",
    )
    p.add_argument(
        "--true-peak",
        default="-1",
        metavar="DBTP|off",
        help="true-peak limiter ceiling (default -1 dBTP); 'off' turns the limiter "
        "off (the report says so)",
    )
    p.add_argument(
        "--eq",
        choices=["none", "diffuse-field"],
        help="equalisation of the HRTF set: diffuse-field (the default for free-field "
        "sets; removes the colour all directions share) or none (the default for sets "
        "that hold a room)",
    )
    p.add_argument(
        "--headphone-eq",
        metavar="FILE",
        help="headphone compensation applied to the output: a JSON list of parametric "
        "bands or an impulse response (WAV/FLAC, any rate); see examples/headphone_eq/",
    )
    p.add_argument(
        "--format", choices=["wav", "flac"], help="output format (default: from the extension)"
    )
    p.add_argument(
        "--subtype",
        default="PCM_24",
        type=str.upper,
        choices=["PCM_16", "PCM_24", "FLOAT"],
        help="sample format (default PCM_24)",
    )
    p.add_argument("--seed", type=int, default=0, help="seed for dither (default 0)")
    p.add_argument(
        "--report",
        metavar="FILE.json",
        help="where to write the JSON report (default: OUTPUT's name + .report.json; "
        "'none' to skip)",
    )
    p.add_argument(
        "--lfe-cutoff",
        type=float,
        default=120.0,
        metavar="HZ",
        help="LFE low-pass corner (default 120; 0 = no low-pass)",
    )
    p.add_argument(
        "--lfe-gain",
        type=float,
        default=10.0,
        metavar="DB",
        help="LFE in-band gain (default +10 dB)",
    )
    p.add_argument("--block-size", type=int, metavar="FRAMES", help="engine block size (advanced)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress or summary")
    p.set_defaults(func=cmd_render)

    p = sub.add_parser(
        "loudness",
        help="measure loudness, loudness range and true peak of audio files",
        description="ITU-R BS.1770-4 integrated loudness, maximum momentary and short-term "
        "loudness, EBU Tech 3342 loudness range, and 4x-oversampled true peak of each file. "
        "Give --layout to weight a multichannel stem's surrounds (+1.5 dB) and leave out its LFE.",
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="audio file(s) to measure")
    p.add_argument("--layout", help="the stem's layout, for BS.1770 channel weights")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.add_argument("--series", action="store_true", help="with --json: include the 10 Hz series")
    p.set_defaults(func=cmd_loudness)

    add_listing_parsers(sub)

    # serve and worker import the web and queue stack only when they run
    from .serve_cli import add_serve_parser
    from .worker_cli import add_worker_parser

    add_serve_parser(sub)
    add_worker_parser(sub)
    add_demo_parser(sub)
    return parser


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
    except OSError as exc:
        # a file or folder the user named (missing, a folder, not writable, a full disk)
        print(f"earfold: error: {_os_error(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("earfold: interrupted; no partial output was kept", file=sys.stderr)
        return EXIT_INTERRUPTED


def _os_error(exc: OSError) -> str:
    """One line for an OSError: its reason and the path it names, as text."""
    reason = exc.strerror or str(exc) or type(exc).__name__
    if exc.filename is None:
        return reason
    return f"{reason}: {os.fsdecode(exc.filename)!r}"


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
