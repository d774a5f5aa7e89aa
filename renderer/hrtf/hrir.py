"""An HRIR set and its direction lookup.

:class:`HrirSet` holds one set's head-related impulse responses, normalised at the
boundary (left ear first, SOFA delays applied, directions as unit vectors in the
listener's frame) and answers "which HRIR pair for this direction?":

* a measured direction (within :data:`MEASURED_TOLERANCE_DEG`) is used as it is;
* any other direction is interpolated between the three measured directions that
  enclose it on a triangulation of the measurement grid (the convex hull of the unit
  vectors), with barycentric weights. Onsets are aligned before weighting and the
  weighted onset is re-applied as a fractional delay, so that mixing responses with
  different arrival times does not comb-filter;
* where the grid does not cover the direction (a triangle whose edges are far longer
  than the grid's spacing, as over the hole below a set measured only down to -40
  degrees), the nearest measured direction is used and a warning is recorded.

Sets are resampled to the stem's rate with :func:`scipy.signal.resample_poly` and cached
per (file, rate) by :func:`load_hrir_set`.
"""

from __future__ import annotations

import functools
import hashlib
import os
from dataclasses import dataclass, field, fields
from fractions import Fraction
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import HrirError, shown
from ..geometry import angle_between, normalize, vector_to_direction
from ..signals import scipy_signal
from ._sofa_data import MAX_VALUES
from .guard import is_shipped, read_sofa_guarded
from .onsets import (
    cross_correlation_itd,
    fractional_delay,
    interaural_time_difference,
    onset_times,
)
from .sofa import SofaData, read_sofa

if TYPE_CHECKING:  # scipy.spatial is imported where a grid is built, not by a cached render
    from scipy.spatial import ConvexHull, cKDTree

#: A requested direction this close (degrees) to a measured one uses that measurement as it is.
MEASURED_TOLERANCE_DEG = 0.01

#: Onset threshold (dB below each IR's peak) used to align IRs before interpolation.
#: -20 dB finds the direct sound's leading edge on measured sets without being fooled by
#: pre-ringing of the measurement chain (common practice for onset-based ITD estimates).
ONSET_THRESHOLD_DB = -20.0

#: Samples of lead kept before the earliest onset when IRs are aligned for interpolation.
ALIGN_LEAD_SAMPLES = 8


@dataclass(frozen=True)
class HrirPair:
    """The HRIR pair chosen for one direction.

    Attributes
    ----------
    ir : ndarray, shape (2, N)
        Left and right ear impulse responses at the set's rate.
    method : str
        ``"measured"``, ``"interpolated"`` or ``"nearest"``.
    neighbours : tuple of int
        Indices of the measured directions used.
    weights : tuple of float
        Their weights (sum 1).
    angular_error : float
        Degrees between the requested direction and the nearest measured one.
    warning : str or None
        Why the nearest direction was used instead of an interpolation, if it was.
    """

    ir: np.ndarray
    method: str
    neighbours: tuple[int, ...]
    weights: tuple[float, ...]
    angular_error: float
    warning: str | None = None


@dataclass(frozen=True)
class _Grid:
    """Triangulation of the measurement directions (built once per set)."""

    tree: cKDTree
    spacing_deg: float
    hull: ConvexHull | None
    facet_ok: np.ndarray | None  # (F,) bool: the facet is small enough to interpolate over
    inverse: np.ndarray | None  # (F, 3, 3) inverses of each facet's vertex matrix
    ring_order: np.ndarray | None = None  # for a single ring of directions: indices by angle
    ring_normal: np.ndarray | None = None


@dataclass(frozen=True, eq=False)
class HrirSet:
    """One set of head-related impulse responses.

    Attributes
    ----------
    name : str
        Display name (the shipped set's name or the file name).
    samplerate : float
        Rate of :attr:`ir` in Hz.
    ir : ndarray, shape (M, 2, N)
        Impulse responses, left ear first, SOFA ``Data.Delay`` already applied.
    directions : ndarray, shape (M, 3)
        Unit vectors of the measured directions in the listener frame.
    source : str
        Path of the file the set was read from ("" if built in memory).
    sha256 : str
        Hash of that file ("" if none).
    convention : str
        SOFA convention of the file.
    room_type : str
        SOFA ``RoomType`` ("free field" for anechoic sets).
    dropped : int
        Measurements of the file left out because an ear's response was all zeros.
    warnings : tuple of str
        What the SOFA reader changed or found odd in the file (see
        :attr:`~earfold.renderer.hrtf.SofaData.warnings`), for the render report.
    """

    name: str
    samplerate: float
    ir: np.ndarray
    directions: np.ndarray
    source: str = ""
    sha256: str = ""
    convention: str = ""
    room_type: str = "free field"
    dropped: int = 0
    warnings: tuple[str, ...] = ()
    _cache: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def __post_init__(self) -> None:
        ir = np.asarray(self.ir, dtype=np.float64)
        if ir.ndim != 3 or ir.shape[1] != 2 or ir.shape[0] == 0 or ir.shape[2] == 0:
            raise HrirError(f"HRIR array must have shape (M, 2, N), got {ir.shape!r}")
        dirs = normalize(np.asarray(self.directions, dtype=np.float64))
        if dirs.shape != (ir.shape[0], 3):
            raise HrirError(
                f"{ir.shape[0]} HRIRs but directions of shape {np.shape(self.directions)!r}"
            )
        ir.setflags(write=False)
        dirs.setflags(write=False)
        object.__setattr__(self, "ir", ir)
        object.__setattr__(self, "directions", dirs)

    # -- construction -------------------------------------------------------------------

    @classmethod
    def from_sofa(cls, data: SofaData, *, name: str | None = None, sha256: str = "") -> HrirSet:
        """Build a set from a validated SOFA file, applying its ``Data.Delay``."""
        ir = data.ir
        delay = np.asarray(data.delay, dtype=float)
        directions = data.directions
        # Measurements with a silent ear (placeholders in GeneralFIR files, dead channels)
        # cannot be aligned or rendered; drop them and say how many went.
        live = np.all(np.any(ir != 0, axis=-1), axis=-1)
        if not live.any():
            raise HrirError(
                f"{Path(data.path).name!r}: every impulse response is zero; there is nothing "
                "to render with"
            )
        dropped = int((~live).sum())
        if dropped:
            ir, delay, directions = ir[live], delay[live], directions[live]
        if np.any(delay != 0):
            extra = int(np.ceil(delay.max())) + 1
            ir = fractional_delay(ir, delay, length=ir.shape[-1] + extra)
        return cls(
            name=name or Path(data.path).name,
            samplerate=float(data.samplerate),
            ir=ir,
            directions=directions,
            source=str(data.path),
            sha256=sha256,
            convention=data.convention,
            room_type=data.room_type,
            dropped=dropped,
            warnings=tuple(data.warnings),
        )

    @property
    def measurements(self) -> int:
        """Number of measured directions M."""
        return int(self.ir.shape[0])

    @property
    def taps(self) -> int:
        """Length N of each impulse response."""
        return int(self.ir.shape[2])

    def resampled(self, samplerate: float) -> HrirSet:
        """The same set at another rate (polyphase resampling, scipy.signal.resample_poly)."""
        signal = scipy_signal()

        if samplerate == self.samplerate:
            return self
        ratio = Fraction(samplerate / self.samplerate).limit_denominator(10000)
        if ratio <= 0 or abs(float(ratio) * self.samplerate - samplerate) > 1e-6 * samplerate:
            raise HrirError(
                f"cannot resample HRIR set {self.name!r} from {self.samplerate:g} Hz "
                f"to {shown(samplerate)} Hz"
            )
        taps = -(-self.taps * ratio.numerator // ratio.denominator)
        if self.measurements * 2 * taps > MAX_VALUES:
            raise HrirError(
                f"HRIR set {self.name!r} resampled from {self.samplerate:g} Hz to "
                f"{samplerate:g} Hz would hold {self.measurements} x 2 x {taps} = "
                f"{self.measurements * 2 * taps} values; at most {MAX_VALUES} (2**25) are "
                "accepted"
            )
        # resample_poly keeps the waveform's amplitude; an impulse response must instead keep
        # its frequency response, and at a higher rate it has proportionally more samples
        # per unit time, so scale by old rate / new rate.
        ir = signal.resample_poly(self.ir, ratio.numerator, ratio.denominator, axis=-1)
        ir *= self.samplerate / samplerate
        return self.derived(samplerate=float(samplerate), ir=ir)

    # -- lookup -------------------------------------------------------------------------

    def pair(self, direction: np.ndarray) -> HrirPair:
        """The HRIR pair for a direction (unit vector in the listener frame)."""
        d = normalize(np.asarray(direction, dtype=float).reshape(3))
        if not np.any(d):
            raise HrirError("direction vector is zero")
        grid = self._grid()
        dist, idx = grid.tree.query(d)
        nearest = int(idx)
        error = float(angle_between(d, self.directions[nearest]))
        if error <= MEASURED_TOLERANCE_DEG:
            return HrirPair(self.ir[nearest].copy(), "measured", (nearest,), (1.0,), error)

        found = self._enclosing(d, grid)
        if found is None:
            az, el = vector_to_direction(d)
            warning = (
                f"HRIR set {self.name!r} has no measurements around azimuth {float(az):.1f}, "
                f"elevation {float(el):.1f}; used the nearest measured direction, "
                f"{error:.1f} degrees away"
            )
            return HrirPair(self.ir[nearest].copy(), "nearest", (nearest,), (1.0,), error, warning)
        indices, weights = found
        return HrirPair(
            self._interpolate(indices, weights),
            "interpolated",
            tuple(int(i) for i in indices),
            tuple(float(w) for w in weights),
            error,
        )

    def pairs(self, directions: np.ndarray) -> np.ndarray:
        """The impulse responses :meth:`pair` gives for many directions, computed in bulk.

        Row ``i`` equals ``self.pair(directions[i]).ir`` (the same triangle, weights,
        alignment and fractional delay, done for all rows at once, which spares the
        per-call overhead), for renderers that need many directions (moving sources).
        :meth:`pair` tells how each was found.

        Parameters
        ----------
        directions : numpy.ndarray, shape (n, 3)
            Directions (any non-zero length) in the listener frame.

        Returns
        -------
        numpy.ndarray, shape (n, 2, N), float64
        """
        d = np.asarray(directions, dtype=float)
        if d.ndim != 2 or d.shape[1] != 3:
            raise HrirError(f"directions must have shape (n, 3), got {d.shape!r}")
        length = np.linalg.norm(d, axis=1)
        if not np.all(np.isfinite(length)) or np.any(length == 0):
            raise HrirError("directions must be finite, non-zero vectors")
        d = normalize(d)
        out = np.empty((len(d), 2, self.taps))
        if not len(d):
            return out
        grid = self._grid()
        _, idx = grid.tree.query(d)
        idx = np.asarray(idx, dtype=np.intp)
        error = angle_between(d, self.directions[idx])
        rest = np.flatnonzero(error > MEASURED_TOLERANCE_DEG)
        out[...] = self.ir[idx]
        if not len(rest) or grid.hull is None:
            # Measured directions done; a ring or a tiny grid: one lookup at a time.
            for i in rest:
                out[i] = self.pair(d[i]).ir
            return out
        # A grid with a hull always has its facets' checks and inverses.
        assert grid.facet_ok is not None and grid.inverse is not None
        facet, w = _facet_weights(d[rest], grid)
        w = np.clip(w, 0.0, None)
        total = w.sum(axis=1)
        ok = grid.facet_ok[facet] & (total > 0)
        rows, facet, w = rest[ok], facet[ok], w[ok] / total[ok, None]
        if not len(rows):
            return out
        verts = grid.hull.simplices[facet]  # (n, 3)
        aligned, ref = self._aligned()
        on = self._onsets()
        # As _interpolate, term by term in the same order (np.sum over three rows).
        shape = w[:, 0, None, None] * aligned[verts[:, 0]]
        shape += w[:, 1, None, None] * aligned[verts[:, 1]]
        shape += w[:, 2, None, None] * aligned[verts[:, 2]]
        onset = np.einsum("nk,nke->ne", w, on[verts]) - ref  # (n, 2)
        # fractional_delay pads by the largest delay of its call: call it once per reach,
        # so each row is delayed on exactly the transform pair() would use.
        reach = np.ceil(np.max(np.abs(onset), axis=1)).astype(np.int64)
        for value in np.unique(reach):
            group = np.flatnonzero(reach == value)
            out[rows[group]] = fractional_delay(shape[group], onset[group], length=self.taps)
        return out

    def nearest_pair(self, direction: np.ndarray, *, exclude: int | None = None) -> HrirPair:
        """The nearest measured pair (the baseline the interpolation is tested against)."""
        d = normalize(np.asarray(direction, dtype=float).reshape(3))
        order = np.argsort(angle_between(self.directions, d))
        nearest = int(order[1] if exclude is not None and order[0] == exclude else order[0])
        error = float(angle_between(d, self.directions[nearest]))
        return HrirPair(self.ir[nearest].copy(), "nearest", (nearest,), (1.0,), error)

    def field_values(self) -> dict[str, Any]:
        """The set's fields (name, rate, responses, directions, metadata), caches left out."""
        return {f.name: getattr(self, f.name) for f in fields(HrirSet) if f.name != "_cache"}

    def derived(self, **changes: Any) -> HrirSet:
        """A plain set like this one with ``changes``, and caches of its own."""
        return HrirSet(**{**self.field_values(), **changes})

    def without(self, index: int) -> HrirSet:
        """A copy with one measurement removed (for leave-one-out tests)."""
        keep = np.arange(self.measurements) != index
        return self.derived(ir=self.ir[keep], directions=self.directions[keep])

    def itd(self, index: int) -> float:
        """Interaural time difference of measurement ``index`` in seconds (left leads > 0)."""
        return interaural_time_difference(self.ir[index], self.samplerate)

    def itd_range(self) -> tuple[float, float]:
        """Smallest and largest ITD over the set, in seconds.

        Uses the threshold-free interaural cross-correlation below 1.5 kHz, which a
        stray early spike in the far ear cannot fool (an onset threshold can be).
        """
        itds = [
            cross_correlation_itd(self.ir[i], self.samplerate) for i in range(self.measurements)
        ]
        return float(min(itds)), float(max(itds))

    # -- prepared lookups, for a cache ---------------------------------------------------

    def lookup_state(self) -> dict[str, np.ndarray]:
        """What the direction lookups have prepared so far, as plain arrays.

        ``onsets`` (M, 2) and, once an interpolation has run, ``aligned`` (M, 2, L) and
        ``aligned_ref`` (a 0-d array): what :meth:`with_lookup_state` takes back, so that
        a cache can spare another process the onset search and alignment.
        """
        state: dict[str, np.ndarray] = {}
        if "onsets" in self._cache:
            state["onsets"] = self._cache["onsets"]
        if "aligned" in self._cache:
            aligned, ref = self._cache["aligned"]
            state["aligned"] = aligned
            state["aligned_ref"] = np.asarray(ref, dtype=np.float64)
        return state

    def with_lookup_state(self, state: dict[str, np.ndarray]) -> bool:
        """Take prepared lookups from :meth:`lookup_state`; False (nothing taken) if their
        shapes or types do not fit this set."""
        onsets, aligned, ref = state.get("onsets"), state.get("aligned"), state.get("aligned_ref")
        m = self.measurements
        if onsets is None or onsets.dtype != np.float64 or onsets.shape != (m, 2):
            return False
        if (aligned is None) != (ref is None):
            return False
        if aligned is not None and ref is not None:
            if aligned.dtype != np.float64 or aligned.ndim != 3:
                return False
            if aligned.shape[:2] != (m, 2) or aligned.shape[2] < self.taps:
                return False
            if ref.shape != () or not np.isfinite(ref):
                return False
            self._cache["aligned"] = (aligned, float(ref))
        self._cache["onsets"] = onsets
        return True

    # -- internals ----------------------------------------------------------------------

    def _onsets(self) -> np.ndarray:
        if "onsets" not in self._cache:
            self._cache["onsets"] = onset_times(self.ir, threshold_db=ONSET_THRESHOLD_DB)
        onsets: np.ndarray = self._cache["onsets"]
        return onsets

    def _aligned(self) -> tuple[np.ndarray, float]:
        """IRs shifted so every onset sits at one reference position, and that position."""
        if "aligned" not in self._cache:
            on = self._onsets()
            ref = max(float(on.min()) - ALIGN_LEAD_SAMPLES, 0.0)
            # Room at the end for the IR with the earliest onset being pulled later.
            length = self.taps + int(np.ceil(on.max() - ref)) + 1
            aligned = fractional_delay(self.ir, ref - on, length=length)
            self._cache["aligned"] = (aligned, ref)
        cached: tuple[np.ndarray, float] = self._cache["aligned"]
        return cached

    def _interpolate(self, indices: np.ndarray, weights: np.ndarray) -> np.ndarray:
        aligned, ref = self._aligned()
        on = self._onsets()
        w = np.asarray(weights)[:, None, None]
        shape = np.sum(w * aligned[indices], axis=0)  # (2, L)
        onset = np.asarray(weights) @ on[indices]  # (2,) weighted arrival per ear
        return fractional_delay(shape, onset - ref, length=self.taps)

    def _grid(self) -> _Grid:
        if "grid" not in self._cache:
            self._cache["grid"] = _build_grid(self.directions, self.name)
        grid: _Grid = self._cache["grid"]
        return grid

    def _enclosing(self, d: np.ndarray, grid: _Grid) -> tuple[np.ndarray, np.ndarray] | None:
        if grid.hull is not None:
            # A grid with a hull always has its facets' checks and inverses.
            assert grid.facet_ok is not None and grid.inverse is not None
            facets, weights = _facet_weights(d[None, :], grid)
            facet = int(facets[0])
            if not grid.facet_ok[facet]:
                return None
            verts = grid.hull.simplices[facet]
            w = np.clip(weights[0], 0.0, None)
            total = w.sum()
            if total <= 0:
                return None
            return verts, w / total
        if grid.ring_order is not None:
            return _ring_weights(d, self.directions, grid)
        return None


#: Facets looked at per direction: the one the ray meets first and any sharing its plane.
_COPLANAR_CANDIDATES = 8


def _facet_weights(d: np.ndarray, grid: _Grid) -> tuple[np.ndarray, np.ndarray]:
    """The hull facet holding each direction and its barycentric weights (unclipped).

    The ray from the centre along ``d`` leaves the hull through the facet with the
    largest ``n.d / -b`` (outward normal ``n``, offset ``b < 0``: the first plane it
    crosses). Measurement grids have many four-point faces (two rings with the same
    azimuths make trapezoids) that the hull splits into two triangles on one plane; the
    ray meets both planes at once, and only one of the two holds the direction, the one
    whose weights are all non-negative. Of the facets on the first plane the one whose
    smallest weight is largest is taken.
    """
    assert grid.hull is not None and grid.inverse is not None
    eq = grid.hull.equations
    scores = (d @ eq[:, :3].T) / -eq[:, 3]  # (n, F)
    k = min(_COPLANAR_CANDIDATES, scores.shape[1])
    candidates = np.argpartition(-scores, k - 1, axis=1)[:, :k]
    best = np.take_along_axis(scores, candidates, axis=1)
    weights = np.einsum("nkij,nj->nki", grid.inverse[candidates], d)
    on_plane = best >= best.max(axis=1, keepdims=True) - 1e-9
    merit = np.where(on_plane, weights.min(axis=2), -np.inf)
    pick = np.argmax(merit, axis=1)
    rows = np.arange(len(d))
    return candidates[rows, pick], weights[rows, pick]


def _build_grid(directions: np.ndarray, name: str) -> _Grid:
    from scipy.spatial import ConvexHull, QhullError, cKDTree

    tree = cKDTree(directions)
    m = len(directions)
    if m >= 2:
        dist, _ = tree.query(directions, k=2)
        chord = dist[:, 1]
        spacing = float(np.degrees(2 * np.arcsin(np.clip(np.median(chord) / 2, 0, 1))))
    else:
        spacing = 180.0
    # A facet is usable when its longest edge is no longer than a few grid spacings; the
    # factor 4 lets sparse rings near the poles through while rejecting the long fan of
    # triangles that closes a hole in the grid (tuned on the shipped and shared sets).
    max_edge = min(max(4.0 * spacing, 20.0), 75.0)
    if m >= 4 and np.linalg.matrix_rank(directions - directions.mean(0), tol=1e-6) == 3:
        try:
            hull = ConvexHull(directions)
        except QhullError:
            hull = None
        if hull is not None and np.all(hull.equations[:, 3] < -1e-9):
            simp = hull.simplices
            v = directions[simp]  # (F, 3 vertices, 3)
            edges = np.stack(
                [
                    angle_between(v[:, 0], v[:, 1]),
                    angle_between(v[:, 1], v[:, 2]),
                    angle_between(v[:, 2], v[:, 0]),
                ],
                axis=1,
            )
            ok = edges.max(axis=1) <= max_edge
            mats = np.transpose(v, (0, 2, 1))  # columns are the vertices
            inverse = np.linalg.pinv(mats)
            return _Grid(tree, spacing, hull, ok, inverse)
    # All directions on one great circle (e.g. a horizontal-only set): interpolate along it.
    if m >= 3:
        centred = directions
        _, _, vt = np.linalg.svd(centred)
        normal = vt[-1]
        if np.allclose(directions @ normal, 0.0, atol=1e-6):
            basis_u = directions[0] - (directions[0] @ normal) * normal
            basis_u /= np.linalg.norm(basis_u)
            basis_v = np.cross(normal, basis_u)
            ang = np.arctan2(directions @ basis_v, directions @ basis_u)
            order = np.argsort(ang)
            return _Grid(
                tree, spacing, None, None, None, order, np.stack([basis_u, basis_v, normal])
            )
    return _Grid(tree, spacing, None, None, None)


def _ring_weights(
    d: np.ndarray, directions: np.ndarray, grid: _Grid
) -> tuple[np.ndarray, np.ndarray] | None:
    # Only called for a ring grid, which has both.
    assert grid.ring_normal is not None and grid.ring_order is not None
    basis_u, basis_v, normal = grid.ring_normal
    if abs(float(d @ normal)) > np.sin(np.radians(1.0)):
        return None  # off the ring: the caller falls back to the nearest direction
    order = grid.ring_order
    ang = np.arctan2(directions[order] @ basis_v, directions[order] @ basis_u)
    a = np.arctan2(d @ basis_v, d @ basis_u)
    k = int(np.searchsorted(ang, a)) % len(order)
    i0, i1 = order[k - 1], order[k]
    a0, a1 = ang[k - 1], ang[k]
    span = (a1 - a0) % (2 * np.pi)
    gap_limit = np.radians(min(max(4.0 * grid.spacing_deg, 20.0), 75.0))
    if span == 0 or span > gap_limit:
        return None
    t = ((a - a0) % (2 * np.pi)) / span
    return np.array([i0, i1]), np.array([1.0 - t, t])


def file_sha256(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of a file, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


@functools.lru_cache(maxsize=16)
def _load_cached(
    path: str, mtime_ns: int, size: int, samplerate: float | None, name: str
) -> HrirSet:
    # A user's file is read in a limited child process; the shipped sets are trusted.
    data = read_sofa(path) if is_shipped(path) else read_sofa_guarded(path)
    hset = HrirSet.from_sofa(data, name=name, sha256=file_sha256(path))
    return hset if samplerate is None else hset.resampled(samplerate)


def load_hrir_set(
    path: str | os.PathLike[str], samplerate: float | None = None, *, name: str | None = None
) -> HrirSet:
    """Read a SOFA file into an :class:`HrirSet`, resampled to ``samplerate`` if given.

    Results are cached per (file, modification time, size, rate), so repeated renders
    at one rate read and resample a set once. Files other than the shipped sets are read
    by :func:`~earfold.renderer.hrtf.guard.read_sofa_guarded` (a child process with a time
    and memory limit), since a damaged SOFA file can hang or exhaust the HDF5 library.
    """
    p = os.fspath(path)
    try:
        st = os.stat(p)
    except OSError as exc:
        raise HrirError(f"cannot open HRTF set {p!r}: {exc.strerror or exc}") from None
    return _load_cached(p, st.st_mtime_ns, st.st_size, samplerate, name or Path(p).name)
