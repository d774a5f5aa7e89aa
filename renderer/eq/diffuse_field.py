"""Diffuse-field equalisation of an HRIR set.

A measured HRIR set carries the colour of the ear canal (or the dummy head's coupler) and of
the measuring chain, common to every direction. Its *diffuse-field response* is the power
average of the responses over all directions, each weighted by the solid angle it stands
for; dividing every HRIR by it (a minimum-phase inverse filter) removes what all
directions share and keeps what tells them apart. After equalisation the set's
diffuse-field response is flat, so a render keeps the mix's tone and changing the set no
longer changes the tone as a whole.

* Solid-angle weights are the areas of the spherical Voronoi cells of the measured
  directions (:class:`scipy.spatial.SphericalVoronoi`). A set that leaves out part of the
  sphere (no directions below -40 degrees, say) gives the cells at the edge of the hole
  huge areas; each cell is capped at :data:`MAX_CELL_FACTOR` times the median, so the
  edge ring does not stand in for the missing cap.
* The response is the power average per ear, then the mean of the two ears (a set's ears
  need not be alike; one filter for both keeps the interaural differences untouched).
* The inverse is regularised: the response is smoothed in fractional octaves
  (:data:`SMOOTHING_OCTAVES`), boost is limited to :data:`MAX_BOOST_DB` above the in-band
  reference level, and outside the band the set really covers (:func:`usable_band`) the
  filter holds the edge value without boosting.
* The filter is minimum phase (homomorphic method, real cepstrum folded onto positive
  times; A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, ch. 13),
  so it adds almost no delay and the same delay to every direction.

The equalised set is computed once per set and rate and cached with the set
(:func:`equalised`), so renders after the first pay nothing for it.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any, cast

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from ..engine import DEFAULT_BLOCK_SIZE
from ..errors import EqualisationError, shown
from ..hrtf import HrirPair, HrirSet
from ..signals import minimum_phase_spectrum

#: The equalisation choices of ``--eq``.
EQ_CHOICES = ("none", "diffuse-field")

#: Fractional-octave width of the smoothing applied before inversion (power domain).
#: Smoothing of 1/3 to 1/12 octave is common practice for such target curves; a twelfth
#: keeps the equalised diffuse field within +/-0.8 dB from 200 Hz to 12 kHz on every
#: shipped and shared set (a sixth left +/-1.7 dB on one), while the boost limit below
#: still keeps deep notches from becoming peaks.
SMOOTHING_OCTAVES = 1.0 / 12.0

#: Most boost (dB) the inverse may apply above the in-band reference level. Deeper dips
#: of the diffuse-field response are filled only this far, so no notch becomes a
#: narrow, loud peak.
MAX_BOOST_DB = 18.0

#: The usable band is where the smoothed diffuse-field response stays within this many dB
#: of its level between 500 Hz and 2 kHz. Measuring loudspeakers roll off at the low
#: end, and anti-aliasing filters at the top; below -30 dB there is mostly noise.
USABLE_FLOOR_DB = -30.0

#: Band (Hz) whose mean level is the reference for the usable band and for the boost limit.
REFERENCE_BAND_HZ = (500.0, 2000.0)

#: A Voronoi cell larger than this many times the median cell stands at the edge of a
#: hole in the grid; it is capped here (1.0 would force equal weights at the edge).
MAX_CELL_FACTOR = 3.0

#: Length of the inverse filter in seconds (about 43 ms: 2048 taps at 48 kHz). Long enough
#: for twelfth-octave detail down to about 200 Hz; with the engine's 8192-frame partitions
#: an equalised HRIR still fits one partition, so equalisation costs nothing per block.
INVERSE_SECONDS = 2048 / 48000

#: Shortest inverse filter in seconds (about 21 ms). At high rates the inverse is
#: shortened, down to this, where its full length would push an HRIR that fits one
#: engine partition into a second one (the KEMAR set at 192 kHz: 2230 taps plus 8192
#: would need two partitions of 8192; 5962 taps fit), which would double the engine's
#: multiply-accumulate work for a little more resolution below about 300 Hz.
MIN_INVERSE_SECONDS = 1024 / 48000

#: No boost outside these frequencies (Hz) whatever the set holds: the audio band.
LOWEST_HZ = 20.0
HIGHEST_HZ = 20000.0

#: Octave-band centres (Hz) of the text summary (IEC 61260 nominal frequencies).
OCTAVE_CENTRES_HZ = (63, 125, 250, 500, 1000, 2000, 4000, 8000, 16000)


@dataclass(frozen=True)
class DiffuseField:
    """The diffuse-field response of a set.

    Attributes
    ----------
    freqs : ndarray
        Frequencies (Hz) of the bins.
    power : ndarray, shape (2, F)
        Solid-angle-weighted power average per ear.
    weights : ndarray, shape (M,)
        Solid angle (steradians) of each measurement after capping.
    weighting : str
        ``"spherical voronoi"`` or ``"equal"`` (when the grid is one ring or too small).
    capped : int
        Cells capped at :data:`MAX_CELL_FACTOR` times the median.
    samplerate : float
    """

    freqs: NDArray[np.float64]
    power: NDArray[np.float64]
    weights: NDArray[np.float64]
    weighting: str
    capped: int
    samplerate: float

    @property
    def level_db(self) -> NDArray[np.float64]:
        """Mean of the two ears' power, in dB (the curve the inverse flattens)."""
        level = 10 * np.log10(np.maximum(self.power.mean(axis=0), 1e-30))
        return cast(NDArray[np.float64], level)


def voronoi_areas(directions: NDArray[np.float64]) -> NDArray[np.float64]:
    """Solid angle of each direction's spherical Voronoi cell (sum 4 pi).

    Repeated directions share their cell equally. Raises :class:`EqualisationError` when
    the directions do not span the sphere (fewer than four, or all on one great circle).
    """
    d = np.asarray(directions, dtype=float)
    d = d / np.linalg.norm(d, axis=1, keepdims=True)
    unique, inverse, counts = np.unique(
        np.round(d, 9), axis=0, return_inverse=True, return_counts=True
    )
    inverse = inverse.reshape(-1)
    if len(unique) < 4 or np.linalg.matrix_rank(unique - unique.mean(0), tol=1e-6) < 3:
        raise EqualisationError(
            f"{len(unique)} distinct directions do not span the sphere; no Voronoi weights"
        )
    unique = unique / np.linalg.norm(unique, axis=1, keepdims=True)
    from scipy.spatial import SphericalVoronoi

    try:
        sv = SphericalVoronoi(unique, radius=1.0, center=np.zeros(3))
    except ValueError as exc:
        raise EqualisationError(f"spherical Voronoi diagram failed: {exc}") from None
    areas = sv.calculate_areas()
    return cast(NDArray[np.float64], areas[inverse] / counts[inverse])


def solid_angle_weights(
    directions: NDArray[np.float64],
) -> tuple[NDArray[np.float64], str, int]:
    """Weights of the measured directions for the diffuse-field average.

    Returns
    -------
    weights : ndarray
        Steradians per direction, cells at a hole's edge capped (so the sum is 4 pi only
        for a grid that covers the sphere).
    weighting : str
        ``"spherical voronoi"``, or ``"equal"`` when the grid is too small or one ring.
    capped : int
        How many cells were capped.
    """
    try:
        areas = voronoi_areas(directions)
    except EqualisationError:
        m = len(directions)
        return np.full(m, 4 * np.pi / m), "equal", 0
    limit = MAX_CELL_FACTOR * float(np.median(areas))
    capped = int(np.sum(areas > limit))
    return np.minimum(areas, limit), "spherical voronoi", capped


def fft_size(hset: HrirSet) -> int:
    """Transform length for the set's responses and its inverse filter."""
    need = 4 * max(hset.taps, inverse_taps(hset.samplerate))
    return max(8192, 1 << int(np.ceil(np.log2(need))))


def inverse_taps(samplerate: float, set_taps: int | None = None) -> int:
    """Taps of the inverse filter at a rate (:data:`INVERSE_SECONDS`, even).

    With ``set_taps``, shortened so that the equalised responses, ``set_taps + taps - 1``
    long, need no more engine partitions (:data:`earfold.renderer.engine.DEFAULT_BLOCK_SIZE`
    frames) than the set's own, where :data:`MIN_INVERSE_SECONDS` is enough for that.
    """
    taps = 2 * int(round(INVERSE_SECONDS * samplerate / 2))
    if set_taps is not None:
        block = DEFAULT_BLOCK_SIZE
        room = -(-int(set_taps) // block) * block - int(set_taps) + 1  # fits the same parts
        shortest = 2 * int(round(MIN_INVERSE_SECONDS * samplerate / 2))
        fit = room - room % 2
        if fit >= shortest:  # else the equalised set spills over whatever the length
            taps = min(taps, fit)
    return taps


def diffuse_field(
    hset: HrirSet, *, weighted: bool = True, n_fft: int | None = None
) -> DiffuseField:
    """The set's diffuse-field response (``weighted=False``: plain mean over directions)."""
    n = n_fft or fft_size(hset)
    if weighted:
        weights, weighting, capped = solid_angle_weights(hset.directions)
    else:
        weights, weighting, capped = np.ones(hset.measurements), "equal", 0
    w = weights / weights.sum()
    power = np.zeros((2, n // 2 + 1))
    # In chunks: a 1550-direction set at n = 8192 would otherwise need 200 MB of spectra.
    for start in range(0, hset.measurements, 32):
        spec = scipy.fft.rfft(hset.ir[start : start + 32], n=n, axis=-1)
        power += np.einsum("m,mef->ef", w[start : start + 32], np.abs(spec) ** 2)
    freqs = cast(NDArray[np.float64], np.fft.rfftfreq(n, 1.0 / hset.samplerate))
    return DiffuseField(freqs, power, weights, weighting, capped, hset.samplerate)


def smooth_fractional_octave(
    freqs: NDArray[np.float64], power: NDArray[np.float64], octaves: float
) -> NDArray[np.float64]:
    """Mean of ``power`` over ``[f 2^(-o/2), f 2^(o/2)]`` at every bin (power domain).

    DC keeps its own value; windows are at least one bin wide either side.
    """
    p = np.asarray(power, dtype=float)
    csum = np.concatenate([[0.0], np.cumsum(p)])
    df = freqs[1] - freqs[0]
    half = 2.0 ** (octaves / 2)
    lo = np.clip(np.floor(freqs / half / df).astype(int), 0, len(p) - 1)
    hi = np.clip(np.ceil(freqs * half / df).astype(int), 0, len(p) - 1)
    lo = np.minimum(lo, np.arange(len(p)) - 1).clip(0)
    hi = np.maximum(hi, np.arange(len(p)) + 1).clip(max=len(p) - 1)
    out = (csum[hi + 1] - csum[lo]) / (hi - lo + 1)
    out[0] = p[0]
    return cast(NDArray[np.float64], out)


def usable_band(df: DiffuseField) -> tuple[float, float]:
    """Lowest and highest frequency (Hz) the set really covers.

    The band around 1 kHz where the third-octave-smoothed response stays above
    :data:`USABLE_FLOOR_DB` relative to the reference level (:data:`REFERENCE_BAND_HZ`),
    and inside :data:`LOWEST_HZ` to :data:`HIGHEST_HZ`.
    """
    smooth = smooth_fractional_octave(df.freqs, df.power.mean(axis=0), 1.0 / 3.0)
    level = 10 * np.log10(np.maximum(smooth, 1e-30))
    ref = _reference_db(df.freqs, level)
    ok = level >= ref + USABLE_FLOOR_DB
    centre = int(np.searchsorted(df.freqs, 1000.0))
    lo = centre
    floor = int(np.searchsorted(df.freqs, LOWEST_HZ))
    while lo > floor and ok[lo - 1]:
        lo -= 1
    hi = centre
    ceiling = min(int(np.searchsorted(df.freqs, HIGHEST_HZ, side="right")), len(ok)) - 1
    while hi < ceiling and ok[hi + 1]:
        hi += 1
    return float(df.freqs[lo]), float(df.freqs[hi])


def _reference_db(freqs: NDArray[np.float64], level_db: NDArray[np.float64]) -> float:
    band = (freqs >= REFERENCE_BAND_HZ[0]) & (freqs <= REFERENCE_BAND_HZ[1])
    return float(10 * np.log10(np.mean(10 ** (level_db[band] / 10))))


def inverse_filter(
    df: DiffuseField, taps: int | None = None
) -> tuple[NDArray[np.float64], dict[str, Any]]:
    """Regularised minimum-phase inverse of a diffuse-field response.

    Returns the filter (1-D, ``taps`` long) and a summary for reports.
    """
    n_taps = taps or inverse_taps(df.samplerate)
    n = 2 * (len(df.freqs) - 1)
    smooth = smooth_fractional_octave(df.freqs, df.power.mean(axis=0), SMOOTHING_OCTAVES)
    level = 10 * np.log10(np.maximum(smooth, 1e-30))
    ref = _reference_db(df.freqs, level)
    lo, hi = usable_band(df)
    # Target gain in dB re the reference level: the equalised set keeps its level in the
    # reference band (the calibration stage sets the render's level afterwards).
    gain = ref - level
    gain = np.minimum(gain, MAX_BOOST_DB)
    inside = (df.freqs >= lo) & (df.freqs <= hi)
    first, last = np.flatnonzero(inside)[[0, -1]]
    # Outside the usable band: hold the edge gain, but never boost there.
    gain[:first] = min(gain[first], 0.0)
    gain[last + 1 :] = min(gain[last], 0.0)
    # Smooth the clamped target so the edges do not ring.
    gain_lin = np.sqrt(smooth_fractional_octave(df.freqs, 10 ** (gain / 10), SMOOTHING_OCTAVES))
    fir = _minimum_phase(gain_lin / 10 ** (ref / 20), n, n_taps)
    boost = gain[first : last + 1]
    summary = {
        "usable_band_hz": [round(lo, 1), round(hi, 1)],
        "reference_level_db": round(ref, 2),
        "max_boost_db": round(float(boost.max()), 2),
        "max_cut_db": round(float(-boost.min()), 2),
        "boost_limited": bool(np.any(ref - level[first : last + 1] > MAX_BOOST_DB)),
        "smoothing_octaves": round(SMOOTHING_OCTAVES, 4),
        "taps": n_taps,
    }
    return fir, summary


def _minimum_phase(magnitude: NDArray[np.float64], n: int, taps: int) -> NDArray[np.float64]:
    """Minimum-phase FIR of a magnitude on ``n // 2 + 1`` bins (real cepstrum method)."""
    h = np.fft.irfft(minimum_phase_spectrum(magnitude, n), n=n)[:taps]
    # A short half-Hann fade over the last eighth keeps the truncation from ringing.
    fade = max(taps // 8, 1)
    h[-fade:] *= 0.5 * (1 + np.cos(np.linspace(0, np.pi, fade)))
    return h


def octave_summary(df: DiffuseField) -> dict[str, float | None]:
    """The diffuse-field level per octave band (dB re the reference band), by centre."""
    level = df.power.mean(axis=0)
    ref = _reference_db(df.freqs, 10 * np.log10(np.maximum(level, 1e-30)))
    out: dict[str, float | None] = {}
    for fc in OCTAVE_CENTRES_HZ:
        band = (df.freqs >= fc / np.sqrt(2)) & (df.freqs < fc * np.sqrt(2))
        if fc * np.sqrt(2) > df.samplerate / 2 or not band.any():
            out[str(fc)] = None
            continue
        out[str(fc)] = round(float(10 * np.log10(np.mean(level[band]) + 1e-30) - ref), 1)
    return out


def describe(hset: HrirSet) -> dict[str, Any]:
    """Diffuse-field figures of a set (for ``earfold hrtf inspect`` and reports)."""
    return equalised(hset)[1]


@dataclass(frozen=True, eq=False)
class EqualisedHrirSet(HrirSet):
    """An HRIR set with one equalisation filter applied to every response.

    :attr:`ir` holds the equalised responses (for whole-set uses such as the room's
    diffuse tail), but direction lookups run on the original set and filter the chosen
    pair: the filter is the same for every direction, so filtering after interpolation
    equals interpolating filtered responses, and the lookup's preparation (onsets,
    alignment, triangulation) stays on the shorter original responses.
    """

    raw: HrirSet | None = None
    fir: NDArray[np.float64] | None = None

    def pair(self, direction: NDArray[np.float64]) -> HrirPair:
        return self._filtered(self._lookup().pair(direction))

    def pairs(self, directions: NDArray[np.float64]) -> NDArray[np.float64]:
        return _convolve_all(self._lookup().pairs(directions), self._fir())

    def nearest_pair(
        self, direction: NDArray[np.float64], *, exclude: int | None = None
    ) -> HrirPair:
        return self._filtered(self._lookup().nearest_pair(direction, exclude=exclude))

    def _grid(self) -> Any:
        # The original set's grid (of the hrtf wing's own private type, not named here).
        return self._lookup()._grid()

    def _lookup(self) -> HrirSet:
        if self.raw is None:  # only built by equalised(), which always sets it
            raise EqualisationError(f"equalised set {self.name!r} has no original set")
        return self.raw

    def _filtered(self, pair: HrirPair) -> HrirPair:
        return dataclasses.replace(pair, ir=_convolve_all(pair.ir, self._fir()))

    def _fir(self) -> NDArray[np.float64]:
        if self.fir is None:  # only built by equalised(), which always sets it
            raise EqualisationError(f"equalised set {self.name!r} has no filter")
        return self.fir


def equalised(hset: HrirSet) -> tuple[HrirSet, dict[str, Any]]:
    """The set with its diffuse-field inverse applied to every HRIR, and the EQ summary.

    Cached in the set's own cache, so a set loaded once (``load_hrir_set`` caches per
    file and rate) is equalised once.
    """
    cached = hset._cache.get("diffuse-field")
    if cached is not None:
        return cast(tuple[HrirSet, dict[str, Any]], cached)
    df = diffuse_field(hset)
    fir, summary = inverse_filter(df, inverse_taps(hset.samplerate, hset.taps))
    ir = _convolve_all(hset.ir, fir)
    # The lookups run on a twin of the original set (same arrays, own caches), not on the
    # set itself: the set caches the equalised set, and a reference back would make a
    # cycle that keeps both alive until the cyclic garbage collector runs.
    lookup = hset.derived()
    eq_set = EqualisedHrirSet(raw=lookup, fir=fir, **{**hset.field_values(), "ir": ir})
    summary = {
        "weighting": df.weighting,
        "capped_cells": df.capped,
        "covered_solid_angle_sr": round(float(df.weights.sum()), 3),
        "octave_bands_db": octave_summary(df),
        **summary,
    }
    hset._cache["diffuse-field"] = (eq_set, summary)
    return eq_set, summary


def _convolve_all(ir: NDArray[np.float64], fir: NDArray[np.float64]) -> NDArray[np.float64]:
    """Every response convolved with one filter (full length).

    In chunks of 128 responses into one output array, so a large set's transforms never
    sit in memory all at once (a whole 710-direction set at once peaked near 200 MB).
    """
    length = ir.shape[-1] + len(fir) - 1
    n = 1 << int(np.ceil(np.log2(length)))
    g = scipy.fft.rfft(fir, n=n)
    flat = ir.reshape(-1, ir.shape[-1])
    out = np.empty((flat.shape[0], length))
    for start in range(0, flat.shape[0], 128):
        spec = scipy.fft.rfft(flat[start : start + 128], n=n, axis=-1)
        out[start : start + 128] = scipy.fft.irfft(spec * g, n=n, axis=-1)[:, :length]
    return out.reshape(ir.shape[:-1] + (length,))


def check_eq(value: str | None) -> str | None:
    """Validate an ``--eq`` value (None: the set's default)."""
    if value is None or value in EQ_CHOICES:
        return value
    raise EqualisationError(
        f"unknown equalisation {shown(value)}; choose one of {', '.join(EQ_CHOICES)}"
    )
