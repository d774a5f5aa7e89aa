"""The room: a shoebox, where the listener sits, what its surfaces absorb.

A :class:`Room` describes a rectangular room well enough for the image-source early part
and the statistical late tail:

* **Frame.** Room coordinates are metres from one corner: ``x`` runs from the *back* wall
  (``x = 0``) to the *front* wall (``x = length``), ``y`` from the *right* wall (``y = 0``)
  to the *left* wall (``y = width``), ``z`` from the *floor* (``z = 0``) to the *ceiling*
  (``z = height``). The listener faces the front wall, so these axes are those of the
  listener frame of :mod:`earfold.renderer.geometry` (x front, y left, z up) translated to the
  listener's position: no rotation anywhere. A loudspeaker at direction ``v`` and distance
  ``d`` stands at ``listener + d * v``.
* **Surfaces.** :data:`SURFACES` = front, back, left, right, floor, ceiling; each has an
  energy absorption coefficient per band (:data:`BANDS_HZ`) in [0, 1]. A single surface
  may reflect everything (0) or nothing (1), but the area-weighted mean in each band must
  lie above 0 (at 0 Eyring's and Sabine's times are infinite: the sound never dies away)
  and at most :data:`MAX_MEAN_ABSORPTION`, and the resulting time within
  :data:`MIN_RT60`..:data:`MAX_RT60`.
* **Critical distance** of an omnidirectional source, ``0.057 sqrt(V / T)`` (Schroeder,
  JASA 1996), reported per band with the Eyring time.

The formulas are in :mod:`._acoustics`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, TypeGuard

import numpy as np
import numpy.typing as npt

from ..errors import RoomError, shown
from ._acoustics import (
    AIR_M_PER_METRE,
    BANDS_HZ,
    MAX_MEAN_ABSORPTION,
    MAX_RT60,
    MIN_RT60,
    air_attenuation_db_per_km,
    box_measures,
    eyring_rt60,
    polack_mixing_time,
    sabine_rt60,
)

__all__ = [
    "DEFAULT_ORDER",
    "DEFAULT_SPEAKER_RADIUS",
    "LISTENER_CLEARANCE",
    "MAX_DIMENSION",
    "MAX_MIXING_TIME_MS",
    "MAX_ORDER",
    "MIN_DIMENSION",
    "MIN_MIXING_TIME_MS",
    "SPEAKER_CLEARANCE",
    "SURFACES",
    "Room",
    "band_list",
    "is_number",
]

FloatArray = npt.NDArray[np.float64]

SURFACES: tuple[str, ...] = ("front", "back", "left", "right", "floor", "ceiling")
"""Surface names in the order of :attr:`Room.absorption`'s rows."""

DEFAULT_ORDER = 3
"""Image-source order by default: every path with up to three reflections."""

MAX_ORDER = 6
"""Highest image-source order accepted (377 images per loudspeaker)."""

DEFAULT_SPEAKER_RADIUS = 1.5
"""Loudspeaker distance (m) of a room file that gives none."""

MIN_DIMENSION = 1.0
"""Smallest room edge (m): a smaller 'room' is a box around the head."""

MAX_DIMENSION = 100.0
"""Largest room edge (m)."""

LISTENER_CLEARANCE = 0.1
"""The listener's ears keep this far (m) from every surface: about a head's radius."""

SPEAKER_CLEARANCE = 0.05
"""Each loudspeaker keeps this far (m) from every surface (the acoustic centre of a box
against a wall)."""

MIN_MIXING_TIME_MS = 1.0
"""Shortest mixing time (ms) a room may give."""

MAX_MIXING_TIME_MS = 500.0
"""Longest mixing time (ms) a room may give."""


# -- the room ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Room:
    """A shoebox room with a listener in it (see the module docstring for the frame).

    Attributes
    ----------
    name : str
        Name shown in reports.
    dimensions : tuple of 3 float
        Length (x, back to front), width (y, right to left), height (z), metres.
    listener : tuple of 3 float
        Position of the centre of the head in room coordinates, metres.
    absorption : tuple of 6 tuples of 7 float
        Energy absorption coefficient per surface (:data:`SURFACES`) and band
        (:data:`BANDS_HZ`), each in [0, 1].
    speaker_radius : float
        Distance (m) of loudspeakers whose layout gives none.
    air_absorption : bool
        Whether air absorbs (ISO 9613-1, 20 C / 50 % RH) in the images and the tail.
    order : int
        Image-source order, 0 to :data:`MAX_ORDER`.
    mixing_time_ms : float or None
        When the tail takes over, after the direct sound; None for Polack's ``sqrt(V)`` ms.
    seed : int
        Seed of the tail's noise (combined with the render's seed).
    description : str
        One line for people.
    rt60_target : tuple of 7 float or None
        The RT60s the absorption was solved for, when the room was given that way.
    """

    name: str
    dimensions: tuple[float, float, float]
    listener: tuple[float, float, float]
    absorption: tuple[tuple[float, ...], ...]
    speaker_radius: float = DEFAULT_SPEAKER_RADIUS
    air_absorption: bool = False
    order: int = DEFAULT_ORDER
    mixing_time_ms: float | None = None
    seed: int = 0
    description: str = ""
    rt60_target: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        where = f"room {shown(self.name)}: "
        dims = tuple(float(d) for d in self.dimensions)
        if len(dims) != 3 or not all(MIN_DIMENSION <= d <= MAX_DIMENSION for d in dims):
            raise RoomError(
                f"{where}dimensions {shown(self.dimensions)} must be three lengths (length, width, "
                f"height) from {MIN_DIMENSION:g} to {MAX_DIMENSION:g} m"
            )
        pos = tuple(float(p) for p in self.listener)
        if len(pos) != 3 or not _inside(np.array(pos), dims, LISTENER_CLEARANCE):
            raise RoomError(
                f"{where}the listener at {_fmt(pos)} (x from the back wall, y from the right "
                f"wall, z from the floor) is not inside the {_fmt(dims)} m room with "
                f"{LISTENER_CLEARANCE:g} m to spare on every side"
            )
        alpha = np.asarray(self.absorption, dtype=float)
        if alpha.shape != (len(SURFACES), len(BANDS_HZ)):
            raise RoomError(
                f"{where}absorption must have one row per surface ({', '.join(SURFACES)}) and "
                f"one value per band ({band_list()}), got shape {shown(alpha.shape)}"
            )
        bad = np.argwhere(~((alpha >= 0.0) & (alpha <= 1.0)))
        if bad.size:
            s, b = bad[0]
            raise RoomError(
                f"{where}absorption {float(alpha[s, b])!r} of the {SURFACES[s]} at "
                f"{BANDS_HZ[b]:g} Hz is outside 0..1"
            )
        if not (
            isinstance(self.order, (int, np.integer))
            and not isinstance(self.order, bool)
            and 0 <= self.order <= MAX_ORDER
        ):
            raise RoomError(
                f"{where}order {shown(self.order)} must be an integer from 0 to {MAX_ORDER}"
            )
        if not (is_number(self.speaker_radius) and 0 < self.speaker_radius <= max(dims)):
            raise RoomError(
                f"{where}speaker_radius {shown(self.speaker_radius)} must be a positive "
                f"distance in metres, no longer than the room ({max(dims):g} m)"
            )
        if self.mixing_time_ms is not None and not (
            is_number(self.mixing_time_ms)
            and MIN_MIXING_TIME_MS <= self.mixing_time_ms <= MAX_MIXING_TIME_MS
        ):
            raise RoomError(
                f"{where}mixing_time_ms {shown(self.mixing_time_ms)} must be "
                f"{MIN_MIXING_TIME_MS:g} to {MAX_MIXING_TIME_MS:g} ms, or left out for sqrt(V) ms"
            )
        if not (
            isinstance(self.seed, (int, np.integer))
            and not isinstance(self.seed, bool)
            and self.seed >= 0
        ):
            raise RoomError(f"{where}seed {shown(self.seed)} must be a non-negative integer")
        object.__setattr__(self, "dimensions", dims)
        object.__setattr__(self, "listener", pos)
        object.__setattr__(self, "absorption", tuple(tuple(float(v) for v in row) for row in alpha))
        object.__setattr__(self, "speaker_radius", float(self.speaker_radius))
        object.__setattr__(self, "order", int(self.order))
        object.__setattr__(self, "seed", int(self.seed))
        if self.rt60_target is not None:
            object.__setattr__(self, "rt60_target", tuple(float(t) for t in self.rt60_target))
        mean = self.mean_absorption
        for band, a in zip(BANDS_HZ, mean):
            if a <= 0.0:
                raise RoomError(
                    f"{where}nothing absorbs at {band:g} Hz (mean absorption 0), so the sound "
                    "would never die away; give some surface an absorption above 0"
                )
            if a > MAX_MEAN_ABSORPTION:
                raise RoomError(
                    f"{where}mean absorption {a:.3g} at {band:g} Hz leaves almost no "
                    f"reverberation (at most {MAX_MEAN_ABSORPTION:g}); use room 'none' for a dry "
                    "render"
                )
        for band, t in zip(BANDS_HZ, self.rt60):
            if not MIN_RT60 <= t <= MAX_RT60:
                raise RoomError(
                    f"{where}the absorption gives an RT60 of {t:.3g} s at {band:g} Hz (Eyring); "
                    f"rooms from {MIN_RT60:g} to {MAX_RT60:g} s are supported"
                )

    # -- geometry --------------------------------------------------------------------

    @property
    def volume(self) -> float:
        """Volume in m3."""
        return box_measures(self.dimensions)[0]

    @property
    def surface_area(self) -> float:
        """Total surface in m2."""
        return box_measures(self.dimensions)[1]

    @property
    def surface_areas(self) -> FloatArray:
        """Area (m2) of each surface, in :data:`SURFACES` order."""
        return box_measures(self.dimensions)[2]

    def speaker_position(
        self,
        direction: npt.ArrayLike,
        distance: float | None = None,
        *,
        label: str = "loudspeaker",
    ) -> FloatArray:
        """Room coordinates of a loudspeaker at ``direction`` (listener frame).

        Parameters
        ----------
        direction : ndarray, shape (3,)
            Unit vector, x front, y left, z up.
        distance : float, optional
            Metres from the listener; :attr:`speaker_radius` when None.
        label : str
            Named in the error message.

        Raises
        ------
        RoomError
            If the loudspeaker would stand outside the room (or within
            :data:`SPEAKER_CLEARANCE` of a surface).
        """
        r = self.speaker_radius if distance is None else float(distance)
        v = np.asarray(direction, dtype=float).reshape(3)
        pos: FloatArray = np.asarray(self.listener) + r * v / np.linalg.norm(v)
        if not _inside(pos, self.dimensions, SPEAKER_CLEARANCE):
            raise RoomError(
                f"loudspeaker {shown(label)} at {r:g} m from the listener would stand at "
                f"{_fmt(pos.tolist())}, outside room {shown(self.name)} "
                f"({_fmt(self.dimensions)} m, listener at {_fmt(self.listener)}); give the layout "
                "shorter distances or use a room with a smaller speaker_radius"
            )
        return pos

    # -- acoustics -------------------------------------------------------------------

    @property
    def alpha(self) -> FloatArray:
        """Absorption coefficients, shape (6 surfaces, 7 bands)."""
        return np.array(self.absorption)

    @property
    def reflection(self) -> FloatArray:
        """Pressure reflection coefficients ``beta = sqrt(1 - alpha)``, shape (6, 7)."""
        beta: FloatArray = np.sqrt(1.0 - self.alpha)
        return beta

    @property
    def mean_absorption(self) -> FloatArray:
        """Area-weighted mean absorption per band, shape (7,)."""
        mean: FloatArray = self.surface_areas @ self.alpha / self.surface_area
        return mean

    @property
    def air_m(self) -> FloatArray:
        """Intensity attenuation of air per metre per band (zeros without air absorption)."""
        return np.asarray(AIR_M_PER_METRE) if self.air_absorption else np.zeros(len(BANDS_HZ))

    @property
    def rt60_sabine(self) -> FloatArray:
        """Sabine reverberation time per band, seconds."""
        return sabine_rt60(self.volume, self.surface_area, self.mean_absorption, self.air_m)

    @property
    def rt60_eyring(self) -> FloatArray:
        """Eyring reverberation time per band, seconds."""
        return eyring_rt60(self.volume, self.surface_area, self.mean_absorption, self.air_m)

    @property
    def rt60(self) -> FloatArray:
        """The reverberation time the tail decays at: Eyring's, per band."""
        return self.rt60_eyring

    @property
    def room_constant(self) -> FloatArray:
        """``R = A / (1 - mean alpha)`` in m2 per band, ``A = S mean(alpha) + 4 m V``."""
        mean = self.mean_absorption
        constant: FloatArray = (self.surface_area * mean + 4.0 * self.air_m * self.volume) / (
            1.0 - mean
        )
        return constant

    @property
    def mixing_time(self) -> float:
        """Seconds after the direct sound at which the tail takes over."""
        if self.mixing_time_ms is None:
            return polack_mixing_time(self.volume)
        return self.mixing_time_ms * 1e-3

    @property
    def critical_distance(self) -> FloatArray:
        """``0.057 sqrt(V / T)`` per band in metres (Schroeder 1996), T = Eyring."""
        distance: FloatArray = 0.057 * np.sqrt(self.volume / self.rt60)
        return distance

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready description and derived figures (for reports and listings)."""
        length, width, height = self.dimensions
        x, y, z = self.listener

        def r(values: FloatArray, n: int = 4) -> list[float]:
            return [round(float(v), n) for v in values]

        return {
            "name": self.name,
            "description": self.description,
            "dimensions_m": {"length": length, "width": width, "height": height},
            "volume_m3": round(self.volume, 3),
            "surface_m2": round(self.surface_area, 3),
            "listener": {
                "to_front_wall": round(length - x, 4),
                "to_left_wall": round(width - y, 4),
                "ear_height": round(z, 4),
            },
            "speaker_radius_m": self.speaker_radius,
            "bands_hz": list(BANDS_HZ),
            "absorption": {s: list(row) for s, row in zip(SURFACES, self.absorption)},
            "mean_absorption": r(self.mean_absorption),
            "rt60_target_s": None if self.rt60_target is None else list(self.rt60_target),
            "rt60_sabine_s": r(self.rt60_sabine),
            "rt60_eyring_s": r(self.rt60_eyring),
            "rt60_used": "eyring",
            "air_absorption": self.air_absorption,
            "air_attenuation_db_per_km": r(air_attenuation_db_per_km(), 3)
            if self.air_absorption
            else None,
            "order": self.order,
            "mixing_time_ms": round(self.mixing_time * 1e3, 3),
            "mixing_time_from": "given" if self.mixing_time_ms is not None else "Polack sqrt(V) ms",
            "critical_distance_m": r(self.critical_distance, 3),
            "seed": self.seed,
        }


def is_number(value: object) -> TypeGuard[float | np.integer[Any] | np.floating[Any]]:
    """Whether ``value`` is a finite real number (not a bool)."""
    return (
        isinstance(value, (int, float, np.integer, np.floating))
        and not isinstance(value, bool)
        and math.isfinite(value)
    )


def _inside(pos: FloatArray, dims: Sequence[float], clearance: float) -> bool:
    return bool(
        np.all(np.isfinite(pos))
        and np.all(pos >= clearance)
        and np.all(pos <= np.asarray(dims) - clearance)
    )


def _fmt(values: Sequence[float]) -> str:
    return "(" + ", ".join(f"{float(v):.3g}" for v in values) + ")"


def band_list() -> str:
    """The band centres for a message: ``"125, 250, ... 8000 Hz"``."""
    return ", ".join(f"{b:g}" for b in BANDS_HZ) + " Hz"
