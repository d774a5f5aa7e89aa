"""Every render option, declared once: name, type, unit, range or choices, default, help.

:data:`RENDER_OPTIONS` is the one declaration the rest derives from: the command line's
``render`` options, the HTTP request models, the check of a queued job's options and
the comparison variants (:mod:`earfold.service`). :class:`RenderSettings` is what a
render takes; :func:`settings_from_options` builds it from option values by name,
checking each against its declaration (:meth:`OptionSpec.check`).

Values are plain Python (numbers, words, lists), so that JSON carries them unchanged.
Errors say the real bounds in words and never show a Python representation.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from ..defaults import (
    DEFAULT_LOUDNESS_LUFS,
    DEFAULT_TRUE_PEAK_DBTP,
    LOUDNESS_RANGE_LUFS,
    TRUE_PEAK_RANGE_DBTP,
)
from ..engine import (
    DEFAULT_BLOCK_SIZE,
    DEFAULT_LFE_CUTOFF_HZ,
    DEFAULT_LFE_GAIN_DB,
    LFE_GAIN_RANGE_DB,
    MAX_BLOCK_SIZE,
    MIN_BLOCK_SIZE,
    LfeOptions,
)
from ..errors import OptionError
from ..layouts import Layout

__all__ = [
    "DELIVERY_OPTIONS",
    "RENDER_OPTIONS",
    "ROOM_MODES",
    "SOUND_OPTIONS",
    "OptionSpec",
    "RenderSettings",
    "option",
    "settings_from_options",
]

#: Room modes: the diffuse tail shared by all loudspeakers, or a whole response per loudspeaker.
ROOM_MODES = ("shared", "exact")

#: Output formats and sample formats.
FORMATS = ("wav", "flac")
SUBTYPES = ("PCM_16", "PCM_24", "FLOAT")

#: HRTF set equalisations.
EQ_CHOICES = ("none", "diffuse-field")

#: Largest seed: seeds are unsigned 32-bit numbers (a JSON-safe, portable range).
MAX_SEED = 2**32 - 1

#: Words that switch an off-able level option off.
_OFF_WORDS = ("none", "off")

_LEVEL = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:e[+-]?\d+)?)\s*([a-z]*)\s*$", re.I)

#: Kinds of option value.
KINDS = ("text", "choice", "number", "integer", "level", "labels", "excerpt", "headphone_eq")


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
        ``headphone_eq`` (a file on the command line, a band list over HTTP).
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


_ROOM_HELP = (
    "synthetic room around the loudspeakers: none, a preset (small, medium, large; "
    "'earfold rooms' or GET /v1/rooms) or, on the command line, a JSON room file"
)

#: The declaration of every render option, in the order the command line lists them.
RENDER_OPTIONS: tuple[OptionSpec, ...] = (
    OptionSpec(
        "layout",
        "text",
        "loudspeaker layout of the stem: a name ('earfold layouts' or GET /v1/layouts), "
        "a JSON layout file on the command line or a layout object over HTTP; default: "
        "the layout the stem suggests (its channel count, file names or WAV channel mask)",
        metavar="NAME|FILE.json",
    ),
    OptionSpec(
        "channel_order",
        "labels",
        "labels of the file's channels in file order (overrides channel masks and file names)",
        metavar="L,R,C,...",
    ),
    OptionSpec(
        "hrtf",
        "text",
        "HRTF set: a shipped set's name ('earfold hrtf list' or GET /v1/hrtf-sets), a SOFA "
        "file on the command line or an uploaded set's id over HTTP; default mit-kemar",
        metavar="NAME|FILE.sofa",
    ),
    OptionSpec("room", "text", _ROOM_HELP + "; default none", default="none", metavar="ROOM"),
    OptionSpec(
        "room_mode",
        "choice",
        "shared: the room's diffuse tail rendered once for all loudspeakers (default); "
        "exact: a whole room response per loudspeaker (slower; for comparison)",
        default="shared",
        choices=ROOM_MODES,
    ),
    OptionSpec(
        "eq",
        "choice",
        "equalisation of the HRTF set: diffuse-field (removes the colour all directions "
        "share) or none; default: diffuse-field for free-field sets, none for sets that "
        "hold a room",
        choices=EQ_CHOICES,
    ),
    OptionSpec(
        "headphone_eq",
        "headphone_eq",
        "headphone compensation applied to the output: on the command line a JSON list of "
        "parametric bands or an impulse response (WAV/FLAC), over HTTP the list of bands "
        "itself; default none",
        metavar="FILE",
    ),
    OptionSpec(
        "lfe_cutoff",
        "number",
        "corner of the LFE channel's low-pass in Hz (0: no low-pass); default 120",
        default=DEFAULT_LFE_CUTOFF_HZ,
        unit="Hz",
        minimum=0.0,
        metavar="HZ",
    ),
    OptionSpec(
        "lfe_gain",
        "number",
        "in-band gain of the LFE channel in dB; default +10 (ITU-R BS.775)",
        default=DEFAULT_LFE_GAIN_DB,
        unit="dB",
        minimum=LFE_GAIN_RANGE_DB[0],
        maximum=LFE_GAIN_RANGE_DB[1],
        metavar="DB",
    ),
    OptionSpec(
        "loudness",
        "level",
        "integrated loudness of the output (ITU-R BS.1770): a target in LUFS such as -23 "
        "(EBU R 128, the default), -16 or -14; 'match' keeps the stem's own programme "
        "loudness; 'none' applies no gain",
        default=DEFAULT_LOUDNESS_LUFS,
        unit="LUFS",
        minimum=LOUDNESS_RANGE_LUFS[0],
        maximum=LOUDNESS_RANGE_LUFS[1],
        exclusive=True,
        choices=("match", "none"),
        metavar="LUFS|match|none",
        shapes_sound=False,
    ),
    OptionSpec(
        "true_peak",
        "level",
        "ceiling of the true-peak limiter in dBTP (default -1); 'off' turns the limiter off "
        "(the report says so)",
        default=DEFAULT_TRUE_PEAK_DBTP,
        unit="dBTP",
        minimum=TRUE_PEAK_RANGE_DBTP[0],
        maximum=TRUE_PEAK_RANGE_DBTP[1],
        choices=("off",),
        metavar="DBTP|off",
        shapes_sound=False,
    ),
    OptionSpec(
        "format",
        "choice",
        "output file format; default: from the output file's extension (wav over HTTP)",
        choices=FORMATS,
        shapes_sound=False,
    ),
    OptionSpec(
        "subtype",
        "choice",
        "output sample format: PCM_16 (TPDF-dithered), PCM_24 (default) or FLOAT",
        default="PCM_24",
        choices=SUBTYPES,
        shapes_sound=False,
    ),
    OptionSpec(
        "seed",
        "integer",
        "seed of every random choice (dither, the room's tail), so a render is repeatable; "
        "default 0",
        default=0,
        minimum=0,
        maximum=MAX_SEED,
        metavar="N",
    ),
    OptionSpec(
        "block_size",
        "integer",
        "frames per engine block, a power of two (advanced: changes speed and memory, not "
        "the sound); default 8192",
        default=DEFAULT_BLOCK_SIZE,
        unit="frames",
        minimum=MIN_BLOCK_SIZE,
        maximum=MAX_BLOCK_SIZE,
        power_of_two=True,
        metavar="FRAMES",
    ),
    OptionSpec(
        "excerpt",
        "excerpt",
        "render only this window of the stem: start and length in seconds, e.g. 30,15 "
        "(cut at the stem's end); default: the whole stem",
        unit="s",
        metavar="START,LENGTH",
        http=False,
        shapes_sound=False,
    ),
)

_BY_NAME = {spec.name: spec for spec in RENDER_OPTIONS}

#: Names of the options that shape the binaural signal (a comparison's variants differ
#: in these).
SOUND_OPTIONS = tuple(s.name for s in RENDER_OPTIONS if s.shapes_sound)

#: Names of the delivery and output options (a comparison sets these itself).
DELIVERY_OPTIONS = tuple(s.name for s in RENDER_OPTIONS if not s.shapes_sound)


def option(name: str) -> OptionSpec:
    """The declaration of the option ``name``; :class:`OptionError` if there is none."""
    try:
        return _BY_NAME[name]
    except KeyError:
        raise OptionError(
            f"unknown render option '{name}'; the options are {', '.join(_BY_NAME)}"
        ) from None


@dataclass(frozen=True)
class RenderSettings:
    """Everything a render depends on besides the stem.

    Every field but ``lfe`` is the option of the same name in :data:`RENDER_OPTIONS`,
    with its default; ``lfe`` holds the options ``lfe_cutoff`` and ``lfe_gain``.

    Attributes
    ----------
    layout : str, Layout or None
        Layout name, a JSON layout file or a :class:`Layout`; None: the one the stem
        suggests.
    channel_order : sequence of str, optional
        Labels of the file channels in file order; overrides masks and file names.
    hrtf : str, optional
        A shipped set's name or a SOFA file; None (or empty): the default set.
    lfe : LfeOptions
        How the LFE channel reaches the ears.
    subtype : str
        ``PCM_16`` (TPDF-dithered), ``PCM_24`` or ``FLOAT``.
    format : str, optional
        ``wav`` or ``flac``; from the output's extension when omitted.
    seed : int
        Seed of every random choice (dither, the room's tail), so a render is repeatable.
    block_size : int
        Frames per engine block.
    room : str, Room or None
        ``"none"``, a preset (``small``, ``medium``, ``large``) or a JSON room file.
    room_mode : str
        ``"shared"`` (the diffuse tail rendered once from a weighted sum of the channels)
        or ``"exact"`` (a full room response per loudspeaker; for comparison).
    loudness : float, "match" or None
        Integrated loudness target of the output in LUFS (default -23, EBU R128);
        ``"match"`` keeps the input stem's programme loudness (BS.1770, surround weights,
        LFE excluded; it costs a loudness pass over every input channel); None applies no
        gain.
    true_peak : float or None
        True-peak limiter ceiling in dBTP (default -1); None turns the limiter off (the
        report then says so).
    excerpt : (float, float) or None
        ``(start, length)`` in seconds: render only that window of the stem (cut to the
        stem's end); only those frames are read. None renders the whole stem.
    eq : str or None
        ``"diffuse-field"`` (the set's diffuse-field inverse on every HRIR) or ``"none"``;
        None (default) chooses diffuse-field for free-field sets and none for sets that
        already hold a room (measured BRIRs).
    headphone_eq : path, list or dict, optional
        Headphone compensation applied once to the two-channel output: a JSON band list
        file, an impulse response (WAV/FLAC), or the parsed band list itself
        (:mod:`earfold.renderer.eq.headphone`).
    """

    layout: str | os.PathLike[str] | Layout | None = None
    channel_order: Sequence[str] | None = None
    hrtf: str | None = None
    lfe: LfeOptions = field(default_factory=LfeOptions)
    subtype: str = "PCM_24"
    format: str | None = None
    seed: int = 0
    block_size: int = DEFAULT_BLOCK_SIZE
    room: Any = "none"
    room_mode: str = "shared"
    loudness: float | str | None = DEFAULT_LOUDNESS_LUFS
    true_peak: float | None = DEFAULT_TRUE_PEAK_DBTP
    excerpt: tuple[float, float] | None = None
    eq: str | None = None
    headphone_eq: str | os.PathLike[str] | list[Any] | dict[str, Any] | None = None


def settings_from_options(values: Mapping[str, Any]) -> RenderSettings:
    """:class:`RenderSettings` from option values by name, each checked by its declaration.

    Parameters
    ----------
    values : mapping
        Option name to value (a job's JSON options, the command line's arguments). A
        left-out option or None takes the default, except ``loudness`` and
        ``true_peak``, where the words ``"none"`` and ``"off"`` mean no gain and no
        limiter. A ``layout`` given as a dict is read as a layout object.

    Raises
    ------
    OptionError
        For a name that is not an option, or a value outside its declaration.
    """
    unknown = [k for k in values if k not in _BY_NAME]
    if unknown:
        raise OptionError(
            f"unknown render option{'s' if len(unknown) > 1 else ''} "
            f"{', '.join(repr(str(k)) for k in unknown)}; the options are {', '.join(_BY_NAME)}"
        )
    kwargs: dict[str, Any] = {}
    lfe: dict[str, Any] = {}
    for name, raw in values.items():
        spec = _BY_NAME[name]
        if raw is None:
            continue
        value = spec.check(raw)
        if name == "lfe_cutoff":
            lfe["cutoff_hz"] = value
        elif name == "lfe_gain":
            lfe["gain_db"] = value
        elif name == "layout" and isinstance(value, dict):
            from ..layouts import layout_from_dict

            kwargs["layout"] = layout_from_dict(value, name="custom")
        else:
            kwargs[name] = value
    if lfe:
        kwargs["lfe"] = LfeOptions(**lfe)
    return RenderSettings(**kwargs)
