"""Vector base amplitude panning in three dimensions.

:class:`VbapPanner` gives the gains with which a source direction is panned onto an array
of loudspeaker (or virtual loudspeaker) directions, after V. Pulkki, "Virtual sound source
positioning using vector base amplitude panning", *J. Audio Eng. Soc.* 45(6), 1997:

* the array's unit vectors are triangulated by their convex hull (each hull facet is a
  loudspeaker triplet, Pulkki's section 3.1 asks for non-overlapping triangles);
* the active triangle of a source direction ``p`` is the facet its ray from the listener
  crosses (all three of its gains are then non-negative);
* the triangle's gains are ``g = p^T L^-1`` (Pulkki's eq. 8), ``L`` holding the three
  loudspeaker vectors as rows, and are scaled to unit power, ``sum g_i^2 = 1`` (eq. 10);
* ``sum_i g_i l_i`` is then parallel to ``p``: the gain vector reproduces the direction.

Arrays with holes. An array with no loudspeaker near a pole (a horizontal ring, or a
layout with no loudspeakers below the horizon) does not surround the listener, and its
hull has no triangle for directions in the hole. As is common practice, a *virtual*
point is added at such a pole (when no loudspeaker lies within :data:`POLE_GAP_DEG` of
it); the triangulation uses it like a loudspeaker, and its gain is then shared
equally (amplitude ``g / n``) among the ``n`` real loudspeakers joined to it by a hull
edge, before the whole vector is scaled to unit power again. A source in the hole is so
reproduced by the edge of the array nearest to it, continuously: gains of a path that
crosses into the hole change smoothly. Arrays that leave any other direction uncovered
(all loudspeakers in front, say) are refused: 3-D VBAP has no triangle behind them.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import LayoutError, shown
from ..geometry import angle_between

__all__ = ["POLE_GAP_DEG", "VbapPanner"]

#: A pole farther than this (degrees) from every loudspeaker gets a virtual point. 70
#: degrees adds the nadir to the BS.2051 layouts with no loudspeaker below the horizon and
#: both poles to horizontal-only ones, while a layout whose upper ring sits at 30-45
#: degrees of elevation (the pole 45-60 degrees away) keeps its own triangles over the top.
POLE_GAP_DEG = 70.0

#: Loudspeakers closer than this (degrees) are one direction twice: no triangle between.
MIN_SEPARATION_DEG = 0.01

#: Most loudspeaker directions a panner takes (a dense virtual array has a few hundred).
MAX_POINTS = 4096

#: Gains (of a triangle's, before scaling) at or below this are zeros.
_ZERO_GAIN = 1e-12

#: Spacing (degrees) of the grid whose points' triangles :meth:`VbapPanner.summed_gains`
#: tries first: fine against any triangle (a 50-point array's are 25-40 degrees across),
#: so most guesses hold, and coarse enough to build in some 10 ms (10,300 points).
_GUESS_STEP_DEG = 2.0

#: Triangles looked at per direction: the facet hit first and any sharing its plane.
_COPLANAR_CANDIDATES = 8

_POLES = np.array([[0.0, 0.0, 1.0], [0.0, 0.0, -1.0]])


class VbapPanner:
    """VBAP gains of source directions on one array (Pulkki 1997).

    Parameters
    ----------
    vectors : array_like, shape (M, 3)
        The loudspeaker directions (x front, y left, z up); normalised here.
    pole_gap_deg : float, optional
        A pole with no loudspeaker within this angle gets a virtual point whose gain is
        shared among its neighbours (see the module's notes). Default
        :data:`POLE_GAP_DEG`.

    Attributes
    ----------
    vectors : numpy.ndarray, shape (M, 3)
        The loudspeaker unit vectors.
    virtual : numpy.ndarray, shape (V, 3)
        The virtual points added at the poles (``V`` is 0, 1 or 2).
    triangles : numpy.ndarray, shape (F, 3)
        The triangulation, indices into ``vectors`` followed by ``virtual``.

    Examples
    --------
    A source on a loudspeaker gets gain 1 there; one between two gets equal gains:

    >>> import numpy as np
    >>> from earfold.renderer.geometry import direction_to_vector
    >>> ring = direction_to_vector(np.array([0.0, 90.0, 180.0, -90.0]), np.zeros(4))
    >>> panner = VbapPanner(ring)
    >>> np.round(panner.gains(direction_to_vector(90.0, 0.0)), 6).tolist()
    [[0.0, 1.0, 0.0, 0.0]]
    >>> np.round(panner.gains(direction_to_vector(45.0, 0.0)) ** 2, 6).tolist()
    [[0.5, 0.5, 0.0, 0.0]]
    """

    def __init__(self, vectors: ArrayLike, *, pole_gap_deg: float = POLE_GAP_DEG) -> None:
        from scipy.spatial import ConvexHull, QhullError  # only where a panner is built

        v = np.asarray(vectors, dtype=np.float64)
        if v.ndim != 2 or v.shape[1] != 3 or not 3 <= v.shape[0] <= MAX_POINTS:
            raise LayoutError(
                f"VBAP needs loudspeaker directions of shape (M, 3) with 3 <= M <= "
                f"{MAX_POINTS}, got shape {v.shape!r}"
            )
        if not np.all(np.isfinite(v)):
            raise LayoutError("VBAP loudspeaker directions must be finite numbers")
        norms = np.linalg.norm(v, axis=1)
        if np.any(norms < 1e-12):
            raise LayoutError(
                f"VBAP loudspeaker direction {int(np.argmin(norms))} is the zero vector"
            )
        if not 0.0 < pole_gap_deg <= 180.0:
            raise LayoutError(f"pole_gap_deg must be in (0, 180], got {shown(pole_gap_deg)}")
        v = v / norms[:, None]
        cosines = np.clip(v @ v.T, -1.0, 1.0)
        np.fill_diagonal(cosines, -1.0)
        i, j = np.unravel_index(int(np.argmax(cosines)), cosines.shape)
        if np.degrees(np.arccos(cosines[i, j])) < MIN_SEPARATION_DEG:
            raise LayoutError(
                f"VBAP loudspeakers {int(i)} and {int(j)} point the same way; each direction "
                "may appear once"
            )
        gaps = np.min(angle_between(_POLES[:, None, :], v[None, :, :]), axis=1)
        virtual = _POLES[gaps > pole_gap_deg]
        points = np.vstack([v, virtual])
        try:
            hull = ConvexHull(points)
        except QhullError:
            hull = None
        # The listener must be strictly inside the hull: every facet's plane n.x + b = 0
        # with b < 0 (a margin keeps facets through the origin, which cannot pan, out).
        if hull is None or not np.all(hull.equations[:, 3] < -1e-6):
            raise LayoutError(
                f"VBAP needs loudspeakers all around the listener; these {len(v)} directions "
                "(with virtual points at uncovered poles) leave a side with no triangle, "
                "e.g. nothing behind or nothing on one side"
            )
        self.vectors: NDArray[np.float64] = v
        self.virtual: NDArray[np.float64] = virtual
        self.triangles: NDArray[np.intp] = np.asarray(hull.simplices, dtype=np.intp)
        self._planes: NDArray[np.float64] = hull.equations[:, :3] / -hull.equations[:, 3:4]
        # Columns of each triangle's matrix are its vertices: g = inverse @ p (eq. 8).
        self._inverse: NDArray[np.float64] = np.linalg.inv(
            np.transpose(points[self.triangles], (0, 2, 1))
        )
        self._share = _sharing_matrix(len(v), len(virtual), self.triangles)
        self._guess_grid: _GuessGrid | None = None
        self._guesses: NDArray[np.intp] | None = None

    @property
    def loudspeakers(self) -> int:
        """Number of real loudspeakers M (the gains' width)."""
        return int(self.vectors.shape[0])

    def gains(self, directions: ArrayLike, *, unit_power: bool = True) -> NDArray[np.float64]:
        """Unit-power gains of each source direction on the loudspeakers.

        Parameters
        ----------
        directions : array_like, shape (3,) or (n, 3)
            Source directions (any non-zero length).
        unit_power : bool, optional
            True (the default): scaled so that ``sum g_i^2 = 1`` (Pulkki's eq. 10).
            False: the gains of Pulkki's eq. 8 for the unit vector ``p`` as they are, so
            that ``sum_i g_i l_i = p`` exactly where real loudspeakers cover ``p`` (a
            virtual point's share breaks the equality in a hole); sums of such gains
            over several directions keep the sum of the directions (the spread panner's
            use).

        Returns
        -------
        numpy.ndarray, shape (n, M)
            Non-negative gains, ``sum g_i^2 = 1`` per row when ``unit_power``; at most
            three non-zero in the covered part of the sphere (a virtual point's share
            adds its neighbours).
        """
        d = np.asarray(directions, dtype=np.float64)
        if d.ndim == 1:
            d = d[None, :]
        if d.ndim != 2 or d.shape[1] != 3:
            raise LayoutError(f"source directions must have shape (n, 3), got {d.shape!r}")
        norms = np.linalg.norm(d, axis=1)
        if not np.all(np.isfinite(norms)) or np.any(norms < 1e-12):
            bad = int(np.argmax(~np.isfinite(norms) | (norms < 1e-12)))
            raise LayoutError(f"source direction {bad} is zero or not finite: {shown(d[bad])}")
        p = d / norms[:, None]
        facet, g = self._active(p)
        # Rounding on an edge or a vertex leaves gains of some 1e-17 either side of 0:
        # zeros, so that a source on a loudspeaker feeds that loudspeaker alone.
        g = np.where(g > _ZERO_GAIN, g, 0.0)
        full = np.zeros((len(p), self.loudspeakers + len(self.virtual)))
        np.put_along_axis(full, self.triangles[facet], g, axis=1)
        out: NDArray[np.float64] = full @ self._share if len(self.virtual) else full
        if unit_power:
            out /= np.linalg.norm(out, axis=1, keepdims=True)
        return out

    @property
    def spacing_deg(self) -> float:
        """The longest edge of the triangulation in degrees: the widest gap between
        neighbouring loudspeakers (virtual pole points included)."""
        points = np.vstack([self.vectors, self.virtual])
        tri = points[self.triangles]  # (F, 3, 3)
        edges = np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [2, 0]]])
        return float(np.max(angle_between(edges[:, 0], edges[:, 1])))

    def summed_gains(
        self,
        directions: NDArray[np.float64],
        owners: NDArray[np.intp],
        weights: NDArray[np.float64],
        count: int,
    ) -> NDArray[np.float64]:
        """Weighted sums of the gains of many directions (Pulkki's eq. 8, unscaled).

        ``out[k] = sum over i with owners[i] == k of weights[i] * gains(p_i,
        unit_power=False)``: what a source spread over many sample directions needs,
        without the ``(n, M)`` rows of each sample. The active triangle of each unit
        vector is first guessed from a table over a grid of directions
        (:data:`_GUESS_STEP_DEG` apart, built on the first call) and kept where all its
        gains are non-negative, which holds only for the triangle that contains the
        direction; the few guesses that miss (directions near an edge) are searched for
        as :meth:`gains` does. The gains are then the same.

        Parameters
        ----------
        directions : numpy.ndarray, shape (n, 3)
            Unit vectors (not checked: the caller makes them).
        owners : numpy.ndarray of int, shape (n,)
            The sum each direction adds to, ``0 <= owners < count``.
        weights : numpy.ndarray, shape (n,)
            Each direction's weight.
        count : int
            Number of sums.

        Returns
        -------
        numpy.ndarray, shape (count, M)
        """
        p = np.asarray(directions, dtype=np.float64)
        facet = self._guess(p)
        g = np.einsum("nij,nj->ni", self._inverse[facet], p)
        missed = np.flatnonzero(g.min(axis=1) < -_ZERO_GAIN)
        if len(missed):
            facet[missed], g[missed] = self._active(p[missed])
        g = np.where(g > _ZERO_GAIN, g, 0.0) * weights[:, None]
        width = self.loudspeakers + len(self.virtual)
        slots = owners[:, None] * width + self.triangles[facet]
        sums = np.bincount(slots.reshape(-1), g.reshape(-1), minlength=count * width)
        out: NDArray[np.float64] = np.asarray(sums, dtype=np.float64).reshape(count, width)
        return out @ self._share if len(self.virtual) else out

    def _guess(self, p: NDArray[np.float64]) -> NDArray[np.intp]:
        """The active triangle at the grid point nearest each unit vector."""
        if self._guesses is None:
            self._guess_grid = _GuessGrid(_GUESS_STEP_DEG)
            centres = self._guess_grid.vectors()
            self._guesses = np.concatenate(
                [self._active(centres[i : i + 8192])[0] for i in range(0, len(centres), 8192)]
            )
        assert self._guess_grid is not None
        found: NDArray[np.intp] = self._guesses[self._guess_grid.nearest(p)]
        return found.copy()

    def _active(self, p: NDArray[np.float64]) -> tuple[NDArray[np.intp], NDArray[np.float64]]:
        """The active triangle of each direction and its three gains before scaling.

        The ray along ``p`` leaves the hull through the facet whose plane it meets first:
        the largest ``p . n / -b`` (all planes have ``b < 0``). Where several triangles
        share that plane (four loudspeakers on one plane, such as a square of height
        loudspeakers, are split into two triangles), the one whose smallest gain is
        largest holds the direction: Pulkki's rule that the active triangle has no
        negative gain.
        """
        scores = p @ self._planes.T  # (n, F)
        # The facet hit first holds the direction unless it shares its plane with
        # another one and is the wrong one of them (one of its gains then negative):
        # only those directions need the candidates below.
        facet = np.argmax(scores, axis=1)
        gains = np.einsum("nij,nj->ni", self._inverse[facet], p)
        doubtful = np.flatnonzero(gains.min(axis=1) < -_ZERO_GAIN)
        if len(doubtful):
            facet[doubtful], gains[doubtful] = self._coplanar(p[doubtful], scores[doubtful])
        return facet, gains

    def _coplanar(
        self, p: NDArray[np.float64], scores: NDArray[np.float64]
    ) -> tuple[NDArray[np.intp], NDArray[np.float64]]:
        """The active triangle among the facets sharing the plane hit first."""
        k = min(_COPLANAR_CANDIDATES, scores.shape[1])
        candidates = np.argpartition(-scores, k - 1, axis=1)[:, :k]  # (n, k)
        best = np.take_along_axis(scores, candidates, axis=1)
        gains = np.einsum("nkij,nj->nki", self._inverse[candidates], p)  # (n, k, 3)
        on_plane = best >= best.max(axis=1, keepdims=True) - 1e-9
        merit = np.where(on_plane, gains.min(axis=2), -np.inf)
        pick = np.argmax(merit, axis=1)
        rows = np.arange(len(p))
        return candidates[rows, pick], gains[rows, pick]

    def __repr__(self) -> str:
        return (
            f"VbapPanner({self.loudspeakers} loudspeakers, {len(self.virtual)} virtual, "
            f"{len(self.triangles)} triangles)"
        )


class _GuessGrid:
    """Rings of points every ``step`` degrees of elevation and of arc along each ring;
    the nearest point of a unit vector in closed form (ring by elevation, point by
    azimuth)."""

    def __init__(self, step_deg: float) -> None:
        rings = int(round(180.0 / step_deg)) + 1
        self.elevation_step = 180.0 / (rings - 1)
        self.elevations = -90.0 + self.elevation_step * np.arange(rings)
        cos = np.cos(np.radians(self.elevations))
        self.counts = np.maximum(1, np.round(360.0 * cos / step_deg).astype(np.int64))
        self.offsets = np.concatenate([[0], np.cumsum(self.counts)[:-1]])

    def nearest(self, p: NDArray[np.float64]) -> NDArray[np.int64]:
        el = np.degrees(np.arcsin(np.clip(p[:, 2], -1.0, 1.0)))
        az = np.degrees(np.arctan2(p[:, 1], p[:, 0]))
        ring = np.clip(np.round((el + 90.0) / self.elevation_step).astype(np.int64), 0, None)
        ring = np.minimum(ring, len(self.counts) - 1)
        count = self.counts[ring]
        index: NDArray[np.int64] = (
            self.offsets[ring] + np.round(az * count / 360.0).astype(np.int64) % count
        )
        return index

    def vectors(self) -> NDArray[np.float64]:
        ring = np.repeat(np.arange(len(self.counts)), self.counts)
        point = np.arange(int(self.counts.sum())) - self.offsets[ring]
        el = np.radians(self.elevations[ring])
        az = np.radians(point * 360.0 / self.counts[ring])
        return np.stack([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)], axis=1)


def _sharing_matrix(real: int, virtual: int, triangles: NDArray[np.intp]) -> NDArray[Any]:
    """(real + virtual, real): identity for the loudspeakers, each virtual point's gain
    shared equally among the loudspeakers that share a triangle edge with it."""
    share = np.zeros((real + virtual, real))
    share[:real] = np.eye(real)
    for k in range(virtual):
        point = real + k
        around = {int(i) for tri in triangles if point in tri for i in tri if i < real}
        if not around:  # a virtual point always has real neighbours on a closed hull
            raise LayoutError("a virtual pole point has no neighbouring loudspeaker")
        share[point, sorted(around)] = 1.0 / len(around)
    return share
