"""Moving sources to two ears: time-varying HRIR filters, crossfaded, in blocks.

:class:`MovingSourceEngine` renders ``K`` mono sources, each with its direction and gain
over time (a :class:`SourcePath`), to two ears with filter pairs that follow the
directions. It keeps the block structure of the fixed-filter engine:

* **Overlap-save in hops.** The filter pairs (``L`` taps) and one hop of ``S`` new frames
  fit one transform of ``N >= S + L - 1`` points (:func:`scipy.fft.next_fast_len`). For
  each hop, the last ``N`` input frames of every source are transformed, all sources and
  several hops in one batched FFT.
* **Filter updates every hop.** The hop is at most :data:`MAX_UPDATE_SECONDS` (10 ms;
  480 frames at 48 kHz). Filter state ``j`` belongs to frame ``j S``: during hop ``j`` the
  output crossfades from the output of state ``j``'s filters to that of state ``j + 1``'s,
  both computed in the frequency domain over the same input window, with an equal-gain
  raised-cosine ramp ``w(t) = (1 - cos(pi t / S)) / 2`` (common practice for switching
  time-varying FIR filters without clicks). The filter in effect at frame ``t`` is so a
  blend of the two states around ``t``, centred on the path, with no lag.
* **Summed before the inverse transforms.** Every source's products with its old and new
  filter spectra are summed over sources per ear first (the ramp is shared by all), so a
  hop costs ``K`` forward transforms, ``4 K`` spectral products and only four inverse
  transforms whatever ``K``.
* **Gains** (an ADM object's gain, say) are applied per filter state, on the same ramp:
  the output of state ``j`` is scaled by the path's gain at frame ``j S``, so a gain
  changes as smoothly as a direction.
* **Silence costs nothing.** A source whose input is zero over a batch's windows, or
  whose gain is 0 in all of the batch's states, is left out of that batch's transforms
  and sums (it would add exact zeros).

Where filter pairs come from. A :class:`PairTable` takes a function from directions to
pairs (``pairs(vectors) -> (n, 2, L)``, e.g. an HRIR set's bulk lookup) and keeps each
pair's spectrum, computed once (one table serves any number of engines):

* a direction a source *rests* at (the same at an update as at the one before or after:
  a static source, or an object between movements) gets its own exact pair, so a static
  source renders exactly as the fixed pair for its direction does;
* a direction *in motion* is resolved to the nearest point of a fixed grid on the sphere
  (rings every :data:`GRID_STEP_DEG` degrees of elevation, points every
  :data:`GRID_STEP_DEG` degrees of arc along each ring), whose pairs are computed the
  first time a source passes. The snap moves a direction by at most about 1.5 degrees
  at the default step, within a listener's localisation blur (about 1 to 4 degrees in
  front, more to the sides: J. Blauert, *Spatial Hearing*, 1997, section 2.1; values
  from memory), and each step between neighbouring grid pairs is crossfaded like any
  other update.

An optional post filter (``post_filter``), common to every source, is applied once to
the two ears' sum: an equalisation shared by all directions (the diffuse-field inverse)
so costs one two-channel convolution instead of lengthening every pair. For a resting
source this equals filtering its pair; while filters or gains change, the equalisation
follows the change instead of preceding it (a time-varying filter does not commute with
a fixed one), which smooths it a little more.

Memory is bounded: the engine holds its input window, one batch of hops and the table,
whose grid part has at most :attr:`PairTable.grid_points` entries and whose
exact part at most :data:`MAX_EXACT_PAIRS` (past that, resting directions snap to the grid
as moving ones do).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, Protocol, runtime_checkable

import numpy as np
import scipy.fft
from numpy.typing import ArrayLike, NDArray

from ..errors import AudioError, HrirError, shown
from .convolution import BinauralConvolver, FloatArray, RealArray, TransformPlan

__all__ = [
    "GRID_STEP_DEG",
    "GRID_VERSION",
    "MAX_EXACT_PAIRS",
    "MAX_UPDATE_SECONDS",
    "MovingSourceEngine",
    "PairFunction",
    "PairTable",
    "SPREAD_COLUMNS",
    "SourcePath",
    "update_hop",
]

#: Longest interval between filter updates (seconds): the hop is at most this long.
MAX_UPDATE_SECONDS = 0.010

#: Spacing (degrees) of the direction grid that moving directions snap to.
GRID_STEP_DEG = 2.0

#: Version of the direction grid's layout (rings, points, their order): part of the key
#: of a cached grid (:meth:`PairTable.grid_pairs`); bump it when the grid changes.
GRID_VERSION = 1

#: Most resting directions with exact pairs of their own in one engine's table.
MAX_EXACT_PAIRS = 4096

#: Hops transformed together in one batch: enough to spread numpy's per-call cost, few
#: enough that a batch's spectra (16 sources, 16 hops: about 3 MB each) stay near the
#: cache.
BATCH_HOPS = 16

#: Filter states worked out ahead at a time (about 2.6 s at 48 kHz): the paths read and
#: the pairs computed in bulk, which costs far less per direction than a few at a time.
LOOKAHEAD_HOPS = 256

#: Partition bounds (frames) of the post filter's uniformly partitioned convolution.
MIN_POST_PARTITION = 1024
MAX_POST_PARTITION = 8192

#: The columns of a :class:`SourcePath`'s optional ``spread``: angular width and height
#: (degrees, in the source's own frame), depth (kept, not rendered) and the diffuse share
#: (0 to 1).
SPREAD_COLUMNS = ("width", "height", "depth", "diffuse")

#: Directions to filter pairs: ``(n, 3)`` unit vectors to ``(n, 2, L)`` impulse responses.
PairFunction = Callable[[NDArray[np.float64]], NDArray[Any]]

_DTYPES: dict[np.dtype[Any], np.dtype[Any]] = {
    np.dtype(np.float32): np.dtype(np.complex64),
    np.dtype(np.float64): np.dtype(np.complex128),
}


@runtime_checkable
class PathLike(Protocol):
    """What the engines ask of a source's path: its directions and gains at frames
    (:meth:`SourcePath.at`), and its spreads (:meth:`SourcePath.at_spread`). A
    :class:`SourcePath` holds breakpoints; another path may compute them when asked (an
    ADM object's, from its metadata), so that a long stream needs no table of them."""

    def at(self, frames: NDArray[Any]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Unit vectors ``(n, 3)`` and gains ``(n,)`` at the given frames."""
        ...

    def at_spread(self, frames: NDArray[Any]) -> NDArray[np.float64]:
        """Spreads ``(n, 4)`` (width, height, depth, diffuse) at the given frames."""
        ...


@dataclass(frozen=True, eq=False)
class SourcePath:
    """A source's direction and gain over time, as breakpoints.

    Between breakpoints the direction is interpolated linearly in Cartesian coordinates
    and normalised (the chord, which keeps the great circle between them) and the gain
    linearly; before the first and after the last breakpoint both hold. Two breakpoints
    at the same frame make a jump: from that frame on, the later one holds. Equal
    neighbouring breakpoints give exactly their direction in between (a resting source).

    Parameters
    ----------
    frames : array_like, shape (B,)
        Breakpoint times in frames of the stream, non-decreasing.
    vectors : array_like, shape (B, 3)
        Directions (any non-zero length; x front, y left, z up).
    gains : array_like, shape (B,), optional
        Linear gains, finite and non-negative; default all 1.
    spread : array_like, shape (B, 4), optional
        The source's extent per breakpoint, columns :data:`SPREAD_COLUMNS`: width and
        height in degrees, depth, diffuse share; finite, >= 0, diffuse <= 1.
        Interpolated like the gains (:meth:`at_spread`). None (the default): a point
        source with no diffuse share, and :attr:`spread` is None.

    Examples
    --------
    >>> import numpy as np
    >>> path = SourcePath([0, 100], [[1.0, 1.0, 0.0], [1.0, -1.0, 0.0]], [1.0, 0.5])
    >>> v, g = path.at(np.array([0, 50, 200]))
    >>> np.round(v, 6).tolist(), g.tolist()
    ([[0.707107, 0.707107, 0.0], [1.0, 0.0, 0.0], [0.707107, -0.707107, 0.0]], [1.0, 0.75, 0.5])
    """

    frames: NDArray[np.float64]
    vectors: NDArray[np.float64]
    gains: NDArray[np.float64]
    spread: NDArray[np.float64] | None

    def __init__(
        self,
        frames: ArrayLike,
        vectors: ArrayLike,
        gains: ArrayLike | None = None,
        spread: ArrayLike | None = None,
    ):
        f = np.asarray(frames, dtype=np.float64).reshape(-1)
        v = np.asarray(vectors, dtype=np.float64)
        if v.ndim == 1:
            v = v.reshape(1, -1)
        if len(f) < 1 or v.shape != (len(f), 3):
            raise AudioError(
                f"a source path needs breakpoint frames (B,) and vectors (B, 3), B >= 1; got "
                f"frames of shape {np.shape(frames)!r} and vectors of shape {np.shape(vectors)!r}"
            )
        g = np.ones(len(f)) if gains is None else np.asarray(gains, dtype=np.float64).reshape(-1)
        if g.shape != f.shape:
            raise AudioError(f"{len(f)} breakpoints but gains of shape {g.shape!r}")
        if not (np.all(np.isfinite(f)) and np.all(np.isfinite(v)) and np.all(np.isfinite(g))):
            raise AudioError("source path breakpoints must be finite numbers")
        if np.any(np.diff(f) < 0):
            at = int(np.argmax(np.diff(f) < 0)) + 1
            raise AudioError(
                f"source path frames must not decrease; breakpoint {at} is at frame "
                f"{shown(f[at])}, before {shown(f[at - 1])}"
            )
        if np.any(g < 0):
            raise AudioError(f"source path gains must be >= 0, got {shown(g[np.argmax(g < 0)])}")
        norms = np.linalg.norm(v, axis=1)
        if np.any(norms < 1e-12):
            raise AudioError(f"source path vector {int(np.argmin(norms))} is the zero vector")
        v = v / norms[:, None]
        moving = np.diff(f) > 0
        opposite = np.einsum("ij,ij->i", v[:-1], v[1:]) < -0.9998  # within about 1 degree
        if np.any(moving & opposite):
            at = int(np.argmax(moving & opposite))
            raise AudioError(
                f"source path breakpoints {at} and {at + 1} point in opposite directions; the "
                "way between them is undefined: add a breakpoint on the way"
            )
        e = None if spread is None else _checked_spread(spread, len(f))
        for name, value in (("frames", f), ("vectors", v), ("gains", g), ("spread", e)):
            if value is not None:
                value.setflags(write=False)
            object.__setattr__(self, name, value)

    @classmethod
    def fixed(
        cls, vector: ArrayLike, gain: float = 1.0, spread: ArrayLike | None = None
    ) -> SourcePath:
        """A source resting at one direction with one gain (and one spread, if given)."""
        rows = None if spread is None else np.asarray(spread, dtype=np.float64).reshape(1, -1)
        return cls([0.0], np.asarray(vector, dtype=np.float64).reshape(1, 3), [gain], rows)

    def at(self, frames: NDArray[Any]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Unit vectors ``(n, 3)`` and gains ``(n,)`` at the given frames."""
        t = np.asarray(frames, dtype=np.float64).reshape(-1)
        f = self.frames
        if len(f) == 1:
            return np.repeat(self.vectors, len(t), axis=0), np.repeat(self.gains, len(t))
        k = np.clip(np.searchsorted(f, t, side="right") - 1, 0, len(f) - 2)
        span = f[k + 1] - f[k]
        a = np.clip((t - f[k]) / np.where(span > 0, span, 1.0), 0.0, 1.0)
        a = np.where(span > 0, a, 1.0)
        v0, v1 = self.vectors[k], self.vectors[k + 1]
        mix = v0 + a[:, None] * (v1 - v0)
        mix /= np.linalg.norm(mix, axis=1, keepdims=True)
        # Exactly the breakpoint where the source rests or has arrived, so that a resting
        # direction is one value, not one per frame that differs in the last bit.
        same = np.all(v0 == v1, axis=1)
        mix = np.where((same | (a == 0.0))[:, None], v0, mix)
        mix = np.where((a == 1.0)[:, None], v1, mix)
        g0, g1 = self.gains[k], self.gains[k + 1]
        gains = np.where(g0 == g1, g0, g0 + a * (g1 - g0))
        return mix, gains

    def at_spread(self, frames: NDArray[Any]) -> NDArray[np.float64]:
        """The spread ``(n, 4)`` (columns :data:`SPREAD_COLUMNS`) at the given frames.

        Interpolated linearly between breakpoints, column by column, exactly as the gains
        are (a jump at two breakpoints on one frame, the end values held outside), and
        exactly a breakpoint's value where two neighbours agree, so that a resting source
        with a constant spread gives one value, not one per frame that differs in the
        last bit. A path without a spread gives zeros: a point with no diffuse share.

        Examples
        --------
        >>> path = SourcePath([0, 100], [[1.0, 0, 0], [1.0, 0, 0]],
        ...                   spread=[[0.0, 0, 0, 0], [90.0, 30, 0, 0.5]])
        >>> path.at_spread(np.array([0, 50, 200])).tolist()
        [[0.0, 0.0, 0.0, 0.0], [45.0, 15.0, 0.0, 0.25], [90.0, 30.0, 0.0, 0.5]]
        """
        t = np.asarray(frames, dtype=np.float64).reshape(-1)
        if self.spread is None:
            return np.zeros((len(t), len(SPREAD_COLUMNS)))
        f = self.frames
        if len(f) == 1:
            return np.repeat(self.spread, len(t), axis=0)
        k = np.clip(np.searchsorted(f, t, side="right") - 1, 0, len(f) - 2)
        span = f[k + 1] - f[k]
        a = np.clip((t - f[k]) / np.where(span > 0, span, 1.0), 0.0, 1.0)
        a = np.where(span > 0, a, 1.0)[:, None]
        s0, s1 = self.spread[k], self.spread[k + 1]
        mixed = np.where(s0 == s1, s0, s0 + a * (s1 - s0))
        mixed = np.where(a == 1.0, s1, mixed)
        out: NDArray[np.float64] = np.where(a == 0.0, s0, mixed)
        return out


def _checked_spread(spread: ArrayLike, breakpoints: int) -> NDArray[np.float64]:
    """A path's spread as a float array ``(B, 4)``, checked."""
    e = np.array(spread, dtype=np.float64)
    columns = len(SPREAD_COLUMNS)
    if e.shape != (breakpoints, columns):
        raise AudioError(
            f"a source path's spread needs one row of {columns} values "
            f"({', '.join(SPREAD_COLUMNS)}) per breakpoint, shape ({breakpoints}, {columns}); "
            f"got shape {e.shape!r}"
        )
    if not np.all(np.isfinite(e)):
        raise AudioError("source path spread values must be finite numbers")
    if np.any(e < 0):
        row, col = np.argwhere(e < 0)[0]
        raise AudioError(
            f"source path spread {SPREAD_COLUMNS[col]} must be >= 0, got {shown(e[row, col])} "
            f"at breakpoint {int(row)}"
        )
    if np.any(e[:, 3] > 1):
        row = int(np.argmax(e[:, 3] > 1))
        raise AudioError(
            f"source path spread diffuse must be from 0 to 1, got {shown(e[row, 3])} at "
            f"breakpoint {row}"
        )
    return e


class _DirectionGrid:
    """Rings of points every ``step`` degrees; the nearest point of a direction in closed
    form (ring by elevation, point by azimuth)."""

    def __init__(self, step_deg: float) -> None:
        rings = int(round(180.0 / step_deg)) + 1
        self.elevation_step = 180.0 / (rings - 1)
        elevations = -90.0 + self.elevation_step * np.arange(rings)
        counts = np.maximum(
            1, np.round(360.0 * np.cos(np.radians(elevations)) / step_deg).astype(np.int64)
        )
        self.counts = counts
        self.offsets = np.concatenate([[0], np.cumsum(counts)[:-1]])
        self.size = int(counts.sum())
        self._elevations = elevations

    def nearest(self, vectors: NDArray[np.float64]) -> NDArray[np.int64]:
        """Grid index of each unit vector's nearest grid point (within a step)."""
        el = np.degrees(np.arcsin(np.clip(vectors[:, 2], -1.0, 1.0)))
        az = np.degrees(np.arctan2(vectors[:, 1], vectors[:, 0]))
        ring = np.clip(np.round((el + 90.0) / self.elevation_step).astype(np.int64), 0, None)
        ring = np.minimum(ring, len(self.counts) - 1)
        count = self.counts[ring]
        point = np.round(az * count / 360.0).astype(np.int64) % count
        index: NDArray[np.int64] = self.offsets[ring] + point
        return index

    def vectors(self, index: NDArray[np.int64]) -> NDArray[np.float64]:
        """Unit vectors of grid points."""
        ring = np.searchsorted(self.offsets, index, side="right") - 1
        el = np.radians(self._elevations[ring])
        az = np.radians((index - self.offsets[ring]) * 360.0 / self.counts[ring])
        return np.stack([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)], axis=1)


def update_hop(samplerate: float, hop: int | None = None) -> int:
    """The frames between filter or gain updates at ``samplerate``: ``hop``, checked to be
    a whole number from 1 to :data:`MAX_UPDATE_SECONDS` of frames, or that longest hop.

    Examples
    --------
    >>> update_hop(48000), update_hop(48000, 256)
    (480, 256)
    """
    if (
        isinstance(samplerate, bool)
        or not isinstance(samplerate, (int, float, np.integer, np.floating))
        or not math.isfinite(samplerate)
        or samplerate <= 0
    ):
        raise AudioError(f"samplerate must be a positive number, got {shown(samplerate)}")
    longest = int(MAX_UPDATE_SECONDS * samplerate + 1e-9)
    if longest < 1:
        raise AudioError(f"samplerate {shown(samplerate)} Hz is too low for 10 ms updates")
    if hop is None:
        return longest
    if isinstance(hop, bool) or not isinstance(hop, (int, np.integer)) or not 1 <= hop <= longest:
        raise AudioError(
            f"hop must be a whole number of frames from 1 to {longest} (10 ms at "
            f"{float(samplerate):g} Hz), got {shown(hop)}"
        )
    return int(hop)


class PairTable:
    """Filter spectra of directions, each computed once (see the module's notes).

    Resting directions get exact pairs of their own; moving ones the pair of their
    nearest grid point. Rows are only ever appended, so a row number stays valid, and
    one table serves any number of engines with the same pairs and hop (a plan may keep
    it with the HRIR set, so that renders after the first compute no grid pair again).

    Parameters
    ----------
    pairs : callable
        ``pairs(vectors)`` for unit vectors ``(n, 3)`` returns the filter pairs
        ``(n, 2, L)`` (left, right) to use at those directions; ``L`` is the same for
        every call.
    samplerate : float
        The stream's rate in Hz (sets the longest hop, :data:`MAX_UPDATE_SECONDS`).
    hop : int, optional
        Frames between filter updates, at most ``MAX_UPDATE_SECONDS * samplerate``
        (the default).
    grid_step_deg : float, optional
        Spacing of the grid moving directions snap to (0.5 to 10 degrees).
    dtype : numpy dtype, optional
        Working precision, ``float32`` (default; spectra in complex64) or ``float64``.
        Pairs are rounded to it before their spectra are taken, so a pair computed here
        and one loaded from a cache (:meth:`load_grid_pairs`) give the same spectrum.
    filter_length : int, optional
        The pairs' length ``L`` when known (an HRIR set's ``taps``); otherwise the pair
        function is asked for the front direction's pair to learn it.
    """

    def __init__(
        self,
        pairs: PairFunction,
        samplerate: float,
        *,
        hop: int | None = None,
        grid_step_deg: float = GRID_STEP_DEG,
        dtype: np.dtype[Any] | type = np.float32,
        filter_length: int | None = None,
    ) -> None:
        hop = update_hop(samplerate, hop)
        if not 0.5 <= grid_step_deg <= 10.0:
            raise AudioError(f"grid_step_deg must be from 0.5 to 10, got {shown(grid_step_deg)}")
        try:
            real = np.dtype(dtype)
        except TypeError:
            real = np.dtype(np.object_)
        if real not in _DTYPES:
            raise AudioError(f"dtype must be one of 'float32', 'float64', got {dtype!r}")
        self.samplerate: float = float(samplerate)
        self.hop: int = int(hop)
        self.dtype: np.dtype[Any] = real
        self.grid_step_deg: float = float(grid_step_deg)
        self._pairs = pairs
        self._grid = _DirectionGrid(grid_step_deg)
        if filter_length is None:
            filter_length = self._checked_pairs(np.array([[1.0, 0.0, 0.0]]), None).shape[-1]
        elif isinstance(filter_length, bool) or not isinstance(filter_length, (int, np.integer)):
            raise AudioError(f"filter_length must be a whole number, got {shown(filter_length)}")
        if filter_length < 1:
            raise AudioError(f"filter_length must be 1 or more, got {shown(filter_length)}")
        self.filter_length: int = int(filter_length)
        self.transform_size: int = int(
            scipy.fft.next_fast_len(self.hop + self.filter_length - 1, real=True)
        )
        self._bins = self.transform_size // 2 + 1
        self._cplx = _DTYPES[real]
        self.spectra: NDArray[Any] = np.zeros((64, 2, self._bins), dtype=self._cplx)
        self._rows = 0
        self._grid_row = np.full(self._grid.size, -1, dtype=np.int64)
        self._exact_row: dict[bytes, int] = {}
        self._grid_irs: NDArray[np.float32] | None = None  # every grid pair, once known

    @property
    def grid_points(self) -> int:
        """Points of the direction grid (the most grid pairs the table may hold)."""
        return self._grid.size

    @property
    def has_grid_pairs(self) -> bool:
        """Does the table hold every grid point's pair (:meth:`grid_pairs`)?"""
        return self._grid_irs is not None

    @property
    def rows(self) -> int:
        """Filter spectra held now (grid points passed and resting directions)."""
        return self._rows

    @property
    def most_bytes(self) -> int:
        """The table's largest size in bytes: every grid point and the most exact pairs."""
        return (self._grid.size + MAX_EXACT_PAIRS) * 2 * self._bins * self._cplx.itemsize

    def rows_for(self, vectors: NDArray[np.float64], resting: NDArray[np.bool_]) -> NDArray[Any]:
        """Row of each direction: its exact pair where resting, else its grid point's."""
        resting = np.array(resting, dtype=bool)
        rows = np.empty(len(vectors), dtype=np.int64)
        todo: list[NDArray[np.float64]] = []
        at = np.flatnonzero(resting)
        if len(at):
            # A resting direction repeats state after state: look each one up once.
            unique, inverse = np.unique(vectors[at], axis=0, return_inverse=True)
            found = np.empty(len(unique), dtype=np.int64)
            for u, vector in enumerate(unique):
                key = vector.tobytes()
                row = self._exact_row.get(key)
                if row is None and len(self._exact_row) < MAX_EXACT_PAIRS:
                    row = self._rows + len(todo)
                    self._exact_row[key] = row
                    todo.append(vector)
                found[u] = -1 if row is None else row
            rows[at] = found[inverse.reshape(-1)]
            resting[at[rows[at] < 0]] = False  # the table is full: snap like a moving one
        if todo:
            self._add(self._checked_pairs(np.stack(todo), self.filter_length))
        moving = np.flatnonzero(~resting)
        if len(moving):
            cells = self._grid.nearest(vectors[moving])
            fresh = np.unique(cells[self._grid_row[cells] < 0])
            if len(fresh):
                self._add_grid(fresh)
            rows[moving] = self._grid_row[cells]
        return rows

    def grid_pairs(self) -> NDArray[np.float32]:
        """Every grid point's pair, ``(G, 2, L)`` float32 in grid order: what a cache keeps.

        Computes them all the first time (in bulk: about a second for the KEMAR set's
        10,314 points at 2 degrees) and keeps them, so that the grid's spectra are made
        from these as sources pass; :meth:`load_grid_pairs` in another process spares it
        all of them.
        """
        if self._grid_irs is None:
            cells = np.arange(self._grid.size)
            irs = np.empty((self._grid.size, 2, self.filter_length), dtype=np.float32)
            for start in range(0, len(cells), 1024):
                part = cells[start : start + 1024]
                irs[part] = self._checked_pairs(self._grid.vectors(part), self.filter_length)
            irs.setflags(write=False)
            self._grid_irs = irs
        return self._grid_irs

    def load_grid_pairs(self, pairs: NDArray[Any]) -> bool:
        """Take the grid's pairs from :meth:`grid_pairs` of a float32 table with the same
        pair function, rate and grid; their spectra are then made as sources pass, with
        no call to the pair function. False (nothing taken) if the shape or values do
        not fit, or this table works in float64 (whose pairs are not rounded to float32).
        """
        irs = np.asarray(pairs)
        shape = (self._grid.size, 2, self.filter_length)
        if self.dtype != np.float32 or irs.dtype != np.float32 or irs.shape != shape:
            return False
        if not np.all(np.isfinite(irs)):
            return False
        self._grid_irs = irs
        return True

    def _add_grid(self, cells: NDArray[np.int64]) -> None:
        """Spectra of grid points not in the table yet."""
        if self._grid_irs is not None:
            irs: NDArray[Any] = self._grid_irs[cells]
        else:
            irs = self._checked_pairs(self._grid.vectors(cells), self.filter_length)
        self._grid_row[cells] = self._rows + np.arange(len(cells))
        self._add(irs)

    def _add(self, irs: NDArray[Any]) -> None:
        """Spectra of new pairs, appended in order (the pairs rounded to the table's
        precision first: the same spectrum whether a pair was computed or loaded)."""
        spectra = scipy.fft.rfft(np.asarray(irs, dtype=self.dtype), n=self.transform_size, axis=-1)
        need = self._rows + len(irs)
        if need > len(self.spectra):
            grown = np.zeros((max(need, 2 * len(self.spectra)), 2, self._bins), dtype=self._cplx)
            grown[: self._rows] = self.spectra[: self._rows]
            self.spectra = grown
        self.spectra[self._rows : need] = spectra
        self._rows = need

    def _checked_pairs(self, vectors: NDArray[np.float64], length: int | None) -> NDArray[Any]:
        irs = np.asarray(self._pairs(np.asarray(vectors, dtype=np.float64)))
        if irs.dtype.kind not in "fiu" or irs.ndim != 3 or irs.shape[:2] != (len(vectors), 2):
            raise HrirError(
                f"the pair function must return real filters of shape (n, 2, L) for n = "
                f"{len(vectors)} directions, got {irs.dtype.name} of shape {irs.shape!r}"
            )
        if length is not None and irs.shape[2] != length:
            raise HrirError(
                f"the pair function returned {irs.shape[2]} taps; earlier {length}: every "
                "pair must have the same length"
            )
        if irs.shape[2] < 1 or not np.all(np.isfinite(irs)):
            raise HrirError("the pair function returned empty or non-finite filters")
        return irs


class MovingSourceEngine:
    """Streaming render of moving mono sources to two ears (see the module's notes).

    Parameters
    ----------
    paths : sequence of SourcePath
        One path per source (``K >= 1``); the input blocks have ``K`` channels in this
        order.
    table : PairTable
        Where filter pairs come from; sets the hop, transform and precision.
    gain : float, optional
        A gain applied to the output (a calibration gain).
    post_filter : numpy.ndarray, shape (P,) or (2, P), optional
        A filter applied to both ears' sums (one for both, or one per ear).

    Notes
    -----
    :meth:`process` returns exactly as many frames as it is given, aligned with them;
    :meth:`flush` gives the tail, ``L + P - 2`` frames (``L - 1`` without a post filter),
    so the whole output is the input's length plus the combined filter's less one.

    Examples
    --------
    A resting source renders exactly as its fixed pair:

    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> h = rng.standard_normal((2, 5))
    >>> table = PairTable(lambda v: np.repeat(h[None], len(v), 0), 48000.0)
    >>> engine = MovingSourceEngine([SourcePath.fixed([1.0, 0.0, 0.0])], table)
    >>> x = rng.standard_normal((1000, 1))
    >>> y = np.concatenate([engine.process(x[:300]), engine.process(x[300:]), *engine.flush()])
    >>> ref = np.stack([np.convolve(x[:, 0], h[0]), np.convolve(x[:, 0], h[1])], axis=1)
    >>> y.shape, bool(np.allclose(y, ref, atol=1e-5))
    ((1004, 2), True)
    """

    def __init__(
        self,
        paths: Sequence[PathLike],
        table: PairTable,
        *,
        gain: float = 1.0,
        post_filter: RealArray | None = None,
    ) -> None:
        paths = list(paths)
        if not paths or not all(isinstance(p, PathLike) for p in paths):
            raise AudioError("a moving-source engine needs one path per source, at least one")
        if not isinstance(table, PairTable):
            raise AudioError(f"table must be a PairTable, got {type(table).__name__}")
        if not math.isfinite(gain) or gain < 0:
            raise AudioError(f"gain must be a finite number >= 0, got {shown(gain)}")
        self.paths: list[PathLike] = paths
        self.sources: int = len(paths)
        self.table: PairTable = table
        self.gain: float = float(gain)
        self.hop: int = table.hop
        self.dtype: np.dtype[Any] = table.dtype
        self.filter_length: int = table.filter_length
        self.transform_size: int = table.transform_size
        s = self.hop
        self._ramp = (0.5 - 0.5 * np.cos(np.pi * np.arange(s) / s)).astype(self.dtype)

        self._post: BinauralConvolver | None = None
        if post_filter is not None:
            post = np.asarray(post_filter)
            if post.ndim == 1:
                post = np.stack([post, post])
            if post.ndim != 2 or post.shape[0] != 2 or post.shape[1] < 1:
                raise HrirError(
                    f"post_filter must have shape (P,) or (2, P), got {np.shape(post_filter)!r}"
                )
            bank = np.zeros((2, 2, post.shape[1]))
            bank[0, 0], bank[1, 1] = post[0], post[1]
            # Uniform partitions of a power of two (2048 for the KEMAR EQ at 48 kHz): the
            # callers' blocks (8192) are whole hops. The cost model's choice for two
            # channels, one hop of 62,000 frames, made every block a part-filled hop and
            # cost 4.6 times as much (0.129 s against 0.028 s for 20 s, measured).
            part = max(MIN_POST_PARTITION, 1 << (post.shape[1] - 1).bit_length())
            plan = TransformPlan.uniform(min(part, MAX_POST_PARTITION))
            self._post = BinauralConvolver(bank, dtype=self.dtype, plan=plan)
        self.post_length: int = 0 if self._post is None else self._post.filter_length
        self.reset()

    @property
    def batch_frames(self) -> int:
        """Frames of one batch of hops (:data:`BATCH_HOPS` hops). Blocks of a multiple of
        this length are rendered in whole batches: no part-filled hop is rendered ahead
        and again on the next call (with 8192-frame blocks at 48 kHz that cost 12 % more
        than with 7680, measured with 16 sources)."""
        return self.hop * BATCH_HOPS

    @property
    def nbytes(self) -> int:
        """Bytes held by the engine's own arrays (the shared table left out)."""
        own = sum(v.nbytes for v in vars(self).values() if isinstance(v, np.ndarray))
        return own + (0 if self._post is None else self._post.nbytes)

    def reset(self) -> None:
        """Forget all input: the next call starts at frame 0 (the table stays)."""
        n, s = self.transform_size, self.hop
        self._history = np.zeros((self.sources, n - s), dtype=self.dtype)
        self._partial = np.zeros((self.sources, 0), dtype=self.dtype)
        self._returned = 0  # frames of the part-filled hop already given out
        self._next_hop = 0
        self._ahead_first = 0  # filter states held: rows and gains of states first ..
        self._ahead_rows = np.zeros((0, self.sources), dtype=np.int64)
        self._ahead_gains = np.zeros((0, self.sources))
        if self._post is not None:
            self._post.reset()

    def process(self, block: RealArray) -> FloatArray:
        """Render the next frames: input ``(n, K)``, output ``(n, 2)`` aligned with it."""
        x = np.asarray(block)
        if x.dtype.kind not in "fiu" or x.ndim != 2 or x.shape[1] != self.sources:
            raise AudioError(
                f"expected a real block of shape (frames, {self.sources}), got "
                f"{x.dtype.name} of shape {x.shape!r}"
            )
        out = self._ears(x.T.astype(self.dtype))
        return out if self._post is None else self._post.process(out)

    def flush(self) -> Iterator[FloatArray]:
        """The tail after the last input (``L - 1`` frames, plus the post filter's
        ``P - 1``); then the engine is reset."""
        remaining = self.filter_length - 1
        while remaining > 0:
            take = min(remaining, self.hop * BATCH_HOPS)
            out = self._ears(np.zeros((self.sources, take), dtype=self.dtype))
            yield out if self._post is None else self._post.process(out)
            remaining -= take
        if self._post is not None:
            yield from self._post.flush()
        self.reset()

    # -- internals ---------------------------------------------------------------------

    def _ears(self, x: NDArray[Any]) -> FloatArray:
        """Output frames for input ``x`` (K, n): whole hops in batches, then the part."""
        s = self.hop
        data = np.concatenate([self._partial, x], axis=1) if self._partial.shape[1] else x
        whole = data.shape[1] // s
        pieces = []
        skip = self._returned  # the part-filled hop's frames given out by earlier calls
        done = 0
        while done < whole:
            count = min(BATCH_HOPS, whole - done)
            frames = data[:, done * s : (done + count) * s]
            ears = self._hops(frames, count)
            keep = self._history.shape[1]
            joined = np.concatenate([self._history, frames], axis=1)
            self._history = joined[:, joined.shape[1] - keep :]
            self._next_hop += count
            pieces.append(ears[skip:])
            skip = 0
            done += count
        if whole:
            self._returned = 0
        rest = data[:, whole * s :]
        if rest.shape[1]:
            padded = np.zeros((self.sources, s), dtype=self.dtype)
            padded[:, : rest.shape[1]] = rest
            ears = self._hops(padded, 1)
            pieces.append(ears[self._returned : rest.shape[1]])
            self._returned = rest.shape[1]
        self._partial = np.array(rest, dtype=self.dtype)
        if not pieces:
            return np.zeros((0, 2), dtype=self.dtype)
        return np.concatenate(pieces) if len(pieces) > 1 else pieces[0]

    def _hops(self, frames: NDArray[Any], count: int) -> FloatArray:
        """Output (count * S, 2) of ``count`` hops from ``self._next_hop`` on."""
        n, s = self.transform_size, self.hop
        buf = np.concatenate([self._history, frames], axis=1)  # (K, N - S + count S)
        rows, gains = self._states(count)  # (count + 1, K)
        # A source silent over the batch's windows, or at gain 0 in all its states (an
        # object outside its time span, or muted), adds exactly nothing: it is left out
        # of the transforms and the sums, which gives the same bits.
        active = np.flatnonzero(np.any(buf != 0, axis=1) & np.any(gains != 0, axis=0))
        if len(active) == 0:
            return np.zeros((count * s, 2), dtype=self.dtype)
        if len(active) < self.sources:
            buf, rows, gains = buf[active], rows[:, active], gains[:, active]
        windows = np.lib.stride_tricks.sliding_window_view(buf, n, axis=1)[:, ::s][:, :count]
        spectra = scipy.fft.rfft(windows, axis=-1)  # (K, count, bins)
        table = self.table.spectra[rows]  # (count + 1, K, 2, bins)
        if np.any(gains != 1.0):
            table *= gains.astype(self.dtype)[:, :, None, None]
        x = np.transpose(spectra, (1, 0, 2))[:, :, None, :]  # (count, K, 1, bins)
        # Summed over sources with numpy's own reduction, not a BLAS product: on a shared
        # machine BLAS threads waiting for cores made that sum the slowest step by far.
        ears_old = (x * table[:-1]).sum(axis=1)  # (count, 2, bins)
        ears_new = (x * table[1:]).sum(axis=1)
        both = scipy.fft.irfft(np.stack([ears_old, ears_new]), n=n, axis=-1)[..., n - s :]
        y_old, y_new = both[0], both[1]  # (count, 2, S)
        y = y_old + self._ramp * (y_new - y_old)
        if self.gain != 1.0:
            y *= self.gain
        out: FloatArray = np.ascontiguousarray(
            np.transpose(y, (0, 2, 1)).reshape(count * s, 2), dtype=self.dtype
        )
        return out

    def _states(self, count: int) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
        """Table rows and gains of filter states ``j .. j + count`` (``j`` the next hop).

        Worked out :data:`LOOKAHEAD_HOPS` at a time, so the paths are read and the
        table filled in bulk rather than per batch.
        """
        first = self._next_hop
        end = first + count + 1
        held_end = self._ahead_first + len(self._ahead_rows)
        if first < self._ahead_first or end > held_end:
            span = max(count + 1, LOOKAHEAD_HOPS)
            frames = (first - 1 + np.arange(span + 2)) * float(self.hop)
            vectors = np.empty((self.sources, span, 3))
            resting = np.empty((self.sources, span), dtype=bool)
            gains = np.empty((span, self.sources))
            for k, path in enumerate(self.paths):
                v, g = path.at(frames)
                same = np.all(v[1:] == v[:-1], axis=1)  # state i + 1 equals state i
                resting[k] = same[:-1] | same[1:]  # states first .. first + span - 1
                vectors[k] = v[1:-1]
                gains[:, k] = g[1:-1]
            # All sources' new pairs in one call: the pair function works in bulk.
            rows = self.table.rows_for(vectors.reshape(-1, 3), resting.reshape(-1))
            self._ahead_first, self._ahead_gains = first, gains
            self._ahead_rows = np.ascontiguousarray(rows.reshape(self.sources, span).T)
        lo = first - self._ahead_first
        return self._ahead_rows[lo : lo + count + 1], self._ahead_gains[lo : lo + count + 1]
