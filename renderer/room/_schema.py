"""Rooms as JSON: the schema (:func:`room_from_dict`) and room files (:func:`load_room_file`)."""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ..errors import RoomError, shown
from ..files import read_json_file
from ._acoustics import BANDS_HZ, absorption_for_rt60
from ._model import MAX_DIMENSION, MIN_DIMENSION, SURFACES, Room, band_list, is_number

__all__ = ["MAX_ROOM_FILE_BYTES", "load_room_file", "room_from_dict"]

MAX_ROOM_FILE_BYTES = 1 << 16
"""Largest room JSON file read (64 KiB; a room needs about one)."""

_ROOM_KEYS = (
    "name",
    "description",
    "dimensions",
    "listener",
    "speaker_radius",
    "absorption",
    "rt60",
    "air_absorption",
    "order",
    "mixing_time_ms",
    "seed",
)
_LISTENER_KEYS = ("to_front_wall", "to_left_wall", "ear_height")


def _where(origin: str | None) -> str:
    return f"{origin!r}: " if origin else ""


def _number(value: object, what: str, origin: str | None) -> float:
    if not is_number(value):
        raise RoomError(f"{_where(origin)}{what} must be a number, got {shown(value)}")
    return float(value)


def _check_keys(
    data: Mapping[Any, Any], allowed: Sequence[str], what: str, origin: str | None
) -> None:
    unknown = [k for k in data if k not in allowed]
    if unknown:
        raise RoomError(
            f"{_where(origin)}{what} has unknown key(s) {', '.join(map(shown, unknown))}; "
            f"valid keys: {', '.join(allowed)}"
        )


def _per_band(value: object, what: str, origin: str | None) -> list[float]:
    """A number (the same in every band) or a list of one number per band."""
    if is_number(value):
        return [float(value)] * len(BANDS_HZ)
    if not isinstance(value, (list, tuple)) or len(value) != len(BANDS_HZ):
        raise RoomError(
            f"{_where(origin)}{what} must be a number or a list of {len(BANDS_HZ)} numbers "
            f"(one per band: {band_list()}), got {shown(value)}"
        )
    return [_number(v, f"{what} at {b:g} Hz", origin) for v, b in zip(value, BANDS_HZ)]


def room_from_dict(
    data: Mapping[str, Any], *, name: str = "custom", origin: str | None = None
) -> Room:
    """Build and validate a room from its JSON form.

    Schema (``rt60`` OR ``absorption``, not both)::

        {"name": "...", "description": "...",
         "dimensions": [length, width, height],          # metres; length is front-back
         "listener": {"to_front_wall": 1.9, "to_left_wall": 1.95, "ear_height": 1.2},
         "speaker_radius": 1.5,                           # metres (default 1.5)
         "absorption": {"front": [7 numbers] or one number, "back": ..., "left": ...,
                        "right": ..., "floor": ..., "ceiling": ...},
         "rt60": [7 numbers] or one number,               # seconds, 125 Hz ... 8 kHz
         "air_absorption": false, "order": 3, "mixing_time_ms": 12.0, "seed": 0}

    ``listener`` may be left out (centre of the floor plan, ears at 1.2 m). With ``rt60``
    the absorption is uniform, solved by Eyring's formula (:func:`absorption_for_rt60`).

    Raises
    ------
    RoomError
        For unknown keys, non-numbers, and values the room cannot have.
    """
    if not isinstance(data, Mapping):
        raise RoomError(
            f"{_where(origin)}a room must be a JSON object with 'dimensions' and 'absorption' "
            f"or 'rt60', got {type(data).__name__}"
        )
    _check_keys(data, _ROOM_KEYS, "the room", origin)
    texts: dict[str, str] = {}
    for key, default in (("name", name), ("description", "")):
        value = data.get(key, default)
        if not isinstance(value, str):
            raise RoomError(f"{_where(origin)}room {key} must be a string, got {shown(value)}")
        texts[key] = value
    if "dimensions" not in data:
        raise RoomError(f"{_where(origin)}the room is missing 'dimensions' [length, width, height]")
    dims = data["dimensions"]
    if not isinstance(dims, (list, tuple)) or len(dims) != 3:
        raise RoomError(
            f"{_where(origin)}'dimensions' must be [length, width, height] in metres, got "
            f"{shown(dims)}"
        )
    length, width, height = (
        _number(v, f"dimension {k}", origin) for v, k in zip(dims, ("length", "width", "height"))
    )
    for value, what in ((length, "length"), (width, "width"), (height, "height")):
        if not MIN_DIMENSION <= value <= MAX_DIMENSION:
            raise RoomError(
                f"{_where(origin)}room {what} {shown(value)} m is out of range; give "
                f"{MIN_DIMENSION:g} to {MAX_DIMENSION:g} m"
            )
    listener = data.get(
        "listener", {"to_front_wall": length / 2, "to_left_wall": width / 2, "ear_height": 1.2}
    )
    if not isinstance(listener, Mapping):
        raise RoomError(
            f"{_where(origin)}'listener' must be an object with {', '.join(_LISTENER_KEYS)}, "
            f"got {shown(listener)}"
        )
    _check_keys(listener, _LISTENER_KEYS, "the listener", origin)
    missing = [k for k in _LISTENER_KEYS if k not in listener]
    if missing:
        raise RoomError(f"{_where(origin)}the listener is missing {', '.join(missing)}")
    to_front = _number(listener["to_front_wall"], "listener to_front_wall", origin)
    to_left = _number(listener["to_left_wall"], "listener to_left_wall", origin)
    ear = _number(listener["ear_height"], "listener ear_height", origin)
    position = (length - to_front, width - to_left, ear)

    has_alpha, has_rt60 = "absorption" in data, "rt60" in data
    if has_alpha == has_rt60:
        raise RoomError(
            f"{_where(origin)}give either 'absorption' (per surface: {', '.join(SURFACES)}) or "
            f"'rt60' (seconds per band: {band_list()}), "
            f"{'not both' if has_alpha else 'one of them'}"
        )
    air = data.get("air_absorption", False)
    if not isinstance(air, bool):
        raise RoomError(f"{_where(origin)}air_absorption must be true or false, got {shown(air)}")
    rt60_target: tuple[float, ...] | None = None
    if has_rt60:
        rt60_target = tuple(_per_band(data["rt60"], "rt60", origin))
        try:
            alpha = absorption_for_rt60((length, width, height), rt60_target, air_absorption=air)
        except RoomError as exc:
            raise RoomError(f"{_where(origin)}{exc}") from None
        absorption = tuple(tuple(float(a) for a in alpha) for _ in SURFACES)
    else:
        raw = data["absorption"]
        if not isinstance(raw, Mapping):
            raise RoomError(
                f"{_where(origin)}'absorption' must be an object with a value per surface "
                f"({', '.join(SURFACES)}), got {shown(raw)}"
            )
        _check_keys(raw, SURFACES, "absorption", origin)
        missing = [s for s in SURFACES if s not in raw]
        if missing:
            raise RoomError(
                f"{_where(origin)}absorption is missing {', '.join(missing)}; every surface "
                f"({', '.join(SURFACES)}) needs a value"
            )
        absorption = tuple(
            tuple(_per_band(raw[s], f"absorption of the {s}", origin)) for s in SURFACES
        )

    options: dict[str, Any] = {}
    if "speaker_radius" in data:
        options["speaker_radius"] = _number(data["speaker_radius"], "speaker_radius", origin)
    if "mixing_time_ms" in data and data["mixing_time_ms"] is not None:
        options["mixing_time_ms"] = _number(data["mixing_time_ms"], "mixing_time_ms", origin)
    for key in ("order", "seed"):
        if key in data:
            value = data[key]
            if isinstance(value, bool) or not isinstance(value, int):
                raise RoomError(f"{_where(origin)}{key} must be an integer, got {shown(value)}")
            options[key] = value
    try:
        return Room(
            name=texts["name"],
            dimensions=(length, width, height),
            listener=position,
            absorption=absorption,
            air_absorption=air,
            description=texts["description"],
            rt60_target=rt60_target,
            **options,
        )
    except RoomError as exc:
        raise RoomError(f"{_where(origin)}{exc}") from None


def load_room_file(path: str | os.PathLike[str]) -> Room:
    """Read a room from a JSON file (schema: :func:`room_from_dict`).

    The room's name defaults to the file name without its extension.

    Raises
    ------
    RoomError
        If the file cannot be read, is not valid JSON (the message gives the line and
        column) or does not describe a valid room.
    """
    data = read_json_file(path, kind="room", max_bytes=MAX_ROOM_FILE_BYTES, error=RoomError)
    return room_from_dict(data, name=Path(path).stem, origin=str(path))
