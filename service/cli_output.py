"""What every ``earfold`` subcommand shares: exit statuses, the progress line, JSON out.

Standard library only: importing it costs a command nothing.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

__all__ = [
    "EXIT_BAD_INPUT",
    "EXIT_INTERRUPTED",
    "Progress",
    "positive",
    "print_json",
]

#: Exit status when what the user gave (files, layouts, options, a port) cannot be used.
EXIT_BAD_INPUT = 2
#: Exit status after Ctrl-C (128 + SIGINT).
EXIT_INTERRUPTED = 130


class Progress:
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


def print_json(data: object) -> None:
    """``data`` as indented JSON on stdout."""
    json.dump(data, sys.stdout, indent=2)
    sys.stdout.write("\n")


def positive(kind: type[int] | type[float]):
    """An argparse type: a number of ``kind`` above zero, else a one-line usage error."""

    def parse(text: str) -> int | float:
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
        if value <= 0:
            raise argparse.ArgumentTypeError(f"must be > 0, got {text!r}")
        return value

    return parse
