"""Custom layouts as JSON (:func:`layout_from_dict`, :func:`load_layout_file`), and how a
render names its layout (:func:`get_layout`).

A custom layout's labels may be free text; the schema and its limits are in
:func:`layout_from_dict`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ..errors import LayoutError, shown
from ..files import read_json_file
from ._catalogue import LAYOUTS
from ._labels import label_key, wrap_azimuth
from ._model import Layout, Speaker
from ._scene import SCENES

__all__ = [
    "MAX_LABEL_LENGTH",
    "MAX_LAYOUT_FILE_BYTES",
    "MAX_SPEAKERS",
    "get_layout",
    "layout_from_dict",
    "load_layout_file",
]

MAX_SPEAKERS = 64
"""Most loudspeakers a custom layout may have (22.2 has 24; 64 leaves room for large
installations and stops a mistaken file from planning thousands of convolutions)."""

MAX_LABEL_LENGTH = 16
"""Longest channel label accepted in a custom layout, in characters."""

MAX_LAYOUT_FILE_BYTES = 1 << 20
"""Largest layout JSON file read (1 MiB; 64 speakers need a few kilobytes)."""

_SPEAKER_KEYS = ("label", "azimuth", "elevation", "distance", "lfe", "spread")

MAX_SPREAD = 8
"""Most directions one channel may be spread over (``spread`` of a speaker)."""
_LAYOUT_KEYS = ("name", "description", "source", "speakers")


def _where(origin: str | None) -> str:
    return f"{origin!r}: " if origin else ""


def _number(value: object, what: str, origin: str | None) -> float:
    # bool is an int in Python; true/false in a position field is a mistake.
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise LayoutError(f"{_where(origin)}{what} must be a number, got {shown(value)}")
    if not math.isfinite(value):
        raise LayoutError(f"{_where(origin)}{what} must be finite, got {shown(value)}")
    return float(value)


def _check_label(value: object, what: str, origin: str | None) -> str:
    if not isinstance(value, str):
        raise LayoutError(f"{_where(origin)}{what} label must be a string, got {shown(value)}")
    # Commas separate labels in --channel-order; surrounding blanks would be invisible.
    if (
        not 1 <= len(value) <= MAX_LABEL_LENGTH
        or not value.isprintable()
        or value != value.strip()
        or "," in value
    ):
        raise LayoutError(
            f"{_where(origin)}{what} label {shown(value)} must be 1 to {MAX_LABEL_LENGTH} "
            "printable characters without commas or surrounding spaces"
        )
    return value


def _check_keys(
    data: Mapping[Any, Any], allowed: Sequence[str], what: str, origin: str | None
) -> None:
    unknown = [k for k in data if k not in allowed]
    if unknown:
        raise LayoutError(
            f"{_where(origin)}{what} has unknown field(s) {', '.join(map(shown, unknown))}; "
            f"valid fields: {', '.join(allowed)}"
        )


def _speaker_from_dict(entry: object, n: int, origin: str | None) -> Speaker:
    what = f"speaker {n}"
    if not isinstance(entry, Mapping):
        raise LayoutError(
            f"{_where(origin)}{what} must be an object with label, azimuth and elevation, "
            f"got {shown(entry)}"
        )
    _check_keys(entry, _SPEAKER_KEYS, what, origin)
    missing = [k for k in ("label", "azimuth", "elevation") if k not in entry]
    if missing:
        raise LayoutError(f"{_where(origin)}{what} is missing {', '.join(missing)}")
    label = _check_label(entry["label"], what, origin)
    what = f"speaker {n} ({shown(label)})"
    azimuth = _number(entry["azimuth"], f"{what} azimuth", origin)
    elevation = _number(entry["elevation"], f"{what} elevation", origin)
    if abs(azimuth) > 360.0:
        raise LayoutError(
            f"{_where(origin)}{what} azimuth {shown(entry['azimuth'])} is outside -360..360 degrees"
        )
    if abs(elevation) > 90.0:
        raise LayoutError(
            f"{_where(origin)}{what} elevation {shown(entry['elevation'])} is outside -90..90 "
            "degrees"
        )
    distance = entry.get("distance")
    if distance is not None:
        distance = _number(distance, f"{what} distance", origin)
        if distance <= 0.0:
            raise LayoutError(
                f"{_where(origin)}{what} distance {shown(entry['distance'])} must be positive "
                "(metres), or left out"
            )
    lfe = entry.get("lfe", False)
    if not isinstance(lfe, bool):
        raise LayoutError(f"{_where(origin)}{what} lfe must be true or false, got {shown(lfe)}")
    spread = _spread(entry.get("spread"), what, origin)
    if spread and lfe:
        raise LayoutError(
            f"{_where(origin)}{what} is an LFE channel; an LFE channel has no spread "
            "(it is not rendered from directions)"
        )
    return Speaker(label, wrap_azimuth(azimuth), elevation, distance, lfe, spread)


def _spread(raw: object, what: str, origin: str | None) -> tuple[tuple[float, float], ...]:
    """The ``spread`` directions of a speaker entry (absent or null: none)."""
    if raw is None:
        return ()
    if not isinstance(raw, (list, tuple)) or not 2 <= len(raw) <= MAX_SPREAD:
        raise LayoutError(
            f"{_where(origin)}{what} spread must be a list of 2 to {MAX_SPREAD} directions "
            f"({{'azimuth': ..., 'elevation': ...}}), got {shown(raw)}"
        )
    out: list[tuple[float, float]] = []
    for k, item in enumerate(raw, 1):
        where = f"{what} spread direction {k}"
        if not isinstance(item, Mapping):
            raise LayoutError(
                f"{_where(origin)}{where} must be an object with azimuth and elevation, "
                f"got {shown(item)}"
            )
        _check_keys(item, ("azimuth", "elevation"), where, origin)
        if "azimuth" not in item or "elevation" not in item:
            raise LayoutError(f"{_where(origin)}{where} needs azimuth and elevation")
        azimuth = _number(item["azimuth"], f"{where} azimuth", origin)
        elevation = _number(item["elevation"], f"{where} elevation", origin)
        if abs(azimuth) > 360.0 or abs(elevation) > 90.0:
            raise LayoutError(
                f"{_where(origin)}{where} ({azimuth:g}/{elevation:g}) is outside azimuth "
                "-360..360 or elevation -90..90 degrees"
            )
        out.append((wrap_azimuth(azimuth), elevation))
    return tuple(out)


def layout_from_dict(
    data: Mapping[str, Any], *, name: str = "custom", origin: str | None = None
) -> Layout:
    """Build and validate a layout from its JSON form.

    Schema::

        {"name": "...", "description": "...", "source": "...",
         "speakers": [{"label": "L", "azimuth": 30, "elevation": 0,
                       "distance": 2.0, "lfe": false}, ...]}

    A speaker may carry ``"spread": [{"azimuth": 110, "elevation": 0}, ...]`` (2 to
    :data:`MAX_SPREAD` directions): its one channel is then reproduced from all of
    them, each at ``1 / sqrt(n)`` (see :class:`Speaker`); an LFE channel cannot.

    ``name``, ``description``, ``source``, ``distance`` and ``lfe`` are optional. Labels
    are 1 to 16 printable characters (no commas); labels that name the same channel
    (``"L"`` and ``"fl"``) count as duplicates. Azimuth (degrees, positive left) may be
    given in -360..360 and is wrapped to (-180, 180]; elevation is in -90..90. Distance
    is in metres and positive. 1 to :data:`MAX_SPEAKERS` speakers.

    Parameters
    ----------
    data : mapping
        The parsed JSON object.
    name : str
        Name used when ``data`` has none.
    origin : str, optional
        File the data came from, named in error messages.

    Raises
    ------
    LayoutError
        For any field that is missing, of the wrong type or out of range.
    """
    if not isinstance(data, Mapping):
        raise LayoutError(
            f"{_where(origin)}a layout must be a JSON object with 'speakers', got "
            f"{type(data).__name__}"
        )
    _check_keys(data, _LAYOUT_KEYS, "the layout", origin)
    texts: dict[str, str] = {}
    for key, default in (("name", name), ("description", ""), ("source", "")):
        value = data.get(key, default)
        if not isinstance(value, str):
            raise LayoutError(f"{_where(origin)}layout {key} must be a string, got {shown(value)}")
        texts[key] = value
    if not texts["name"].strip():
        raise LayoutError(f"{_where(origin)}layout name must not be empty")
    if "speakers" not in data:
        raise LayoutError(f"{_where(origin)}the layout is missing 'speakers' (a list)")
    raw = data["speakers"]
    if not isinstance(raw, (list, tuple)):
        raise LayoutError(f"{_where(origin)}'speakers' must be a list, got {shown(raw)}")
    if not raw:
        raise LayoutError(f"{_where(origin)}the layout has no speakers")
    if len(raw) > MAX_SPEAKERS:
        raise LayoutError(
            f"{_where(origin)}the layout has {len(raw)} speakers; at most {MAX_SPEAKERS} "
            "are supported"
        )
    speakers = [_speaker_from_dict(entry, n, origin) for n, entry in enumerate(raw, 1)]
    seen: dict[str, str] = {}
    for s in speakers:
        key = label_key(s.label)
        if key in seen:
            raise LayoutError(
                f"{_where(origin)}duplicate label {shown(s.label)} (same channel as "
                f"{shown(seen[key])}); every speaker needs its own label"
            )
        seen[key] = s.label
    return Layout(texts["name"], tuple(speakers), texts["description"], texts["source"])


def load_layout_file(path: str | os.PathLike[str]) -> Layout:
    """Read a custom layout from a JSON file (schema: :func:`layout_from_dict`).

    The layout's name defaults to the file name without its extension.

    Raises
    ------
    LayoutError
        If the file cannot be read, is not valid JSON (the message gives the line and
        column) or does not describe a valid layout.
    """
    data = read_json_file(path, kind="layout", max_bytes=MAX_LAYOUT_FILE_BYTES, error=LayoutError)
    return layout_from_dict(data, name=Path(path).stem, origin=str(path))


def get_layout(name_or_path: str | os.PathLike[str]) -> Layout:
    """A built-in layout by name (case-insensitive), an Ambisonic scene (``foa``,
    ``hoa2`` ... ``hoa7``: :data:`SCENES`, in SN3D), or a custom layout from a JSON file.

    Raises
    ------
    LayoutError
        If the name is unknown and is no ``.json`` file; the message lists the names.
    """
    if isinstance(name_or_path, str):
        key = name_or_path.strip().lower()
        for layout_name, layout in LAYOUTS.items():
            if layout_name.lower() == key:
                return layout
        if key in SCENES:
            return SCENES[key]
        if not (key.endswith(".json") or os.path.isfile(name_or_path)):
            raise LayoutError(
                f"unknown layout {shown(name_or_path)}; choose one of {', '.join(LAYOUTS)} or "
                f"give a .json layout file; Ambisonic scenes: {', '.join(SCENES)}"
            )
    elif not isinstance(name_or_path, os.PathLike):
        raise LayoutError(f"a layout is a name or a file path, got {shown(name_or_path)}")
    return load_layout_file(name_or_path)
