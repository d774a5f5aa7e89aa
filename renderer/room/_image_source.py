"""Direct path and early reflections of a shoebox by the image-source method.

Allen, J. B. and Berkley, D. A. (1979), "Image method for efficiently simulating
small-room acoustics", J. Acoust. Soc. Am. 65(4), 943-950. In a room
``[0, Lx] x [0, Ly] x [0, Lz]`` a source at ``(sx, sy, sz)`` has, along each axis, the
images ``(1 - 2p) s + 2 n L`` for integers ``n`` and ``p`` in {0, 1}; that image has been
reflected ``|n - p|`` times by the wall at 0 and ``|n|`` times by the wall at ``L``. Its
order is the total number of reflections over the three axes; every image is visible in a
shoebox, so the paths up to order ``N`` are exactly the images of order <= ``N``
(``(2N + 1)(2N^2 + 2N + 3) / 3`` of them, 63 for ``N = 3``).

For each image: its distance ``d`` to the listener, the arrival delay ``d / c``, the
spherical spreading ``r_ref / d`` relative to a direct path of ``r_ref`` metres, the
pressure reflection gain per band, the product over the walls hit of
``beta = sqrt(1 - alpha)`` (recalled; the energy absorbed at each hit is ``alpha``), the
air attenuation per band when the room has it, and the arrival direction at the listener.

Axes (see :class:`earfold.renderer.room.Room`): room ``x`` runs from the back wall to the
front wall, ``y`` from the right wall to the left wall, ``z`` up; the listener faces the front wall,
so the listener frame (x front, y left, z up) is the room frame moved to the listener, and
an image at ``q`` arrives from the unit vector ``(q - listener) / |q - listener|``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from ..defaults import SPEED_OF_SOUND
from ..errors import RoomError, shown
from ._acoustics import air_attenuation_db_per_km
from ._model import MAX_ORDER, SURFACES, Room

__all__ = ["ImageSources", "image_sources"]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

# Index in SURFACES of the wall at 0 and the wall at L along each room axis.
_WALLS_AT_ZERO = (SURFACES.index("back"), SURFACES.index("right"), SURFACES.index("floor"))
_WALLS_AT_END = (SURFACES.index("front"), SURFACES.index("left"), SURFACES.index("ceiling"))


@dataclass(frozen=True, eq=False)
class ImageSources:
    """The direct path and the image sources of one loudspeaker, nearest first.

    Attributes
    ----------
    positions : ndarray, shape (K, 3)
        Image positions in room coordinates (m); row 0 is the loudspeaker itself.
    orders : ndarray of int, shape (K,)
        Number of reflections.
    hits : ndarray of int, shape (K, 6)
        Reflections off each surface, in :data:`earfold.renderer.room.SURFACES` order.
    distances : ndarray, shape (K,)
        Path length to the listener (m).
    delays : ndarray, shape (K,)
        Arrival time after emission, ``distance / c`` (s).
    spreading : ndarray, shape (K,)
        ``reference_distance / distance``: the 1/r law, 1 for a direct path of
        ``reference_distance`` metres.
    reflection : ndarray, shape (K, 7)
        Pressure reflection gain per band, the product of the walls' ``sqrt(1 - alpha)``.
    air : ndarray, shape (K, 7)
        Pressure attenuation of the air over the path per band (ones without air).
    directions : ndarray, shape (K, 3)
        Unit arrival directions in the listener frame (x front, y left, z up).
    reference_distance : float
        The distance whose direct path has spreading 1.
    complete_distance : float
        Every path shorter than this is among the images: the length of the shortest
        path of order ``N + 1``, the first one left out.
    """

    positions: FloatArray
    orders: IntArray
    hits: IntArray
    distances: FloatArray
    delays: FloatArray
    spreading: FloatArray
    reflection: FloatArray
    air: FloatArray
    directions: FloatArray
    reference_distance: float
    complete_distance: float

    def __post_init__(self) -> None:
        for name in (
            "positions",
            "orders",
            "hits",
            "distances",
            "delays",
            "spreading",
            "reflection",
            "air",
            "directions",
        ):
            getattr(self, name).setflags(write=False)

    @property
    def count(self) -> int:
        """Number of paths (the direct one included)."""
        return int(self.distances.size)

    @property
    def band_gains(self) -> FloatArray:
        """Reflection times air gain per band, shape (K, 7) (spreading not included)."""
        gains: FloatArray = self.reflection * self.air
        return gains


def _axis_images(s: float, length: float, order: int) -> tuple[FloatArray, IntArray, IntArray]:
    n = np.arange(-order, order + 1)
    n, p = np.repeat(n, 2), np.tile([0, 1], n.size)
    coord = (1 - 2 * p) * s + 2 * n * length
    at_zero, at_end = np.abs(n - p), np.abs(n)
    keep = at_zero + at_end <= order
    return coord[keep], at_zero[keep], at_end[keep]


def image_sources(
    room: Room,
    source: npt.ArrayLike,
    *,
    order: int | None = None,
    reference_distance: float | None = None,
    max_distance: float | None = None,
    speed_of_sound: float = SPEED_OF_SOUND,
) -> ImageSources:
    """Image sources of a point source in a shoebox room, up to an order.

    Parameters
    ----------
    room : Room
        The room (dimensions, listener, absorption, air).
    source : ndarray, shape (3,)
        Source position in room coordinates (m), inside the room.
    order : int, optional
        Highest reflection order; ``room.order`` when None.
    reference_distance : float, optional
        Distance of unit spreading; the direct path's length when None.
    max_distance : float, optional
        Leave out paths longer than this (m).
    speed_of_sound : float
        m/s.

    Returns
    -------
    ImageSources
        Sorted by distance; the direct path first.

    Raises
    ------
    RoomError
        If the order is not an integer from 0 to :data:`~earfold.renderer.room.MAX_ORDER`,
        or the source is not inside the room.
    """
    n_max = room.order if order is None else order
    if (
        isinstance(n_max, bool)
        or not isinstance(n_max, (int, np.integer))
        or not 0 <= n_max <= MAX_ORDER
    ):
        raise RoomError(
            f"image-source order {shown(order)} must be an integer from 0 to {MAX_ORDER}"
        )
    n_max = int(n_max)
    src = np.asarray(source, dtype=float).reshape(3)
    dims = np.asarray(room.dimensions)
    if not (np.all(src > 0) and np.all(src < dims)):
        raise RoomError(
            f"source at {tuple(round(float(v), 3) for v in src)!r} is not inside room "
            f"{shown(room.name)} ({', '.join(f'{d:g}' for d in dims)} m)"
        )
    listener = np.asarray(room.listener)
    if np.linalg.norm(src - listener) < 1e-3:
        raise RoomError("the source is at the listener's position; it needs some distance")

    # One axis at a time, then every combination whose total order is small enough. One
    # order more than asked is enumerated to find the shortest path left out.
    axes = [_axis_images(src[k], dims[k], n_max + 1) for k in range(3)]
    ix, iy, iz = np.meshgrid(*(np.arange(a[0].size) for a in axes), indexing="ij")
    ix, iy, iz = ix.ravel(), iy.ravel(), iz.ravel()
    hits = np.zeros((ix.size, len(SURFACES)), dtype=np.int64)
    positions = np.empty((ix.size, 3))
    for k, idx in enumerate((ix, iy, iz)):
        coord, at_zero, at_end = axes[k]
        positions[:, k] = coord[idx]
        hits[:, _WALLS_AT_ZERO[k]] = at_zero[idx]
        hits[:, _WALLS_AT_END[k]] = at_end[idx]
    orders = hits.sum(axis=1)
    offsets = positions - listener
    distances = np.linalg.norm(offsets, axis=1)

    beyond = orders == n_max + 1
    complete = float(distances[beyond].min())
    keep = orders <= n_max
    if max_distance is not None:
        keep &= (distances <= max_distance) | (orders == 0)
    # Stable sort: ties keep the enumeration order, so the result is deterministic.
    sel = np.flatnonzero(keep)
    sel = sel[np.argsort(distances[sel], kind="stable")]
    positions, hits, orders = positions[sel], hits[sel], orders[sel]
    offsets, distances = offsets[sel], distances[sel]

    beta = room.reflection  # (6, 7)
    reflection = np.prod(beta[None, :, :] ** hits[:, :, None], axis=1)
    if room.air_absorption:
        db_per_m = air_attenuation_db_per_km() / 1000.0
        air = 10.0 ** (-db_per_m[None, :] * distances[:, None] / 20.0)
    else:
        air = np.ones_like(reflection)
    ref = float(distances[0]) if reference_distance is None else float(reference_distance)
    return ImageSources(
        positions=positions,
        orders=orders,
        hits=hits,
        distances=distances,
        delays=distances / speed_of_sound,
        spreading=ref / distances,
        reflection=reflection,
        air=air,
        directions=offsets / distances[:, None],
        reference_distance=ref,
        complete_distance=complete,
    )
