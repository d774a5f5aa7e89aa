"""The K-weighting filter of ITU-R BS.1770-4 at any rate, and the channel weights."""

from __future__ import annotations

import functools
import math
from typing import TYPE_CHECKING, cast

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:
    from ..layouts import Layout

__all__ = [
    "K_WEIGHTING_48K",
    "TAIL_BOUND",
    "channel_weights",
    "k_weighting_impulse_response",
    "k_weighting_parameters",
    "k_weighting_sos",
]

_Biquad = tuple[tuple[float, float, float], tuple[float, float, float]]

K_WEIGHTING_48K: dict[str, _Biquad] = {
    "shelf": (
        (1.53512485958697, -2.69169618940638, 1.19839281085285),
        (1.0, -1.69065929318241, 0.73248077421585),
    ),
    "highpass": ((1.0, -2.0, 1.0), (1.0, -1.99004745483398, 0.99007225036621)),
}
"""The K-weighting biquads at 48 kHz as published in ITU-R BS.1770-4 (Tables 1 and 2),
``(b, a)`` per stage."""


def k_weighting_parameters() -> dict[str, dict[str, float]]:
    """Analogue prototype parameters of the K-weighting, derived from the 48 kHz biquads.

    Each published biquad is a bilinear transform, pre-warped at its corner frequency
    ``f0`` (``K = tan(pi f0 / fs)``), of the analogue section

    * shelf: ``H(s) = (Vh S^2 + Vb S / Q + 1) / (S^2 + S / Q + 1)``, ``S = s / (2 pi f0)``;
    * high-pass: ``H(s) = g S^2 / (S^2 + S / Q + 1)``.

    This inverts that transform in closed form on the published coefficients
    (:data:`K_WEIGHTING_48K`): with normalised ``a1, a2``,
    ``K^2 = (1 + a1 + a2) / (1 - a1 + a2)``, ``a0 = 4 / (1 - a1 + a2)``,
    ``K / Q = a0 (1 - a2) / 2``, ``Vh = a0 (b0 - b1 + b2) / 4``,
    ``Vb = a0 (b0 - b2) / (2 K / Q)``, ``g = a0 b0`` (our derivation; the same form is
    used by open implementations of BS.1770, whose fitted values, recalled from the
    libebur128 source, are f0 = 1681.97 Hz, Q = 0.70718, gain 4.00 dB for the shelf and
    f0 = 38.135 Hz, Q = 0.50033 for the high-pass).

    Returns
    -------
    dict
        ``{"shelf": {"f0", "q", "vh", "vb"}, "highpass": {"f0", "q", "gain"}}``.
    """
    fs = 48000.0
    out: dict[str, dict[str, float]] = {}
    for stage in ("shelf", "highpass"):
        b, a = (np.asarray(c, dtype=float) for c in K_WEIGHTING_48K[stage])
        k2 = (1 + a[1] + a[2]) / (1 - a[1] + a[2])
        a0 = 4.0 / (1 - a[1] + a[2])
        k = math.sqrt(k2)
        k_over_q = a0 * (1 - a[2]) / 2.0
        params: dict[str, float] = {"f0": fs / math.pi * math.atan(k), "q": k / k_over_q}
        if stage == "shelf":
            params["vh"] = a0 * (b[0] - b[1] + b[2]) / 4.0
            params["vb"] = a0 * (b[0] - b[2]) / (2.0 * k_over_q)
        else:
            params["gain"] = a0 * b[0]
        out[stage] = params
    return out


_K_PARAMS = k_weighting_parameters()


def k_weighting_sos(samplerate: float) -> NDArray[np.float64]:
    """K-weighting as second-order sections for any sample rate.

    The analogue prototype of :func:`k_weighting_parameters` is transformed again with
    the bilinear transform pre-warped at each corner frequency. At 48 kHz this gives back
    the coefficients published in BS.1770-4 (to about 1e-15). From 44.1 kHz up the
    response stays within 0.01 dB of the analogue one to 10 kHz; at low rates the
    transform's frequency warping grows (about 0.2 dB around 1-2 kHz at 8 kHz).

    Returns
    -------
    numpy.ndarray
        Shape ``(2, 6)``, rows ``(b0, b1, b2, 1, a1, a2)`` as
        :func:`scipy.signal.sosfilt` takes them: shelf, then high-pass.
    """
    fs = float(samplerate)
    sh, hp = _K_PARAMS["shelf"], _K_PARAMS["highpass"]

    k = math.tan(math.pi * sh["f0"] / fs)
    kq = k / sh["q"]
    a0 = 1 + kq + k * k
    shelf = [
        (sh["vh"] + sh["vb"] * kq + k * k) / a0,
        2 * (k * k - sh["vh"]) / a0,
        (sh["vh"] - sh["vb"] * kq + k * k) / a0,
        1.0,
        2 * (k * k - 1) / a0,
        (1 - kq + k * k) / a0,
    ]

    k = math.tan(math.pi * hp["f0"] / fs)
    kq = k / hp["q"]
    a0 = 1 + kq + k * k
    g = hp["gain"] / a0
    highpass = [g, -2 * g, g, 1.0, 2 * (k * k - 1) / a0, (1 - kq + k * k) / a0]
    return np.array([shelf, highpass])


TAIL_BOUND = 1e-10
"""The impulse response of :func:`k_weighting_impulse_response` ends where the sum of
the magnitudes it leaves out is at most this: the truncated filter's output differs
from the recursive one's by at most ``1e-10`` times the largest input magnitude
(-200 dB), far below the float32 rounding (about ``6e-8``) of the transforms that apply
it. At 48 kHz that keeps 5234 taps."""

_ALIAS_DECAY = 1e-40
# The frequency grid is at least twice as long as the time the slowest pole takes to
# decay by this factor, so what folds back onto the kept taps is below 1e-80.


@functools.lru_cache(maxsize=8)
def k_weighting_impulse_response(samplerate: float) -> NDArray[np.float64]:
    """The K-weighting's impulse response, truncated where its tail no longer matters.

    The response of the two biquads of :func:`k_weighting_sos` is evaluated on a grid
    of ``M`` frequencies and transformed back (an inverse real FFT), which gives the
    impulse response folded onto ``M`` samples (sampling a response in frequency
    aliases it in time; nothing else is approximated). ``M`` is a power of two at
    least twice the time the slowest pole (radius ``r``) takes to decay by 1e-40, so
    the folding is far below float64 precision; no recursion is run. The response then stops where
    the sum of the magnitudes after it is at most :data:`TAIL_BOUND`.

    Parameters
    ----------
    samplerate : float
        Sample rate in Hz.

    Returns
    -------
    numpy.ndarray
        The taps (float64, read-only, cached per rate): 5234 at 48 kHz, about 870 at
        8 kHz, 84 000 at 768 kHz (the high-pass's poles approach the unit circle as the
        rate grows).

    Examples
    --------
    >>> h = k_weighting_impulse_response(48000)
    >>> h.size
    5234
    >>> round(float(h[0]), 6)  # b0 of the shelf times b0 of the high-pass
    1.535125
    """
    from scipy import fft

    sos = k_weighting_sos(samplerate)
    radius = max(float(np.abs(np.roots(row[3:])).max()) for row in sos)
    decay = math.log(_ALIAS_DECAY) / math.log(radius)
    size = 1 << max(10, math.ceil(math.log2(2.0 * decay)))
    omega = 2.0 * np.pi * np.arange(size // 2 + 1) / size
    # Each polynomial p0 + p1 z^-1 + p2 z^-2 is evaluated in w = 1 - z^-1, as
    # (p0 + p1 + p2) - (p1 + 2 p2) w + p2 w^2: near DC, where the high-pass's poles sit
    # and its denominator is about 2.5e-5 at 48 kHz, the form in z^-1 loses digits to
    # cancellation and leaves a noise floor near 1e-15 per tap (1e-18 this way).
    w = 2.0 * np.sin(omega / 2.0) ** 2 + 1j * np.sin(omega)
    response = np.ones(omega.size, dtype=complex)
    for b0, b1, b2, a0, a1, a2 in sos:
        numerator = (b0 + b1 + b2) - (b1 + 2.0 * b2) * w + b2 * w * w
        response *= numerator / ((a0 + a1 + a2) - (a1 + 2.0 * a2) * w + a2 * w * w)
    folded = fft.irfft(response, size)
    tail = np.cumsum(np.abs(folded[::-1]))[::-1]  # tail[n] = sum of |h[n:]|
    taps = folded[: int(np.argmax(tail <= TAIL_BOUND))].copy()
    taps.flags.writeable = False
    return cast(NDArray[np.float64], taps)


def channel_weights(layout: Layout | str) -> NDArray[np.float64]:
    """BS.1770 channel weights for a loudspeaker layout, from the speaker positions.

    LFE channels weigh 0 (excluded); a speaker with ``|elevation| < 30`` and
    ``60 <= |azimuth| <= 120`` degrees weighs 1.41 (+1.5 dB); every other speaker 1.0.
    For 5.1 this is the Recommendation's table (L, R, C 1.0; Ls, Rs 1.41). The position
    rule for other layouts is as seen in open implementations of BS.1770 (confirm in the
    Recommendation). An Ambisonic scene (:class:`~earfold.renderer.layouts.SceneLayout`)
    is weighed by its W channel alone, its omnidirectional pressure
    (:attr:`~earfold.renderer.layouts.SceneLayout.loudness_weights`).

    Parameters
    ----------
    layout : Layout or str
        A :class:`earfold.renderer.layouts.catalogue.Layout` or a layout name.

    Returns
    -------
    numpy.ndarray
        One weight per channel, in the layout's default order.
    """
    from ..layouts import SceneLayout, get_layout

    if isinstance(layout, str):
        layout = get_layout(layout)
    if isinstance(layout, SceneLayout):
        return np.array(layout.loudness_weights)
    weights: list[float] = []
    for spk in layout.speakers:
        if spk.lfe:
            weights.append(0.0)
        elif abs(spk.elevation) < 30.0 and 60.0 <= abs(spk.azimuth) <= 120.0:
            weights.append(1.41)
        else:
            weights.append(1.0)
    return np.array(weights)
