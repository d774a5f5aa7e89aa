"""Rotation of a scene: real spherical-harmonic rotation matrices.

A rotation of the sound field by a 3 x 3 matrix ``R`` (a plane wave from ``d`` is heard
from ``R d``) acts on the harmonics of each degree by its own ``(2n + 1)``-square matrix,
built from the first-degree one by the recursion of Ivanic and Ruedenberg (J. Phys. Chem.
100 (1996) 6342, with the correction of J. Phys. Chem. A 102 (1998) 9099). The matrices
are the same for SN3D and N3D (they differ by a factor per degree), so the result applies
to AmbiX scenes as they are: ``encode(R d) == rotation_matrix(...) @ encode(d)``.

Angles (degrees), applied to the scene in this order: roll, then pitch, then yaw.

* yaw turns the scene about the vertical axis, counter-clockwise seen from above: a source
  at azimuth ``a`` is heard at ``a + yaw``;
* pitch turns it about the left-right axis so that positive pitch lifts the front: a source
  straight ahead is heard at elevation ``+pitch``;
* roll turns it about the front-back axis so that positive roll lifts the left: a source
  at the left (azimuth 90) is heard at elevation ``+roll``.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt

from ..errors import SceneError, shown
from ._harmonics import check_order

__all__ = ["rotation_matrix", "scene_rotation", "sh_rotation"]

FloatArray = npt.NDArray[np.float64]


def scene_rotation(yaw: float = 0.0, pitch: float = 0.0, roll: float = 0.0) -> FloatArray:
    """The 3 x 3 matrix that moves a direction vector as the scene turns (see module).

    Examples
    --------
    >>> import numpy as np
    >>> np.round(scene_rotation(yaw=90.0) @ [1.0, 0.0, 0.0], 12)  # front -> left
    array([0., 1., 0.])
    >>> np.round(scene_rotation(pitch=90.0) @ [1.0, 0.0, 0.0], 12)  # front -> up
    array([0., 0., 1.])
    """
    for name, value in (("yaw", yaw), ("pitch", pitch), ("roll", roll)):
        if not isinstance(value, (int, float, np.number)) or not math.isfinite(float(value)):
            raise SceneError(
                f"rotation {name} must be a finite number of degrees, got {shown(value)}"
            )
    cy, sy = math.cos(math.radians(yaw)), math.sin(math.radians(yaw))
    cp, sp = math.cos(math.radians(pitch)), math.sin(math.radians(pitch))
    cr, sr = math.cos(math.radians(roll)), math.sin(math.radians(roll))
    about_z = np.array([[cy, -sy, 0.0], [sy, cy, 0.0], [0.0, 0.0, 1.0]])
    # Front (x) towards up (z): the right-hand rotation about +y by -pitch.
    about_y = np.array([[cp, 0.0, -sp], [0.0, 1.0, 0.0], [sp, 0.0, cp]])
    # Left (y) towards up (z): the right-hand rotation about +x by +roll.
    about_x = np.array([[1.0, 0.0, 0.0], [0.0, cr, -sr], [0.0, sr, cr]])
    result: FloatArray = about_z @ about_y @ about_x
    return result


def _band_one(rotation: FloatArray) -> FloatArray:
    # First-degree harmonics are (Y, Z, X) = (y, z, x): permute the Cartesian matrix.
    perm = [1, 2, 0]
    result: FloatArray = rotation[np.ix_(perm, perm)]
    return result


def sh_rotation(rotation: npt.ArrayLike, degree: int) -> FloatArray:
    """Block-diagonal real-harmonic rotation up to ``degree`` for a 3 x 3 rotation matrix.

    Ivanic and Ruedenberg's recursion (1996, corrected 1998): the degree-``l`` block from
    the degree-``l-1`` block and the first-degree one, through their functions
    ``u, v, w`` (coefficients) and ``U, V, W`` (built from ``P``).

    Returns
    -------
    ndarray, shape ((degree + 1)**2, (degree + 1)**2)
    """
    r = np.asarray(rotation, dtype=float)
    if r.shape != (3, 3) or not np.allclose(r @ r.T, np.eye(3), atol=1e-9):
        raise SceneError(f"not a 3 x 3 rotation matrix: {shown(r)}")
    if np.linalg.det(r) < 0:
        raise SceneError("a reflection is not a rotation (determinant -1)")
    size = (degree + 1) ** 2
    out = np.zeros((size, size))
    out[0, 0] = 1.0
    if degree == 0:
        return out
    r1 = _band_one(r)
    out[1:4, 1:4] = r1
    prev = r1  # indices: [m + deg - 1, m' + deg - 1] for degree deg - 1

    def p(i: int, deg: int, a: int, b: int) -> float:
        # The helper P_i^deg(a, b) of the recursion; r1 is indexed by i + 1, prev by (. + deg - 1).
        ri1, rim1, ri0 = r1[i + 1, 2], r1[i + 1, 0], r1[i + 1, 1]
        if b == deg:
            return float(ri1 * prev[a + deg - 1, 2 * deg - 2] - rim1 * prev[a + deg - 1, 0])
        if b == -deg:
            return float(ri1 * prev[a + deg - 1, 0] + rim1 * prev[a + deg - 1, 2 * deg - 2])
        return float(ri0 * prev[a + deg - 1, b + deg - 1])

    for deg in range(2, degree + 1):
        block = np.zeros((2 * deg + 1, 2 * deg + 1))
        for m in range(-deg, deg + 1):
            am = abs(m)
            d0 = 1.0 if m == 0 else 0.0
            for n in range(-deg, deg + 1):
                denom = (
                    float((deg + n) * (deg - n)) if abs(n) < deg else float(2 * deg * (2 * deg - 1))
                )
                u = math.sqrt((deg + m) * (deg - m) / denom)
                v = 0.5 * math.sqrt((1 + d0) * (deg + am - 1) * (deg + am) / denom) * (1 - 2 * d0)
                w = -0.5 * math.sqrt((deg - am - 1) * (deg - am) / denom) * (1 - d0)
                value = 0.0
                if u:
                    value += u * p(0, deg, m, n)
                if v:
                    if m == 0:
                        big_v = p(1, deg, 1, n) + p(-1, deg, -1, n)
                    elif m > 0:
                        d1 = 1.0 if m == 1 else 0.0
                        big_v = p(1, deg, m - 1, n) * math.sqrt(1 + d1) - p(-1, deg, -m + 1, n) * (
                            1 - d1
                        )
                    else:
                        d1 = 1.0 if m == -1 else 0.0
                        big_v = p(1, deg, m + 1, n) * (1 - d1) + p(-1, deg, -m - 1, n) * math.sqrt(
                            1 + d1
                        )
                    value += v * big_v
                if w:
                    if m > 0:
                        big_w = p(1, deg, m + 1, n) + p(-1, deg, -m - 1, n)
                    else:
                        big_w = p(1, deg, m - 1, n) - p(-1, deg, -m + 1, n)
                    value += w * big_w
                block[m + deg, n + deg] = value
        start = deg * deg
        out[start : start + 2 * deg + 1, start : start + 2 * deg + 1] = block
        prev = block
    return out


def rotation_matrix(
    order: int, yaw: float = 0.0, pitch: float = 0.0, roll: float = 0.0
) -> FloatArray:
    """The ``(order + 1)**2``-square matrix that turns an AmbiX scene (see module for angles).

    ``rotated = rotation_matrix(order, yaw, pitch, roll) @ scene`` with channels as rows,
    or ``signal @ matrix.T`` for frames x channels.

    Examples
    --------
    >>> import numpy as np
    >>> from earfold.renderer.scenes import encode
    >>> front, left = np.array([1.0, 0.0, 0.0]), np.array([0.0, 1.0, 0.0])
    >>> bool(np.allclose(rotation_matrix(3, yaw=90.0) @ encode(front, 3), encode(left, 3)))
    True
    """
    return sh_rotation(scene_rotation(yaw, pitch, roll), check_order(order))
