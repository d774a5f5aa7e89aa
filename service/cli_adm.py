"""``earfold adm inspect``: what an ADM broadcast WAV master holds and how it will be read."""

from __future__ import annotations

import argparse
from typing import Any

from .cli_output import print_json

__all__ = ["add_adm_parser"]


def _span(values: Any, unit: str = "") -> str:
    """``[lo, hi]`` as ``lo`` or ``lo to hi`` (with a unit), ``-`` when absent."""
    if not values:
        return "-"
    lo, hi = values
    return f"{lo:g}{unit}" if lo == hi else f"{lo:g} to {hi:g}{unit}"


def _when(item: dict[str, Any]) -> str:
    start, end = item.get("start") or 0.0, item.get("end")
    return f"{start:g} s to {'the end' if end is None else f'{end:g} s'}"


def cmd_adm_inspect(args: argparse.Namespace) -> int:
    from earfold.renderer.objects import inspect_adm

    summary = inspect_adm(args.file, programme=args.programme, path_points=args.paths)
    if args.json:
        print_json(summary)
        return 0
    _print_summary(summary)
    return 0


def _print_summary(summary: dict[str, Any]) -> None:
    """The summary in lines a person reads (``--json`` has every field)."""
    print(
        f"file       {summary.get('path')}: {summary.get('container')}, "
        f"{summary.get('channels')} tracks, {summary.get('sample_rate')} Hz, "
        f"{summary.get('duration', 0):.2f} s"
    )
    chosen = (summary.get("programme") or {}).get("id")
    for p in summary.get("programmes", []):
        mark = "(rendered)" if p.get("id") == chosen else ""
        print(f"programme  {p.get('id')} {p.get('name', '')!r} {mark}".rstrip())
    objects = summary.get("objects") or []
    print(f"objects    {len(objects)}")
    for o in objects[:50]:
        ranges = o.get("ranges") or {}
        where = (
            f"X {_span(ranges.get('X'))}, Y {_span(ranges.get('Y'))}, Z {_span(ranges.get('Z'))}"
            if o.get("cartesian")
            else f"azimuth {_span(ranges.get('azimuth'), ' deg')}, "
            f"elevation {_span(ranges.get('elevation'), ' deg')}"
        )
        moves = f"moves {_span(o.get('motion'), ' s')}" if o.get("motion") else "static"
        muted = ", muted" if o.get("mute") else ""
        print(
            f"    {o.get('object_name')!r} track {o.get('track')}, {_when(o)}, "
            f"{o.get('blocks')} block(s), {moves}, {where}{muted}"
        )
    for p in (summary.get("paths") or [])[:50]:
        times, az, el = (
            p.get("times_s") or [],
            p.get("azimuth_deg") or [],
            p.get("elevation_deg") or [],
        )
        if times:
            print(
                f"    path of {p.get('object')!r}: {times[0]:g} s at ({az[0]:g}, {el[0]:g}) deg "
                f"to {times[-1]:g} s at ({az[-1]:g}, {el[-1]:g}) deg, {len(times)} point(s)"
            )
    beds = summary.get("beds") or []
    print(
        f"beds       {len(beds)}: " + " ".join(f"{b.get('label')}@{b.get('track')}" for b in beds)
    )
    for h in summary.get("hoa") or []:
        print(
            f"hoa        {h.get('object_name')!r}: order {h.get('order')}, "
            f"{h.get('normalization')}, {_when(h)}"
        )
    if len(objects) > 50:
        print(f"    ... and {len(objects) - 50} more objects (--json lists every one)")
    for reason in summary.get("ignored") or []:
        print(f"ignored    {reason if isinstance(reason, str) else reason.get('reason', reason)}")
    for note in summary.get("notes") or []:
        print(f"note       {note}")


def add_adm_parser(sub: argparse._SubParsersAction) -> None:
    """Add ``adm inspect`` to the ``earfold`` subcommands."""
    p = sub.add_parser(
        "adm",
        help="inspect ADM broadcast WAV masters (objects, beds, scenes)",
        description="Read the Audio Definition Model (ITU-R BS.2076) of a broadcast WAV "
        "master (RIFF, RF64 or BW64 with axml and chna chunks, ITU-R BS.2088): its "
        "programmes, objects and their motion, beds, HOA packs, and what is not supported.",
    )
    asub = p.add_subparsers(dest="adm_command", metavar="ACTION", help="what to do")
    q = asub.add_parser("inspect", help="list what the master holds and what will be ignored")
    q.add_argument("file", metavar="FILE", help="the ADM master (.wav)")
    q.add_argument(
        "--programme", help="the audioProgramme to read (its ID or name); default the first"
    )
    q.add_argument(
        "--paths",
        type=int,
        metavar="N",
        help="also give each object's direction and gain over time, at most N samples each "
        "(2 to 10000; with --json every sample, in text the first and last)",
    )
    q.add_argument("--json", action="store_true", help="print JSON instead of text")
    q.set_defaults(func=cmd_adm_inspect)
