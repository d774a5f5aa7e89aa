"""An object's extent as the angles a spread panner takes: ITU-R BS.2076-2 ``width``,
``height``, ``depth`` and ``diffuse``.

BS.2076-2 gives an Objects block's extent in one of two forms (audioBlockFormat
sub-elements; ranges as the standard lists them, the axes of the cartesian form from
memory):

* **polar**: ``width``, degrees of azimuth (0 to 360), ``height``, degrees of elevation
  (0 to 360), ``depth``, a range of distance (0 to 1). Width and height are the
  angles of the spread panner (:class:`earfold.renderer.layouts.SpreadPanner`) as they
  are.
* **cartesian**: ``width``, ``depth`` and ``height`` are the object's size along X
  (right), Y (front) and Z (up), each a fraction (0 to 1) of the room cube's extent on
  that axis. The cube spans -1 to 1, so the object is a box with half-sizes
  ``(width, depth, height)`` around its position; it is turned into the angles it
  covers seen from the listener at the centre:

  - in the object's own frame (forward ``f`` towards the box's centre, left ``l``
    horizontal, up ``u``, as the spread panner builds it), the box reaches
    ``e_v = sum_i s_i |v_i|`` along each axis ``v`` (its support; ``s`` the
    half-sizes);
  - its near face lies ``r - e_f`` in front of the listener (``r`` the centre's
    distance), and spans ``2 atan2(e_l, r - e_f)`` degrees across and
    ``2 atan2(e_u, r - e_f)`` up and down; a face that reaches the listener's plane
    (``r <= e_f``) spans 180;
  - a box around the listener covers more: with ``k`` the depth of the listener inside
    the box (0 on its surface, 1 at its centre: the smallest ``1 - |c_i| / s_i`` over
    the axes), the angles grow to ``angle + k (360 - angle)``, so a box centred on the
    listener is the whole sphere (the panner takes heights above 180 as 180).

  Both steps are continuous in the position and the sizes.

``depth`` has no effect on the sound in this version: distance is not rendered (a
cartesian depth, a size along Y, does widen the angles above). ``diffuse`` (0 to 1) is the
share of the object sent to the diffuse part (:func:`earfold.renderer.layouts.diffuse_split`).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..errors import AdmError
from ._positions import ObjectPath

__all__ = ["cartesian_extent", "object_spread"]

Floats = npt.NDArray[np.float64]


def object_spread(path: ObjectPath) -> Floats:
    """An object's spread at its sampled times: ``(n, 4)`` columns width and height in
    degrees, depth, diffuse (a :class:`~earfold.renderer.engine.SourcePath`'s ``spread``).

    Polar extents pass as they are; cartesian ones are turned into angles by
    :func:`cartesian_extent`. Diffuse is clipped to 0..1, the rest to >= 0.

    Examples
    --------
    >>> from fractions import Fraction as F
    >>> from earfold.renderer.objects import ChannelFormat, ObjectBlock, ObjectChannel
    >>> block = ObjectBlock("AB_00031001_00000001", None, None, True, (0.0, 1.0, 0.0),
    ...                     False, None, 1.0, 0.5, 0.0, 0.0, 0.25)
    >>> ch = ChannelFormat("AC_00031001", "a", "Objects", (block,))
    >>> obj = ObjectChannel("AO_1001", "a", ("AO_1001",), ch, 0, "ATU_00000001", 1.0, False,
    ...                     F(0), None)
    >>> from earfold.renderer.objects import object_positions
    >>> object_spread(object_positions(obj, [0.0])).round(2).tolist()
    [[53.13, 0.0, 0.0, 0.25]]
    """
    width = np.maximum(np.asarray(path.width, dtype=np.float64), 0.0)
    height = np.maximum(np.asarray(path.height, dtype=np.float64), 0.0)
    depth = np.maximum(np.asarray(path.depth, dtype=np.float64), 0.0)
    diffuse = np.clip(np.asarray(path.diffuse, dtype=np.float64), 0.0, 1.0)
    if path.cartesian:
        width, height = cartesian_extent(path.positions, width, height, depth)
    return np.column_stack([width, height, depth, diffuse])


def cartesian_extent(
    positions: npt.ArrayLike, width: npt.ArrayLike, height: npt.ArrayLike, depth: npt.ArrayLike
) -> tuple[Floats, Floats]:
    """The angles (degrees across, degrees up and down) a cartesian object's box covers.

    Parameters
    ----------
    positions : array_like, shape (n, 3)
        ADM cartesian X (right), Y (front), Z (up), the cube spanning -1 to 1.
    width, height, depth : array_like, shape (n,) or ()
        The box's size along X, Z and Y as fractions of the cube's extent (half-sizes
        in the cube's units).

    Returns
    -------
    tuple of numpy.ndarray, shape (n,)
        Width and height in degrees, 0 to 360 (see the module's notes).
    """
    p = np.asarray(positions, dtype=np.float64).reshape(-1, 3)
    n = len(p)
    half = np.column_stack(
        [np.broadcast_to(np.asarray(a, dtype=np.float64), (n,)) for a in (depth, width, height)]
    )  # along our x (front, ADM Y), y (left, ADM -X), z (up)
    if not (np.all(np.isfinite(p)) and np.all(np.isfinite(half))) or np.any(half < 0):
        raise AdmError("cartesian extents need finite positions and sizes >= 0")
    c = np.column_stack([p[:, 1], -p[:, 0], p[:, 2]])  # the box's centre, x front, y left
    r = np.linalg.norm(c, axis=1)
    f = np.where(r[:, None] > 1e-9, c / np.maximum(r, 1e-300)[:, None], [1.0, 0.0, 0.0])
    left = np.column_stack([-f[:, 1], f[:, 0], np.zeros(n)])
    norm = np.linalg.norm(left, axis=1)
    left = np.where(norm[:, None] > 1e-9, left / np.maximum(norm, 1e-300)[:, None], [0, 1.0, 0])
    up = np.cross(f, left)

    def reach(v: Floats) -> Floats:
        support: Floats = np.sum(half * np.abs(v), axis=1)
        return support

    near = np.maximum(r - reach(f), 0.0)
    across = np.degrees(2.0 * np.arctan2(reach(left), near))
    upward = np.degrees(2.0 * np.arctan2(reach(up), near))
    with np.errstate(divide="ignore", invalid="ignore"):
        inside = np.where(half > 0, 1.0 - np.abs(c) / np.where(half > 0, half, 1.0), -1.0)
    k = np.clip(np.min(inside, axis=1), 0.0, 1.0)
    return across + k * (360.0 - across), upward + k * (360.0 - upward)
