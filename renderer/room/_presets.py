"""The preset rooms and how a render names its room.

Presets (:data:`ROOMS`; names as the CLI spells them, figures computed by this wing):

========  ====================================================================  ==========
name      room                                                                   RT60 (s)
========  ====================================================================  ==========
small     "compact control room": 4.6 x 3.9 x 2.9 m, 52.0 m3, treated front     0.35 / 0.27
          and rear walls, absorbing ceiling cloud, carpet; listener 1.9 m from   / 0.25 at
          the front wall on the centre line, ears at 1.2 m; speakers at 1.4 m;   125 / 500
          mean alpha 0.24-0.35; mixing time 7.2 ms                               / 1k Hz
medium    "mixing room": 7.4 x 5.8 x 3.4 m, 145.9 m3, partly treated;            0.66 / 0.49
          listener 2.8 m from the front wall, ears at 1.2 m; speakers at 2.0 m;  / 0.44
          mean alpha 0.18-0.28; mixing time 12.1 ms
large     "hall": 32 x 22 x 13 m, 9152 m3, given by target RT60s                 2.3 / 1.95
          2.3, 2.1, 1.95, 1.9, 1.75, 1.5, 1.1 s (125 Hz ... 8 kHz) with air      / 1.9
          absorption; listener 12 m from the front wall, ears at 1.2 m;
          speakers at 2.2 m (so that a 22.2 bottom layer at -30 degrees stays
          above the floor); mixing time 95.7 ms
========  ====================================================================  ==========

The presets' speaker radii let every built-in layout fit (22.2's zenith and bottom layer
included). Room files are JSON, read by :func:`~._schema.load_room_file` (schema:
:func:`~._schema.room_from_dict`).
"""

from __future__ import annotations

import os
import types
from collections.abc import Mapping, Sequence
from typing import Any

from ..errors import RoomError, shown
from ._model import Room
from ._schema import load_room_file, room_from_dict

__all__ = ["ROOMS", "get_room"]


def _preset(
    name: str,
    description: str,
    dims: tuple[float, float, float],
    to_front: float,
    radius: float,
    *,
    absorption: Mapping[str, Sequence[float]] | None = None,
    rt60: Sequence[float] | None = None,
    air: bool = False,
) -> Room:
    data: dict[str, Any] = {
        "name": name,
        "description": description,
        "dimensions": list(dims),
        "listener": {"to_front_wall": to_front, "to_left_wall": dims[1] / 2, "ear_height": 1.2},
        "speaker_radius": radius,
        "air_absorption": air,
    }
    if absorption is not None:
        data["absorption"] = {k: list(v) for k, v in absorption.items()}
    elif rt60 is not None:
        data["rt60"] = list(rt60)
    return room_from_dict(data)


# Absorption of the treated surfaces: typical values for the kind of treatment named
# (panel absorbers, bass traps, carpet on concrete, plasterboard), common practice, tuned
# so that Eyring's formula gives the room the time in the docstring.
ROOMS: Mapping[str, Room] = types.MappingProxyType(
    {
        "small": _preset(
            "small",
            "compact control room, treated front and rear walls, absorbing ceiling cloud",
            (4.6, 3.9, 2.9),
            1.9,
            1.4,
            absorption={
                "front": (0.40, 0.45, 0.40, 0.35, 0.30, 0.30, 0.28),
                "back": (0.45, 0.50, 0.50, 0.45, 0.40, 0.38, 0.35),
                "left": (0.12, 0.12, 0.15, 0.17, 0.18, 0.18, 0.18),
                "right": (0.12, 0.12, 0.15, 0.17, 0.18, 0.18, 0.18),
                "floor": (0.04, 0.07, 0.18, 0.32, 0.45, 0.50, 0.50),
                "ceiling": (0.40, 0.45, 0.48, 0.48, 0.48, 0.48, 0.48),
            },
        ),
        "medium": _preset(
            "medium",
            "mixing room, partly treated plasterboard walls and carpet",
            (7.4, 5.8, 3.4),
            2.8,
            2.0,
            absorption={
                "front": (0.30, 0.38, 0.42, 0.40, 0.36, 0.34, 0.30),
                "back": (0.32, 0.40, 0.45, 0.42, 0.38, 0.35, 0.30),
                "left": (0.14, 0.13, 0.13, 0.15, 0.16, 0.16, 0.15),
                "right": (0.14, 0.13, 0.13, 0.15, 0.16, 0.16, 0.15),
                "floor": (0.05, 0.06, 0.10, 0.20, 0.30, 0.35, 0.35),
                "ceiling": (0.25, 0.30, 0.32, 0.32, 0.32, 0.30, 0.28),
            },
        ),
        "large": _preset(
            "large",
            "hall with a long, warm decay; air absorption on",
            (32.0, 22.0, 13.0),
            12.0,
            2.2,
            rt60=(2.3, 2.1, 1.95, 1.9, 1.75, 1.5, 1.1),
            air=True,
        ),
    }
)
"""The preset rooms by CLI name (see the module docstring for their figures)."""


def get_room(name_or_path: str | os.PathLike[str] | Room | None) -> Room | None:
    """A preset by name (case-insensitive), a room JSON file, or None for ``"none"``.

    Raises
    ------
    RoomError
        If the name is unknown and no ``.json`` file; the message lists the choices.
    """
    if name_or_path is None or isinstance(name_or_path, Room):
        return name_or_path
    if isinstance(name_or_path, str):
        key = name_or_path.strip().lower()
        if key == "none":
            return None
        if key in ROOMS:
            return ROOMS[key]
        if not (key.endswith(".json") or os.path.isfile(name_or_path)):
            raise RoomError(
                f"unknown room {shown(name_or_path)}; choose one of none, {', '.join(ROOMS)} or "
                "give a .json room file"
            )
    elif not isinstance(name_or_path, os.PathLike):
        raise RoomError(f"a room is a name or a file path, got {shown(name_or_path)}")
    return load_room_file(name_or_path)
