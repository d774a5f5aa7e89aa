"""How the limiter's gain is made from point peaks: need, hold, release, ramp.

Steps 1 to 3 of :mod:`earfold.renderer.loudness.limiter`: each sample needs the reduction
of the strictest point whose window it is in; that need is held over the look-ahead
plus the interpolator's history, released exponentially in dB, and averaged over the
look-ahead into a smooth ramp. Reductions are averaged as integers (:data:`U_SCALE`), so
the gain does not depend on where a processing step starts.
"""

from __future__ import annotations

import math
from typing import NamedTuple, cast

import numpy as np
from numpy.typing import NDArray

__all__ = ["U_SCALE", "GainCurve", "forward_max", "gain_curve", "quantise", "release"]

RELEASE_FLOOR_DB = 1e-4
# A release that has decayed below 0.0001 dB (1e-5 in amplitude) ends: the gain returns
# to exactly 1, so quiet passages after a limited one are bit-transparent again.

U_SCALE = float(2**36)
# Gain reductions are averaged as integers in units of 2**-36: an exact running sum, so
# the result does not depend on where a step starts, and a window without reduction
# averages to exactly 0 (gain exactly 1).


class GainCurve(NamedTuple):
    """The gain of a run of frames and the state the next run continues from."""

    gain: NDArray[np.float64]
    """Linear gain per frame."""
    release: NDArray[np.float64]
    """Held and released reduction per frame, in dB."""
    units: NDArray[np.int64]
    """The released reduction quantised (:func:`quantise`), per frame."""
    first_held: NDArray[np.float64]
    """The held reduction of the first frame (one value), in dB."""


def gain_curve(
    points: NDArray[np.float64],
    limits: NDArray[np.float64],
    frames: int,
    *,
    history: int,
    lookahead: int,
    target: float,
    release_per_frame: float,
    previous_release: float,
    ramp_history: NDArray[np.int64] | None,
) -> GainCurve:
    """Gain of ``frames`` frames from point peaks and extra limits.

    Parameters
    ----------
    points : numpy.ndarray
        Point peaks (linear) from the first frame on, ``frames + lookahead - 1 + 2 *
        history`` of them at least.
    limits : numpy.ndarray
        Extra gain limits per frame (linear, 1 for none) from corrections.
    frames : int
        Frames whose gain is wanted.
    history, lookahead : int
        Interpolator history and look-ahead, in frames.
    target : float
        Level (linear) no point may exceed.
    release_per_frame : float
        Log decay of the release per frame.
    previous_release : float
        Released reduction (dB) of the frame before the first.
    ramp_history : numpy.ndarray or None
        Quantised reductions of the ``lookahead - 1`` frames before the first; None at
        the start of a stream.
    """
    e = history
    # Need of each sample, in dB of reduction: the strictest point it belongs to.
    worst = forward_max(points, e + 1)[: limits.size]
    with np.errstate(divide="ignore"):
        need = np.maximum(20.0 * np.log10(np.maximum(worst, 1e-300) / target), 0.0)
        need = np.maximum(need, -20.0 * np.log10(np.maximum(limits, 1e-15)))
    held = forward_max(need, lookahead + e)[:frames]
    r = release(held, release_per_frame, previous_release)
    u = quantise(r)
    if lookahead > 1:
        hist = ramp_history
        if hist is None:
            # Before the stream there is only silence, whose gain does not matter: let
            # it carry the first frame's held reduction, so the ramp down for a peak
            # at the very start happens "before" it instead of being cut short.
            hist = np.full(lookahead - 1, quantise(held[:1])[0])
        csum = np.concatenate([[0], np.cumsum(np.concatenate([hist, u]))])
        window = csum[lookahead:] - csum[:-lookahead]
    else:
        window = u
    g = 1.0 - window / (lookahead * U_SCALE)
    return GainCurve(g, r, u, held[:1])


def release(held: NDArray[np.float64], per_frame: float, previous: float) -> NDArray[np.float64]:
    """r[i] = max(held[i], r[i-1] * exp(-lambda)), vectorised in the log domain."""
    lam = per_frame
    i = np.arange(held.size)
    with np.errstate(divide="ignore"):
        v = np.log(held) + i * lam
        start = math.log(previous) - lam if previous > 0 else -math.inf
    acc = np.maximum.accumulate(np.maximum(v, start))
    r = np.exp(acc - i * lam)
    r = np.maximum(r, held)  # exact where the need itself sets the reduction
    r[r < RELEASE_FLOOR_DB] = 0.0
    return cast(NDArray[np.float64], r)


def quantise(reduction_db: NDArray[np.float64]) -> NDArray[np.int64]:
    """Gain reduction 1 - gain in units of 2**-36, rounded up (never less reduction)."""
    return np.ceil((1.0 - 10.0 ** (-reduction_db / 20.0)) * U_SCALE).astype(np.int64)


def forward_max(a: NDArray[np.float64], size: int) -> NDArray[np.float64]:
    """m[i] = max(a[i : i + size]), with a taken as 0 beyond its end."""
    if size <= 1 or a.size == 0:
        return a.copy()
    # Imported here: only a limiter that limits computes a gain curve, and a render
    # without one need not load scipy.ndimage.
    from scipy.ndimage import maximum_filter1d

    return cast(
        NDArray[np.float64],
        maximum_filter1d(a, size, origin=-(size // 2), mode="constant", cval=0.0),
    )
