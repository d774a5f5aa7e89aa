"""Where virtual loudspeakers stand in a room: one distance that keeps them inside it.

A renderer that places virtual loudspeakers in a synthetic room (a scene's decoder
directions, an ADM master's reflection array) puts them at the room's loudspeaker radius,
or nearer where a direction would reach a surface first (a spherical design points at the
floor, which is closer than the radius in most rooms).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from ..errors import RoomError
from ._model import Room

__all__ = ["VIRTUAL_CLEARANCE_M", "virtual_distance"]


#: Virtual loudspeakers keep at least this far (m) from every surface of the room.
VIRTUAL_CLEARANCE_M = 0.1


def virtual_distance(room: Room, directions: NDArray[np.float64]) -> float:
    """One distance (m) for every virtual loudspeaker: the room's ``speaker_radius``, or
    less where a direction would reach a surface (a t-design points at the floor, which
    is closer than the radius in most rooms), keeping :data:`VIRTUAL_CLEARANCE_M`.

    One distance for all keeps the decoder's directions at equal level and delay.
    """
    low = np.zeros(3)
    high = np.asarray(room.dimensions, dtype=float)
    listener = np.asarray(room.listener, dtype=float)
    reach = np.inf
    for v in np.asarray(directions, dtype=float):
        for axis in range(3):
            if v[axis] > 1e-12:
                reach = min(reach, (high[axis] - listener[axis]) / v[axis])
            elif v[axis] < -1e-12:
                reach = min(reach, (low[axis] - listener[axis]) / v[axis])
    distance = min(float(room.speaker_radius), reach - VIRTUAL_CLEARANCE_M)
    if distance <= VIRTUAL_CLEARANCE_M:
        raise RoomError(
            f"room {room.name!r} leaves no space around the listener for the virtual "
            "loudspeakers of a scene (the listener stands at a surface)"
        )
    return round(distance, 4)
