"""Sources with an extent: VBAP gains summed over a patch of directions around the source.

:class:`SpreadPanner` gives the gains of a source that is not a point but spreads over
nearby directions (an ADM object's ``width`` and ``height``, ITU-R BS.2076-2), on the
array of a :class:`~earfold.renderer.layouts.VbapPanner`:

* **The patch.** In the source's own frame (forward ``f`` the source direction, left
  ``l`` horizontal, ``l = z x f`` normalised, up ``u = f x l``), the extent is the patch
  of the sphere between local azimuths ``-width / 2 .. width / 2`` and local elevations
  ``-height / 2 .. height / 2``; the point ``(alpha, beta)`` of the patch is
  ``cos(beta) cos(alpha) f + cos(beta) sin(alpha) l + sin(beta) u``. Its angular size is
  so the same wherever the source is (an overhead source widens as much as a frontal
  one). A width of 360 degrees is a whole ring, the great circle through the source
  that is horizontal for a source on the horizon; a width of 360 with a height of 180
  is the whole sphere. Widths above 360 are taken as 360 and heights above 180 as 180
  (BS.2076 lets both reach 360; a patch taller than 180 degrees would fold over itself).
  At a pole, where ``z x f`` vanishes, ``l`` is the y axis.
* **Samples.** Along each of the two angles, the centre (0), every multiple of
  ``step`` strictly inside the extent and its two ends, ``step`` at most half the
  array's widest gap between neighbouring loudspeakers
  (:attr:`VbapPanner.spacing_deg`) so that every triangle an extent overlaps holds
  samples; the grid is their product. Each sample has its weight in the trapezoidal
  rule over these (uneven) points times ``cos(beta)``, the patch's area element, so the
  sum is a quadrature of the patch's integral per solid angle. The rule is continuous
  in the extent: as an end passes a multiple of ``step`` a new sample appears at the
  end with no weight yet, so the gains never jump as a width or height grows (a grid
  of a fixed count per width would jump from two samples to three); as the extent
  closes, every sample closes in on the centre, so the gains reach VBAP's; at 360
  degrees of width the two ends meet at the back and make one point.
* **Summed as amplitudes.** Every sample's VBAP gains (Pulkki's eq. 8, before his
  power scaling: ``sum_i g_i l_i`` is exactly the sample's unit vector) are summed with
  those weights, and the sum is scaled to unit power, ``sum g_i^2 = 1``. This is
  multiple-direction amplitude panning (V. Pulkki, "Uniform spreading of amplitude
  panned virtual sources", IEEE WASPAA 1999; from memory). Amplitudes, not powers,
  because every channel carries the same signal: coherent channels add as amplitudes,
  and only an amplitude sum is linear in the samples, so that the gain vector
  ``sum_i g_i l_i`` (Pulkki's velocity vector) of the sum is the weighted sum of the
  samples' directions: for a patch symmetric about the source (every patch here is, in
  the source's frame) it points exactly at the source, and the extent widens the image
  without moving it. The unit-power scaling keeps the loudness of a wide source that of
  a point (the channels' energies sum to the source's, as for plain VBAP).
* **A point is plain VBAP.** Zero width and height give :meth:`VbapPanner.gains`
  exactly; an extent just above zero gives gains just beside them (the samples close in
  on the source).

Cost. Each sample's triangle is guessed from a table and checked
(:meth:`VbapPanner.summed_gains`), and its gains are added into its source's sum
without a row of ``M`` gains per sample; states that repeat (a resting source) are
worked out once per run, and an extent shared by many states (a moving source keeps its
size) is sampled once. Measured on the 50-point array (best of 15, a shared 2-core
machine): 1,000 sources in 0.35 ms as points, 2.4 ms at 30 x 15 degrees (9 samples
each), 6.3 ms at 90 x 45, 57 ms at 360 x 180 (325 samples each).

Depth (BS.2076: a range of distance) is not rendered in this version, since distance is
not: it has no effect here. Cartesian extents (fractions of the room cube) are converted
to angles before they come here (:func:`earfold.renderer.objects.object_spread`).

The diffuse share. With ``diffuse_channel=True`` the panner gives one more channel, the
last: a source with diffuse share ``d`` feeds the array with amplitude ``sqrt(1 - d)``
times its gains and that channel with ``sqrt(d)``: a power-preserving split (the direct
and diffuse parts are rendered uncorrelated, so their powers add; common practice).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import LayoutError, shown
from ._vbap import VbapPanner

__all__ = ["MAX_HEIGHT_DEG", "MAX_WIDTH_DEG", "SpreadPanner", "diffuse_split"]

#: Widest extent (degrees of local azimuth): a whole ring.
MAX_WIDTH_DEG = 360.0

#: Tallest extent (degrees of local elevation): pole to pole of the source's frame.
MAX_HEIGHT_DEG = 180.0

#: Smallest sampling step (degrees): a guard on the number of samples (a step of 1
#: degree still samples a whole sphere with 361 x 181 points).
MIN_STEP_DEG = 1.0

#: Largest sampling step (degrees), whatever the array: the quadrature of a sparse
#: layout (60 degrees between loudspeakers) still needs samples every 15 degrees or so
#: for a width to change its gains smoothly.
MAX_STEP_DEG = 15.0

#: Most distinct extents in one call whose samples are worked out once each and shared
#: by the sources that have them; past that (extents that change from state to state),
#: every source's samples are worked out for it.
_SHARED_EXTENTS = 16

#: Sample points handed to the VBAP panner at once: bounds the memory of a call with
#: many wide sources (some 30 floats of work per point).
_CHUNK_POINTS = 131072


def diffuse_split(diffuse: ArrayLike) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Amplitudes of the direct and diffuse parts of a source with diffuse share ``d``.

    ``sqrt(1 - d)`` and ``sqrt(d)``: their squares sum to 1, so a source keeps its power
    whatever its share when its two parts are rendered uncorrelated (common practice).

    Examples
    --------
    >>> direct, diffuse = diffuse_split([0.0, 0.5, 1.0])
    >>> direct.round(6).tolist(), diffuse.round(6).tolist()
    ([1.0, 0.707107, 0.0], [0.0, 0.707107, 1.0])
    """
    d = np.asarray(diffuse, dtype=np.float64)
    if not np.all(np.isfinite(d)) or np.any((d < 0) | (d > 1)):
        bad = d[~(np.isfinite(d) & (d >= 0) & (d <= 1))].reshape(-1)[0]
        raise LayoutError(f"a diffuse share must be from 0 to 1, got {shown(bad)}")
    return np.sqrt(1.0 - d), np.sqrt(d)


class SpreadPanner:
    """Gains of sources with a width and height on a VBAP array (see the module's notes).

    Parameters
    ----------
    panner : VbapPanner
        The array and its VBAP gains.
    step_deg : float, optional
        Spacing of the samples over an extent; default half the array's widest gap
        between neighbours (:attr:`VbapPanner.spacing_deg`), at most
        :data:`MAX_STEP_DEG`.
    diffuse_channel : bool, optional
        If True, :meth:`spread_gains` gives one more channel, the last: the diffuse
        share's (``sqrt(d)``), the array's gains scaled by ``sqrt(1 - d)``. If False
        (the default) the diffuse column of a spread is not used.

    Examples
    --------
    A point is plain VBAP; a ring has gains everywhere on the horizon and none above it:

    >>> import numpy as np
    >>> from earfold.renderer.geometry import direction_to_vector
    >>> from earfold.renderer.scenes import virtual_layout
    >>> vbap = VbapPanner(virtual_layout(4))
    >>> spread = SpreadPanner(vbap)
    >>> front = direction_to_vector(0.0, 0.0)
    >>> bool(np.array_equal(spread.gains(front), vbap.gains(front)))
    True
    >>> ring = spread.gains(front, width=360.0)
    >>> round(float(np.sum(ring**2)), 12), bool(np.all(ring[0, vbap.vectors[:, 2] > 0.6] == 0))
    (1.0, True)
    """

    def __init__(
        self,
        panner: VbapPanner,
        *,
        step_deg: float | None = None,
        diffuse_channel: bool = False,
    ) -> None:
        if not isinstance(panner, VbapPanner):
            raise LayoutError(f"a spread panner needs a VbapPanner, got {type(panner).__name__}")
        if step_deg is None:
            step = min(MAX_STEP_DEG, 0.5 * panner.spacing_deg)
        else:
            step = float(step_deg)
        if not (math.isfinite(step) and MIN_STEP_DEG <= step <= 90.0):
            raise LayoutError(
                f"step_deg must be from {MIN_STEP_DEG:g} to 90 degrees, got {shown(step_deg)}"
            )
        self.panner: VbapPanner = panner
        self.step_deg: float = max(step, MIN_STEP_DEG)
        self.diffuse_channel: bool = bool(diffuse_channel)

    @property
    def channels(self) -> int:
        """Width of :meth:`spread_gains`: the loudspeakers, plus one for the diffuse share."""
        return self.panner.loudspeakers + int(self.diffuse_channel)

    def gains(
        self, directions: ArrayLike, width: ArrayLike = 0.0, height: ArrayLike = 0.0
    ) -> NDArray[np.float64]:
        """Unit-power gains ``(n, M)`` of sources with an extent.

        Parameters
        ----------
        directions : array_like, shape (3,) or (n, 3)
            Source directions (any non-zero length; x front, y left, z up).
        width, height : array_like, shape () or (n,)
            The extent in degrees of local azimuth and elevation (see the module's
            notes), >= 0; above :data:`MAX_WIDTH_DEG` and :data:`MAX_HEIGHT_DEG` taken
            as those.

        Returns
        -------
        numpy.ndarray, shape (n, M)
            Non-negative, ``sum g_i^2 = 1`` per row; rows of zero extent are
            :meth:`VbapPanner.gains` exactly, and equal rows of the input give equal
            rows (each distinct source is worked out once).
        """
        d = np.asarray(directions, dtype=np.float64)
        if d.ndim == 1:
            d = d[None, :]
        if d.ndim != 2 or d.shape[1] != 3:
            raise LayoutError(f"source directions must have shape (n, 3), got {d.shape!r}")
        n = len(d)
        w = _extent(width, n, "width", MAX_WIDTH_DEG)
        h = _extent(height, n, "height", MAX_HEIGHT_DEG)
        out = np.empty((n, self.panner.loudspeakers))
        point = (w == 0.0) & (h == 0.0)
        if np.any(point):
            out[point] = self.panner.gains(d[point])
        wide = np.flatnonzero(~point)
        if len(wide):
            norms = np.linalg.norm(d[wide], axis=1)
            if not np.all(np.isfinite(norms)) or np.any(norms < 1e-12):
                bad = int(wide[np.argmax(~np.isfinite(norms) | (norms < 1e-12))])
                raise LayoutError(f"source direction {bad} is zero or not finite: {shown(d[bad])}")
            rows = np.column_stack([d[wide] / norms[:, None], w[wide], h[wide]])
            # Runs of equal rows once: a resting source's states are one row many times
            # over, and so get one computation and bit-identical gains.
            head = np.ones(len(rows), dtype=bool)
            head[1:] = np.any(rows[1:] != rows[:-1], axis=1)
            run = np.cumsum(head) - 1
            heads = rows[head]
            out[wide] = self._spread(heads[:, :3], heads[:, 3], heads[:, 4])[run]
        return out

    def spread_gains(
        self, vectors: NDArray[np.float64], spread: NDArray[np.float64]
    ) -> NDArray[Any]:
        """Gains ``(n, channels)`` of directions with spreads ``(n, 4)`` (width, height,
        depth, diffuse: a :class:`~earfold.renderer.engine.SourcePath`'s columns).

        What a :class:`~earfold.renderer.engine.PanningMixer` calls: the array's gains of
        :meth:`gains` (depth has no effect), times ``sqrt(1 - diffuse)`` and followed by
        the diffuse channel's ``sqrt(diffuse)`` when the panner has that channel.
        """
        e = np.asarray(spread, dtype=np.float64)
        if e.ndim != 2 or e.shape[1] != 4 or len(e) != len(vectors):
            raise LayoutError(
                f"spreads must have shape ({len(vectors)}, 4) (width, height, depth, "
                f"diffuse), got {e.shape!r}"
            )
        g = self.gains(vectors, e[:, 0], e[:, 1])
        if not self.diffuse_channel:
            return g
        direct, diffuse = diffuse_split(e[:, 3])
        return np.column_stack([g * direct[:, None], diffuse])

    def _spread(
        self, f: NDArray[np.float64], w: NDArray[np.float64], h: NDArray[np.float64]
    ) -> NDArray[np.float64]:
        """Summed, power-scaled gains of unit directions ``f`` with extents ``w``, ``h``."""
        step = self.step_deg
        # The source's frame: l = z x f (horizontal, to the source's left), u = f x l.
        left = np.column_stack([-f[:, 1], f[:, 0], np.zeros(len(f))])
        norm = np.linalg.norm(left, axis=1)
        left = np.where(norm[:, None] > 1e-9, left / np.maximum(norm, 1e-300)[:, None], 0.0)
        left[norm <= 1e-9] = (0.0, 1.0, 0.0)
        frames = np.stack([f, left, np.cross(f, left)], axis=1)  # (n, 3, 3): f, l, u
        total = np.zeros((len(f), self.panner.loudspeakers))
        # Width and height as one complex key: a 1-D sort, cheaper than rows'.
        extents, which = np.unique(w + 1j * h, return_inverse=True)
        which = which.reshape(-1)
        if len(extents) <= _SHARED_EXTENTS:
            # Few extents (a moving source keeps its size): each one's samples in its own
            # frame worked out once, then turned to every source that has it.
            for k, key in enumerate(extents):
                rows = np.flatnonzero(which == k)
                local, weight = _patch(np.array([key.real]), np.array([key.imag]), step)
                per = max(1, _CHUNK_POINTS // len(weight))
                for start in range(0, len(rows), per):
                    part = rows[start : start + per]
                    o = np.repeat(part, len(weight))
                    q = np.einsum("pk,pkj->pj", np.tile(local, (len(part), 1)), frames[o])
                    owner = np.repeat(np.arange(len(part)), len(weight))
                    total[part] = self.panner.summed_gains(
                        q, owner, np.tile(weight, len(part)), len(part)
                    )
        else:
            # Sources in groups whose samples fit one chunk (a single wider one alone).
            counts = _nodes(0.5 * w, step) * _nodes(0.5 * h, step)
            starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
            first = 0
            while first < len(f):
                end = starts[first] + _CHUNK_POINTS
                last = max(int(np.searchsorted(starts, end, side="right")), first + 1)
                o = np.repeat(np.arange(first, last), counts[first:last])
                local, weight = _patch(w[first:last], h[first:last], step)
                q = np.einsum("pk,pkj->pj", local, frames[o])
                total[first:last] = self.panner.summed_gains(q, o - first, weight, last - first)
                first = last
        total /= np.linalg.norm(total, axis=1, keepdims=True)
        return total

    def __repr__(self) -> str:
        extra = ", diffuse channel" if self.diffuse_channel else ""
        return f"SpreadPanner({self.panner!r}, step {self.step_deg:.3g} deg{extra})"


def _patch(
    w: NDArray[np.float64], h: NDArray[np.float64], step: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """The samples of extents ``w`` by ``h`` in their sources' own frames, source after
    source: unit vectors ``(P, 3)`` (forward, left, up components) and weights ``(P,)``."""
    na, ne = _nodes(0.5 * w, step), _nodes(0.5 * h, step)
    counts = na * ne
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    o = np.repeat(np.arange(len(w)), counts)
    within = np.arange(len(o)) - starts[o]
    je, ja = np.divmod(within, na[o])
    alpha, wa = _rule(ja, na[o], 0.5 * w[o], step)
    beta, we = _rule(je, ne[o], 0.5 * h[o], step)
    cb = np.cos(beta)
    local = np.stack([cb * np.cos(alpha), cb * np.sin(alpha), np.sin(beta)], axis=1)
    weight: NDArray[np.float64] = wa * we * cb
    return local, weight


def _nodes(half_deg: NDArray[np.float64], step: float) -> NDArray[np.int64]:
    """Samples over ``-half .. half``: the two ends, 0 and every multiple of ``step``
    strictly inside (one sample, the centre, where ``half`` is 0)."""
    inside = np.maximum(np.ceil(half_deg / step - 1e-12).astype(np.int64) - 1, 0)
    nodes: NDArray[np.int64] = np.where(half_deg > 0, 2 * inside + 3, 1)
    return nodes


def _rule(
    index: NDArray[np.int64], count: NDArray[np.int64], half_deg: NDArray[np.float64], step: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Angle (radians) and trapezoidal weight (degrees) of sample ``index`` of
    :func:`_nodes`'s ``count``: the ends, then the multiples of ``step`` between them."""

    def at(j: NDArray[np.int64]) -> NDArray[np.float64]:
        lattice = (j - (count - 1) // 2) * step
        position: NDArray[np.float64] = np.where(
            j == 0, -half_deg, np.where(j == count - 1, half_deg, lattice)
        )
        return position

    position = at(index)
    before = at(np.maximum(index - 1, 0))
    after = at(np.minimum(index + 1, count - 1))
    weight = np.where(count > 1, 0.5 * (after - before), 1.0)
    return np.radians(position), weight


def _extent(value: ArrayLike, n: int, name: str, largest: float) -> NDArray[np.float64]:
    """A width or height per source, checked, clipped to its largest value."""
    v = np.asarray(value, dtype=np.float64)
    if v.ndim == 0:
        v = np.full(n, float(v))
    if v.shape != (n,):
        raise LayoutError(f"{name} must be one number or one per direction ({n}), got {v.shape!r}")
    if not np.all(np.isfinite(v)) or np.any(v < 0):
        bad = v[~(np.isfinite(v) & (v >= 0))][0]
        raise LayoutError(f"{name} must be a finite number of degrees >= 0, got {shown(bad)}")
    clipped: NDArray[np.float64] = np.minimum(v, largest)
    return clipped
