"""Direction conventions shared by every module.

At the edges (layouts, SOFA files, reports) directions are given in degrees:
azimuth counter-clockwise from the front, positive to the left, in (-180, 180];
elevation upwards from the horizontal plane, in [-90, 90]. This is the SOFA
(AES69) spherical convention and that of ITU-R BS.2051.

Inside, directions are unit vectors in the listener's frame: x to the front,
y to the left, z up.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

__all__ = [
    "angle_between",
    "direction_to_vector",
    "lateral_angle",
    "normalize",
    "vector_to_direction",
]

Floats = npt.NDArray[np.float64]


def direction_to_vector(azimuth: npt.ArrayLike, elevation: npt.ArrayLike) -> Floats:
    """Unit vector(s) for azimuth and elevation in degrees.

    Returns an array of shape ``(..., 3)``.
    """
    az = np.radians(np.asarray(azimuth, dtype=float))
    el = np.radians(np.asarray(elevation, dtype=float))
    return np.stack([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)], axis=-1)


def vector_to_direction(vectors: npt.ArrayLike) -> tuple[Floats, Floats]:
    """Azimuth and elevation in degrees of vectors of shape ``(..., 3)``.

    The vectors need not be unit length. Azimuth is wrapped to (-180, 180].
    """
    v = np.asarray(vectors, dtype=float)
    x, y, z = v[..., 0], v[..., 1], v[..., 2]
    az = np.degrees(np.arctan2(y, x))
    el = np.degrees(np.arctan2(z, np.hypot(x, y)))
    az = np.where(az <= -180.0, az + 360.0, az)
    return az, el


def normalize(vectors: npt.ArrayLike) -> Floats:
    """Vectors scaled to unit length (zero vectors are left as they are)."""
    v = np.asarray(vectors, dtype=float)
    n = np.linalg.norm(v, axis=-1, keepdims=True)
    unit: Floats = np.divide(v, n, out=np.zeros_like(v), where=n > 0)
    return unit


def angle_between(a: npt.ArrayLike, b: npt.ArrayLike) -> Floats:
    """Great-circle angle in degrees between direction vectors ``a`` and ``b``."""
    ua = normalize(a)
    ub = normalize(b)
    dot = np.clip(np.sum(ua * ub, axis=-1), -1.0, 1.0)
    angle: Floats = np.degrees(np.arccos(dot))
    return angle


def lateral_angle(vectors: npt.ArrayLike) -> Floats:
    """Lateral angle in degrees (0 in the median plane, +90 on the left ear axis)."""
    v = normalize(vectors)
    angle: Floats = np.degrees(np.arcsin(np.clip(v[..., 1], -1.0, 1.0)))
    return angle
