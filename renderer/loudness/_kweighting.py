"""The K-weighting filter of ITU-R BS.1770-4 at any rate, and the channel weights."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:
    from ..layouts import Layout

__all__ = [
    "K_WEIGHTING_48K",
    "channel_weights",
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
        Shape ``(2, 6)``, for :func:`scipy.signal.sosfilt`: shelf, then high-pass.
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


def channel_weights(layout: Layout | str) -> NDArray[np.float64]:
    """BS.1770 channel weights for a loudspeaker layout, from the speaker positions.

    LFE channels weigh 0 (excluded); a speaker with ``|elevation| < 30`` and
    ``60 <= |azimuth| <= 120`` degrees weighs 1.41 (+1.5 dB); every other speaker 1.0.
    For 5.1 this is the Recommendation's table (L, R, C 1.0; Ls, Rs 1.41). The position
    rule for other layouts is as seen in open implementations of BS.1770 (confirm in the
    Recommendation).

    Parameters
    ----------
    layout : Layout or str
        A :class:`earfold.renderer.layouts.catalogue.Layout` or a layout name.

    Returns
    -------
    numpy.ndarray
        One weight per channel, in the layout's default order.
    """
    if isinstance(layout, str):
        from ..layouts import get_layout

        layout = get_layout(layout)
    weights: list[float] = []
    for spk in layout.speakers:
        if spk.lfe:
            weights.append(0.0)
        elif abs(spk.elevation) < 30.0 and 60.0 <= abs(spk.azimuth) <= 120.0:
            weights.append(1.41)
        else:
            weights.append(1.0)
    return np.array(weights)
