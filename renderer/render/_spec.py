"""The declaration of one render option (:class:`OptionSpec`) and its checks.

The declarations themselves are in :mod:`earfold.renderer.render.options`.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from typing import Any

from ..errors import OptionError
from ..layouts import Layout

__all__ = ["KINDS", "OptionSpec"]

#: Words that switch an off-able level option off.
_OFF_WORDS = ("none", "off")

_LEVEL = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:e[+-]?\d+)?)\s*([a-z]*)\s*$", re.I)

#: Kinds of option value.
KINDS = (
    "text",
    "choice",
    "number",
    "integer",
    "level",
    "labels",
    "excerpt",
    "headphone_eq",
    "rotation",
)


def _fmt(value: float) -> str:
    """A bound in words: ``-70``, ``0.5``, ``1048576``."""
    return str(int(value)) if float(value).is_integer() else f"{value:g}"


def _shown(value: object) -> str:
    """A user's value as text for a message (no Python representation)."""
    if isinstance(value, str):
        return f"'{value}'"
    if isinstance(value, bool) or value is None:
        return {True: "true", False: "false", None: "null"}[value]
    if isinstance(value, (int, float)):
        return _fmt(float(value)) if isinstance(value, float) else str(value)
    return f"a value of type {type(value).__name__}"


@dataclass(frozen=True)
class OptionSpec:
    """The declaration of one render option.

    Attributes
    ----------
    name : str
        The option's name (a Python and JSON identifier; ``--name-with-dashes`` on the
        command line).
    kind : str
        One of :data:`KINDS`: ``text``, ``choice`` (one of ``choices``), ``number``,
        ``integer``, ``level`` (a number in ``unit`` or one of the words in ``choices``),
        ``labels`` (a list of channel labels), ``excerpt`` (start and length in seconds),
        ``headphone_eq`` (a file on the command line, a band list over HTTP),
        ``rotation`` (yaw, pitch and roll in degrees: ``YAW[,PITCH[,ROLL]]`` as text or
        a list of one to three numbers; the words ``none``/``off`` mean no rotation).
    help : str
        One sentence or two for users; the command line's help and the HTTP schema's
        description.
    default : object
        The value when the option is left out (None: decided by the render, as ``help``
        says).
    unit : str
        Unit of a number (``LUFS``, ``dBTP``, ``Hz``, ``dB``, ``frames``, ``s``).
    minimum, maximum : float, optional
        Bounds of a number.
    exclusive : bool
        The bounds themselves are refused (an open interval).
    choices : tuple of str
        The values of a ``choice``; the words a ``level`` accepts besides a number.
    metavar : str
        How the command line's help shows the value.
    power_of_two : bool
        An integer that must be a power of two.
    cli, http : bool
        Offered on the command line and in ``POST /v1/renders``.
    shapes_sound : bool
        Changes the binaural signal itself (comparison variants take these); delivery and
        output options do not.
    """

    name: str
    kind: str
    help: str
    default: Any = None
    unit: str = ""
    minimum: float | None = None
    maximum: float | None = None
    exclusive: bool = False
    choices: tuple[str, ...] = ()
    metavar: str = ""
    power_of_two: bool = False
    cli: bool = True
    http: bool = True
    shapes_sound: bool = True

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"unknown option kind {self.kind!r}")

    @property
    def flag(self) -> str:
        """The command line's flag, e.g. ``--room-mode``."""
        return "--" + self.name.replace("_", "-")

    def range_text(self) -> str:
        """The accepted numbers in words, e.g. ``between -70 and 0 LUFS (exclusive)``."""
        unit = f" {self.unit}" if self.unit else ""
        lo, hi = self.minimum, self.maximum
        if lo is not None and hi is not None:
            if self.exclusive:
                return f"between {_fmt(lo)} and {_fmt(hi)}{unit} (exclusive)"
            return f"from {_fmt(lo)} to {_fmt(hi)}{unit}"
        if lo is not None:
            return f"{'above' if self.exclusive else 'at least'} {_fmt(lo)}{unit}"
        if hi is not None:
            return f"{'below' if self.exclusive else 'at most'} {_fmt(hi)}{unit}"
        return f"a number{unit}"

    def _error(self, value: object, expected: str) -> OptionError:
        return OptionError(f"{self.name} must be {expected}, not {_shown(value)}")

    def _number(self, value: object, *, integer: bool = False) -> float | int:
        words = f", or {' or '.join(repr(c) for c in self.choices)}" if self.choices else ""
        if integer:
            ok = isinstance(value, int) and not isinstance(value, bool)
            if not ok and isinstance(value, float) and value.is_integer():
                value, ok = int(value), True
            if not ok:
                raise self._error(value, f"a whole number {self.range_text()}")
        elif (
            isinstance(value, bool)
            or not isinstance(value, (int, float))
            or not math.isfinite(float(value))
        ):
            raise self._error(value, f"a number {self.range_text()}{words}")
        assert isinstance(value, (int, float))
        number: float | int = int(value) if integer else float(value)
        lo, hi = self.minimum, self.maximum
        low_ok = lo is None or (number > lo if self.exclusive else number >= lo)
        high_ok = hi is None or (number < hi if self.exclusive else number <= hi)
        if not (low_ok and high_ok):
            raise self._error(value, self.range_text() + words)
        if self.power_of_two and int(number) & (int(number) - 1):
            raise self._error(value, f"a power of two {self.range_text()}")
        return number

    def check(self, value: Any) -> Any:
        """The value in the render's terms, or :class:`OptionError` saying what is accepted.

        None is the default and is always accepted. Words of a ``level`` map to the
        render's values: ``"none"`` and ``"off"`` to None, others to themselves.
        """
        if value is None:
            return None
        if self.kind == "number":
            return self._number(value)
        if self.kind == "integer":
            return self._number(value, integer=True)
        if self.kind == "level":
            if isinstance(value, str):
                word = value.strip().lower()
                if word in _OFF_WORDS and any(c in _OFF_WORDS for c in self.choices):
                    return None
                if word in self.choices:
                    return word
                return self._number(self.parse_number(value))
            return self._number(value)
        if self.kind == "choice":
            text = value if isinstance(value, str) else None
            for choice in self.choices:
                if text is not None and text.strip().lower() == choice.lower():
                    return choice
            raise self._error(value, "one of " + ", ".join(self.choices))
        if self.kind == "labels":
            if isinstance(value, str):
                value = [v for v in value.split(",")]
            if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
                raise self._error(value, "a list of channel labels")
            labels = tuple(v.strip() for v in value if v.strip())
            if not labels:
                raise OptionError(
                    f"{self.name} must name the channels, e.g. L,R,C,LFE,Ls,Rs; it is empty"
                )
            return labels
        if self.kind == "excerpt":
            parts = value.split(",") if isinstance(value, str) else value
            try:
                start, length = (float(v) for v in parts)
            except (TypeError, ValueError):
                raise self._error(value, "a start and a length in seconds, e.g. 30,15") from None
            if not (math.isfinite(start) and math.isfinite(length)) or start < 0 or length <= 0:
                raise OptionError(
                    f"{self.name} must have a start of 0 s or more and a length above 0 s, "
                    f"not {_fmt(start)} s and {_fmt(length)} s"
                )
            return (start, length)
        if self.kind == "rotation":
            return self._rotation(value)
        if self.kind == "headphone_eq":
            if isinstance(value, (str, os.PathLike, list, dict)):
                return value
            raise self._error(value, "a file or a list of bands")
        # text
        if isinstance(value, (str, os.PathLike, Layout)) or (
            self.name == "layout" and isinstance(value, dict)
        ):
            return value
        raise self._error(value, "text")

    def _rotation(self, value: object) -> tuple[float, float, float] | None:
        """Yaw, pitch, roll (degrees) from ``"YAW[,PITCH[,ROLL]]"`` or 1 to 3 numbers."""
        expected = "yaw[,pitch[,roll]] in degrees, e.g. 90 or 90,0,10"
        if isinstance(value, str):
            if value.strip().lower() in _OFF_WORDS:
                return None
            parts: list[object] = []
            for text in value.split(","):
                try:
                    parts.append(float(text))
                except ValueError:
                    raise self._error(value, expected) from None
        elif isinstance(value, (list, tuple)):
            parts = list(value)
        else:
            parts = [value]
        if not 1 <= len(parts) <= 3:
            raise self._error(value, expected)
        angles: list[float] = []
        for part in parts:
            if (
                isinstance(part, bool)
                or not isinstance(part, (int, float))
                or not math.isfinite(float(part))
            ):
                raise self._error(value, expected + " (finite numbers)")
            angles.append(float(part))
        angles += [0.0] * (3 - len(angles))
        return (angles[0], angles[1], angles[2])

    def parse_number(self, text: str) -> float | str:
        """A number from text with an optional unit (``-23``, ``-23 LUFS``); else the text."""
        match = _LEVEL.match(text)
        units = ("", self.unit.lower()) + (("lkfs",) if self.unit == "LUFS" else ())
        if match is None or match.group(2).lower() not in units:
            return text
        return float(match.group(1))

    def parse(self, text: str) -> Any:
        """The value of command-line text (numbers read, lists split), checked."""
        if self.kind == "number":
            value: Any = self.parse_number(text)
        elif self.kind == "integer":
            try:
                value = int(text)
            except ValueError:
                value = text
        else:
            value = text
        return self.check(value)
