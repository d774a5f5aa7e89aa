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

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
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
from ..layouts import SCENE_NORMALISATIONS, Layout
from ..room import Room
from ._spec import KINDS, OptionSpec
from .fold import FOLD_CHOICES

__all__ = [
    "DELIVERY_OPTIONS",
    "KINDS",
    "RENDER_OPTIONS",
    "DECODER_CHOICES",
    "ROOM_MODES",
    "SOUND_OPTIONS",
    "OptionSpec",
    "RenderSettings",
    "option",
    "output_format",
    "settings_from_options",
]

#: Room modes: the diffuse tail shared by all loudspeakers, or a whole response per loudspeaker.
ROOM_MODES = ("shared", "exact")

#: Output formats and sample formats.
FORMATS = ("wav", "flac")
SUBTYPES = ("PCM_16", "PCM_24", "FLOAT")

#: HRTF set equalisations.
EQ_CHOICES = ("none", "diffuse-field")

#: Ambisonic scene decoders (the scenes wing's methods, in the order its help names them).
DECODER_CHOICES = ("magls", "virtual")

#: Largest seed: seeds are unsigned 32-bit numbers (a JSON-safe, portable range).
MAX_SEED = 2**32 - 1

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
        "labels of the file's channels in file order, or the name of one of the layout's "
        "orders: wav (the WAV channel-mask order, the layout's default) or film (L C R, "
        "surrounds, LFE, heights; 'earfold layouts' or GET /v1/layouts list them); "
        "overrides channel masks and file names",
        metavar="L,R,C,...|NAME",
    ),
    OptionSpec(
        "fold",
        "choice",
        "binaural: the binaural render (default); stereo: the plain two-channel fold-down "
        "of ITU-R BS.775 (Lo = L + 0.7071 C + 0.7071 Ls, LFE left out; other layouts by "
        "side and height), with no HRTF and no room, loudness-managed like any render: "
        "the reference to compare a binaural render with",
        default="binaural",
        choices=FOLD_CHOICES,
    ),
    OptionSpec(
        "solo",
        "text",
        "render one loudspeaker alone: a channel label of the layout (after the channel "
        "order), all other channels silent; default: all channels",
        metavar="LABEL",
    ),
    OptionSpec(
        "hrtf",
        "text",
        "HRTF set: a shipped set's name ('earfold hrtf list' or GET /v1/hrtf-sets), a SOFA "
        "file on the command line or an uploaded set's id over HTTP; default mit-kemar",
        metavar="NAME|FILE.sofa",
    ),
    OptionSpec(
        "ambisonic_norm",
        "choice",
        "normalisation of an Ambisonic scene (--layout foa, hoa2 ... hoa7): sn3d (AmbiX, the "
        "default), n3d, or fuma (first order only, channels W X Y Z with W at -3 dB); "
        "refused for loudspeaker layouts",
        choices=SCENE_NORMALISATIONS,
    ),
    OptionSpec(
        "ambisonic_decoder",
        "choice",
        "binaural decoder of an Ambisonic scene: magls (magnitude least squares with the "
        "diffuse-field covariance constraint) or virtual (virtual loudspeakers on a "
        "t-design); default: virtual at first order, magls from second order; refused for "
        "loudspeaker layouts",
        choices=DECODER_CHOICES,
    ),
    OptionSpec(
        "rotate",
        "rotation",
        "turn an Ambisonic scene before decoding: yaw[,pitch[,roll]] in degrees (a source "
        "at azimuth a is heard at a + yaw; positive pitch lifts the front, positive roll "
        "the left); default none; refused for loudspeaker layouts",
        unit="deg",
        metavar="YAW[,PITCH[,ROLL]]",
    ),
    OptionSpec(
        "adm_programme",
        "text",
        "the audioProgramme of an ADM master to render, by its ID or name; default the "
        "file's first ('earfold adm inspect FILE' lists them); refused for other stems",
        metavar="ID|NAME",
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

#: The options that only an Ambisonic scene takes.
SCENE_OPTIONS = ("ambisonic_norm", "ambisonic_decoder", "rotate")


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
    channel_order : sequence of str or str, optional
        Labels of the file channels in file order, or the name of one of the layout's
        orders (``wav``, ``film``: :attr:`Layout.orders`); overrides masks and file names.
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
    fold : str
        ``"binaural"`` (default) or ``"stereo"``: the ITU-R BS.775 fold-down to two
        channels (:mod:`earfold.renderer.render.fold`), without HRTF or room.
    solo : str, optional
        A channel label of the layout: render that loudspeaker alone (the others
        silent), everything else as asked; None renders every channel. For a scene, an
        ACN channel (``ACN3``; ``W``, ``X``, ``Y``, ``Z`` for FuMa) decoded alone.
    ambisonic_norm : str, optional
        A scene's normalisation: ``"sn3d"`` (None: the default), ``"n3d"`` or ``"fuma"``.
    ambisonic_decoder : str, optional
        ``"magls"`` or ``"virtual"``; None: virtual at first order, MagLS above.
    rotate : (float, float, float), optional
        Yaw, pitch, roll in degrees applied to a scene before decoding; None: none.
    adm_programme : str, optional
        The audioProgramme of an ADM master (ID or name); None: the first.
    """

    layout: str | os.PathLike[str] | Layout | None = None
    channel_order: Sequence[str] | str | None = None
    hrtf: str | None = None
    lfe: LfeOptions = field(default_factory=LfeOptions)
    subtype: str = "PCM_24"
    format: str | None = None
    seed: int = 0
    block_size: int = DEFAULT_BLOCK_SIZE
    room: str | Room | None = "none"
    room_mode: str = "shared"
    loudness: float | str | None = DEFAULT_LOUDNESS_LUFS
    true_peak: float | None = DEFAULT_TRUE_PEAK_DBTP
    excerpt: tuple[float, float] | None = None
    eq: str | None = None
    headphone_eq: str | os.PathLike[str] | list[Any] | dict[str, Any] | None = None
    fold: str = "binaural"
    solo: str | None = None
    ambisonic_norm: str | None = None
    ambisonic_decoder: str | None = None
    rotate: tuple[float, float, float] | None = None
    adm_programme: str | None = None


def output_format(path: str | os.PathLike[str], format: str | None = None) -> str:
    """The output format of a render written to ``path``: ``format``, or the extension's.

    Raises
    ------
    OptionError
        If neither names a format a render writes (:data:`FORMATS`). Reading takes more
        formats than writing; the message says which.
    """
    from ..io import INPUT_FORMATS

    if format is not None:
        return option("format").check(format)  # type: ignore[no-any-return]
    ext = Path(path).suffix.lower().lstrip(".")
    if ext in FORMATS:
        return ext
    readable = ", ".join(f for f in INPUT_FORMATS if f != "WAVEX")
    raise OptionError(
        f"cannot tell the output format from the name {os.fspath(path)!r}: earfold writes "
        f"{' and '.join('.' + f for f in FORMATS)} files (it reads {readable}); give the "
        "output one of those extensions, or choose the format with --format"
    )


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
