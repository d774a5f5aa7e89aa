"""The ``earfold`` command line.

Each subcommand is a thin shell over the renderer's public functions. Errors in what
the user gave (files, layouts, options) print one line on stderr and exit with status 2;
progress goes to stderr only when it is a terminal.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import signal
import sys
import threading
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import earfold.renderer
from earfold.renderer import RenderCancelled, RendererError

from .cli_adm import add_adm_parser
from .cli_cache import add_cache_parser
from .cli_commands import add_demo_parser, add_listing_parsers
from .cli_output import EXIT_BAD_INPUT, EXIT_INTERRUPTED
from .cli_output import Progress as _Progress
from .cli_output import print_json as _print_json
from .files import write_json_atomic

__all__ = ["EXIT_BAD_INPUT", "EXIT_INTERRUPTED", "EXIT_TERMINATED", "build_parser", "main"]

#: Exit status after SIGTERM (128 + SIGTERM), which ends a command as Ctrl-C does.
EXIT_TERMINATED = 128 + int(signal.SIGTERM)


class _Terminated(KeyboardInterrupt):
    """SIGTERM, ending a command as Ctrl-C does (exit :data:`EXIT_TERMINATED`)."""


class _StopOnSignal:
    """SIGTERM or Ctrl-C (SIGINT) during a render: a clean cancel, nothing left behind.

    While the render is being planned (no thread, no file yet) the signal ends it at once
    (:class:`_Terminated`, or KeyboardInterrupt for Ctrl-C). Later it only sets
    :attr:`stopped`, which the render polls once per block (``cancelled``) and which ends it
    with :class:`~earfold.renderer.errors.RenderCancelled`: an exception raised at an
    arbitrary point while the reader and writer threads hand blocks over could leave one of
    them waiting for ever, and the hidden files with it.
    """

    _SIGNALS = (signal.SIGTERM, signal.SIGINT)

    def __init__(self) -> None:
        self.stopped = False
        self.signum: int | None = None
        self._previous: dict[int, Any] = {}

    def __call__(self) -> bool:
        return self.stopped

    def interruption(self) -> KeyboardInterrupt:
        """The exception that ends the command for the signal received."""
        return KeyboardInterrupt() if self.signum == signal.SIGINT else _Terminated()

    def _handle(self, signum: int, frame: Any) -> None:
        self.stopped = True
        self.signum = signum
        from earfold.renderer.render import plan_render

        while frame is not None:
            if frame.f_code is plan_render.__code__:
                raise self.interruption()
            frame = frame.f_back

    def __enter__(self) -> _StopOnSignal:
        if threading.current_thread() is threading.main_thread():
            for signum in self._SIGNALS:
                self._previous[signum] = signal.signal(signum, self._handle)
        return self

    def __exit__(self, *exc: object) -> None:
        for signum, previous in self._previous.items():
            signal.signal(signum, previous)
        self._previous.clear()


# -- render ----------------------------------------------------------------------------


def _default_report_path(output: str) -> str:
    p = Path(output)
    return str(p.with_name(p.stem + ".report.json"))


def _write_json(path: str, data: object) -> None:
    write_json_atomic(path, data)


class _OptionValueError(Exception):
    """A declared render option's value refused on the command line.

    Deliberately not a ValueError: argparse would turn that into its usage text plus an
    error line; :func:`main` prints it as the one line every other error gets.
    """


def _option_type(spec: Any) -> Callable[[str], Any]:
    """argparse ``type`` of a declared render option: its own parser and messages."""

    def convert(text: str) -> Any:
        try:
            value = spec.parse(text)
        except RendererError as exc:
            raise _OptionValueError(f"argument {spec.flag}: {exc}") from None
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


@contextlib.contextmanager
def _cache_off(off: bool) -> Iterator[None]:
    """``render --no-cache``: the cache's switch (``$EARFOLD_NO_CACHE``) set for the render."""
    if not off:
        yield
        return
    name = "EARFOLD_NO_CACHE"
    before = os.environ.get(name)
    os.environ[name] = "1"
    try:
        yield
    finally:
        if before is None:
            os.environ.pop(name, None)
        else:
            os.environ[name] = before


def cmd_render(args: argparse.Namespace) -> int:
    from earfold.renderer.render import render

    settings = render_settings_from_args(args)
    progress = _Progress("rendering", enabled=False if args.quiet else None)
    report_path = (
        None if args.report == "none" else (args.report or _default_report_path(args.output))
    )
    with _StopOnSignal() as stop, _cache_off(args.no_cache):
        try:
            report = render(args.inputs, args.output, settings, progress=progress, cancelled=stop)
        except RenderCancelled:
            raise stop.interruption() from None
        finally:
            progress.done()
        if stop.stopped:  # after the last poll: the output is whole, but not wanted
            Path(args.output).unlink(missing_ok=True)
            raise stop.interruption()
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
        for note in report.get("notes", []):
            print(note, file=sys.stderr)
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
    add_render_options(p)
    p.add_argument(
        "--report",
        metavar="FILE.json",
        help="where to write the JSON report (default: OUTPUT's name + .report.json; "
        "'none' to skip)",
    )
    p.add_argument("-q", "--quiet", action="store_true", help="no progress or summary")
    p.add_argument(
        "--no-cache",
        action="store_true",
        help="prepare the HRTF set and room afresh, neither reading nor writing the cache of "
        "prepared filters ('earfold cache')",
    )
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
    add_cache_parser(sub)
    add_adm_parser(sub)

    # serve and worker import the web and queue stack only when they run
    from .serve_cli import add_serve_parser
    from .worker_cli import add_worker_parser

    add_serve_parser(sub)
    add_worker_parser(sub)
    add_demo_parser(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except _OptionValueError as exc:
        # One line, and SystemExit(2) as argparse's own errors end.
        parser.exit(EXIT_BAD_INPUT, f"earfold: error: {exc}\n")
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
    except _Terminated:
        print("earfold: terminated; no partial output was kept", file=sys.stderr)
        return EXIT_TERMINATED
    except KeyboardInterrupt:
        if args.command in ("serve", "worker"):  # a server stopped by Ctrl-C: its usual end
            print("earfold: stopped", file=sys.stderr)
        else:
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
