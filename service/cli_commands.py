"""The ``earfold`` listings and tools: ``layouts``, ``rooms``, ``hrtf``, ``bench``, ``demo``.

Each is a thin shell over the renderer's public functions, imported inside the command so
that a command loads only what it uses (and never the web or queue stack).
"""

from __future__ import annotations

import argparse
import math
import sys

from .cli_output import EXIT_BAD_INPUT, Progress, positive, print_json

#: Help of every ``--json`` option.
JSON_HELP = "print JSON (machine-readable) instead of text"


# -- layouts and rooms -----------------------------------------------------------------


def cmd_layouts(args: argparse.Namespace) -> int:
    from earfold.renderer.layouts import LAYOUTS, SCENE_SOURCE, SCENES

    if args.json:
        # Loudspeaker layouts as before ("kind": "loudspeakers"), then the Ambisonic
        # scenes ("kind": "scene": order, channels, normalisations, labels; no speakers).
        entries = [layout.listing() for layout in LAYOUTS.values()]
        print_json(entries + [scene.listing() for scene in SCENES.values()])
        return 0
    for layout in LAYOUTS.values():
        print(f"{layout.name:<7} {layout.channels:>2} channels  {layout.description}")
        cells = []
        for s in layout.speakers:
            if s.lfe:
                cells.append(f"{s.label}(LFE)")
            elif s.spread:
                where = " & ".join(f"{a:+g}/{e:+g}" for a, e in s.spread)
                gain = 20 * math.log10(s.spread_gain)
                cells.append(f"{s.label} {where} ({gain:.0f} dB each)")
            else:
                cells.append(f"{s.label} {s.azimuth:+g}/{s.elevation:+g}")
        print("        " + ", ".join(cells))
        for name, labels in layout.orders.items():
            if name != "wav" and labels != layout.labels:
                print(f"        order {name}: {','.join(labels)}")
    print("\nAmbisonic scenes (--ambisonic-norm, --ambisonic-decoder, --rotate):")
    for scene in SCENES.values():
        norms = "/".join(scene.normalisations)
        print(f"{scene.name:<7} {scene.channels:>2} channels  order {scene.order}, ACN, {norms}")
    print(f"        {SCENE_SOURCE}")
    print("\nAngles: azimuth/elevation in degrees, azimuth positive to the left (ITU-R BS.2051).")
    print(
        "Channel order shown is the default file order ('wav'); choose another with "
        "--channel-order NAME (an order listed above) or --channel-order L,R,C,..."
    )
    return 0


def cmd_rooms(args: argparse.Namespace) -> int:
    import numpy as np

    from earfold.renderer.room import ROOMS

    if args.json:
        print_json([room.to_dict() for room in ROOMS.values()])
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
        print_json(
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
        print_json(summary)
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


def _missing_action(parser: argparse.ArgumentParser) -> int:
    parser.print_help(sys.stderr)
    return EXIT_BAD_INPUT


# -- bench and demo --------------------------------------------------------------------


def cmd_bench(args: argparse.Namespace) -> int:
    from earfold.renderer.layouts import get_layout
    from earfold.renderer.room import get_room
    from earfold.renderer.tools import format_bench, run_bench

    if args.adm:
        return _bench_adm(args)
    if args.commands:
        return _bench_commands(args)
    if args.rounds:
        print("earfold: error: --rounds goes with --commands or --adm", file=sys.stderr)
        return EXIT_BAD_INPUT

    # Checked here, before any case runs: a bad name then fails in one line, not as the
    # error of a benchmark child process.
    if args.layout:
        get_layout(args.layout)
    get_room(args.room)
    result = run_bench(
        seconds=args.seconds,
        layouts=[args.layout] if args.layout else None,
        memory_check=not args.no_memory,
        room=args.room,
        progress=None if args.json else lambda msg: print(msg, file=sys.stderr),
    )
    if args.json:
        print_json(result)
    else:
        print(format_bench(result))
    return 0


def _bench_commands(args: argparse.Namespace) -> int:
    from earfold.renderer.tools import COMMAND_ROUNDS, format_command_bench, run_command_bench

    if args.layout or args.room != "none" or args.no_memory:
        print(
            "earfold: error: --commands times its own fixed cases; "
            "it takes only --seconds, --rounds and --json",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    result = run_command_bench(
        seconds=args.seconds,
        rounds=args.rounds or COMMAND_ROUNDS,
        progress=None if args.json else lambda msg: print(msg, file=sys.stderr),
    )
    if args.json:
        print_json(result)
    else:
        print(format_command_bench(result))
    return 0


def _bench_adm(args: argparse.Namespace) -> int:
    from earfold.renderer.room import get_room
    from earfold.renderer.tools import (
        COMMAND_ROUNDS,
        adm_case,
        format_command_bench,
        run_command_bench,
    )

    if args.layout or args.no_memory:
        print(
            "earfold: error: --adm times its own master (a 7.1.4 bed and 16 moving objects); "
            "it takes only --room, --seconds, --rounds and --json",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    get_room(args.room)  # a bad name fails here, in one line
    try:
        result = run_command_bench(
            seconds=args.seconds,
            cases=(adm_case(args.room),),
            rounds=args.rounds or COMMAND_ROUNDS,
            progress=None if args.json else lambda msg: print(msg, file=sys.stderr),
        )
    except RuntimeError as exc:  # a timed command failed: its own message says why
        print(f"earfold: error: {exc}", file=sys.stderr)
        return 1
    if args.json:
        print_json(result)
    else:
        print(format_command_bench(result))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from earfold.renderer.tools import run_demo

    progress = Progress("rendering demo")
    try:
        result = run_demo(args.dir, progress=progress)
    finally:
        progress.done()
    print(f"demo stem:   {result['stem']}  (7.1.4, {result['duration_s']:.1f} s)")
    print(f"binaural:    {result['output']}")
    print(f"report:      {result['report']}")
    print("Listen on headphones at a low volume first.")
    return 0


# -- parsers ---------------------------------------------------------------------------


def add_listing_parsers(sub: argparse._SubParsersAction) -> None:
    """Add ``layouts``, ``rooms``, ``hrtf`` and ``bench`` to the ``earfold`` subcommands."""
    p = sub.add_parser(
        "layouts",
        help="list loudspeaker layouts with labels and angles",
        description="List the named loudspeaker layouts (ITU-R BS.2051 positions): "
        "channel labels in their default file order, azimuth and elevation in degrees.",
    )
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(func=cmd_layouts)

    p = sub.add_parser(
        "rooms",
        help="list the room presets with their figures",
        description="List the synthetic room presets: dimensions, volume, reverberation "
        "time per octave band, mixing time and critical distance.",
    )
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(func=cmd_rooms)

    p = sub.add_parser(
        "hrtf",
        help="list shipped HRTF sets or inspect a SOFA file",
        description="List the HRTF sets shipped with earfold, or check a SOFA file and "
        "summarise it.",
    )
    hsub = p.add_subparsers(dest="hrtf_command", metavar="ACTION", help="what to do")
    q = hsub.add_parser(
        "list",
        help="the shipped HRTF sets",
        description="The HRTF sets shipped with earfold: name, file, licence and citation.",
    )
    q.add_argument("--json", action="store_true", help=JSON_HELP)
    q.set_defaults(func=cmd_hrtf_list)
    q = hsub.add_parser(
        "inspect",
        help="summarise a SOFA file or say why it cannot be used",
        description="Read a SOFA (AES69) file as a render would and summarise it: grid, "
        "sampling rate, interaural time differences, diffuse-field response; or say in "
        "one line why it cannot be used.",
    )
    q.add_argument("file", metavar="FILE.sofa", help="the SOFA file to inspect")
    q.add_argument(
        "--emitter",
        type=int,
        metavar="INDEX",
        help="emitter to use in a file with several (GeneralFIR-E; default: the only one)",
    )
    q.add_argument("--json", action="store_true", help=JSON_HELP)
    q.set_defaults(func=cmd_hrtf_inspect)
    p.set_defaults(func=lambda a, parser=p: _missing_action(parser))

    p = sub.add_parser(
        "bench",
        help="measure render speed against a baseline and the I/O floor",
        description="Render generated noise stems and compare, in one run, our engine with a "
        "per-filter scipy.signal.oaconvolve baseline and with the cost of reading and writing "
        "alone. Peak memory is measured in a separate process per case.",
    )
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.add_argument(
        "--seconds",
        type=positive(float),
        default=60.0,
        help="length of the generated stems in seconds (default 60)",
    )
    p.add_argument("--layout", help="only this layout (default: 2.0, 5.1, 7.1.4)")
    p.add_argument(
        "--room",
        default="none",
        metavar="none|small|medium|large|FILE.json",
        help="render in this room (default none); the baseline then convolves full room "
        "responses, and the exact mode is timed too",
    )
    p.add_argument(
        "--no-memory", action="store_true", help="skip the memory-growth check (a 10x longer stem)"
    )
    p.add_argument(
        "--commands",
        action="store_true",
        help="time whole commands instead, each a process of its own as a user runs it: "
        "'earfold render' against a per-filter oaconvolve script and an I/O floor script, "
        "on 7.1.4 120 s, 5.1 600 s in the large room, 7.1.4 60 s in the large room, "
        "5.1 1 s and a 60 s ADM master (lengths scaled by --seconds/60)",
    )
    p.add_argument(
        "--adm",
        action="store_true",
        help="time whole commands of the ADM case alone: a generated 60 s master with a "
        "7.1.4 bed and 16 moving objects (RF64, axml and chna), 'earfold render MASTER' "
        "with no layout against the I/O floor, in --room if given; reports x real time "
        "against its target (100x free field, 60x in the large room)",
    )
    p.add_argument(
        "--rounds",
        type=positive(int),
        metavar="N",
        help="with --commands or --adm: interleaved rounds per case, each command's "
        "fastest counts "
        "(default 2; more on a busy machine)",
    )
    p.set_defaults(func=cmd_bench)


def add_demo_parser(sub: argparse._SubParsersAction) -> None:
    """Add ``demo`` to the ``earfold`` subcommands."""
    p = sub.add_parser(
        "demo",
        help="synthesise a demo 7.1.4 stem and render it",
        description="Synthesise a short 7.1.4 stem, render it to binaural with the default "
        "settings, and write both with the render's report into DIR.",
    )
    p.add_argument(
        "dir",
        nargs="?",
        default="earfold-demo",
        metavar="DIR",
        help="folder for the stem, the binaural file and the report (created if missing; "
        "default earfold-demo)",
    )
    p.set_defaults(func=cmd_demo)
