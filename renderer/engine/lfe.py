"""The LFE channel's path to the ears.

The low-frequency effects channel is not a loudspeaker direction: it is low-passed,
given its in-band gain and fed equally to both ears without an HRIR. Common practice
(ITU-R BS.775 Annex 7 for the +10 dB; 120 Hz is the usual band edge): the LFE signal is
recorded 10 dB down and reproduced with +10 dB in-band gain, up to 120 Hz.

The path is turned into an FIR pair so that the convolution engine treats it like any
other channel: the impulse response of a Butterworth low-pass, scaled to the set's
low-frequency level and delayed to arrive with the front-centre direct sound.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..errors import RendererError
from ..signals import scipy_signal

#: LFE low-pass corner in Hz (common practice).
DEFAULT_LFE_CUTOFF_HZ = 120.0
#: LFE in-band gain in dB (ITU-R BS.775 Annex 7; common practice).
DEFAULT_LFE_GAIN_DB = 10.0
#: Accepted LFE in-band gains in dB (closed interval).
LFE_GAIN_RANGE_DB = (-40.0, 40.0)
#: Butterworth order of the LFE low-pass: 4 (24 dB/octave) is the usual bass-management slope.
DEFAULT_LFE_ORDER = 4
#: The FIR is cut where the low-pass's impulse response has decayed by this much (dB below
#: its peak); -120 dB is far below what a 24-bit output can show.
LFE_TRUNCATION_DB = -120.0


@dataclass(frozen=True)
class LfeOptions:
    """How the LFE channel reaches the ears.

    Attributes
    ----------
    cutoff_hz : float
        Low-pass corner frequency; ``0`` turns the low-pass off (full band).
    gain_db : float
        In-band gain.
    order : int
        Butterworth order of the low-pass.
    """

    cutoff_hz: float = DEFAULT_LFE_CUTOFF_HZ
    gain_db: float = DEFAULT_LFE_GAIN_DB
    order: int = DEFAULT_LFE_ORDER

    def __post_init__(self) -> None:
        if not np.isfinite(self.cutoff_hz) or self.cutoff_hz < 0:
            raise RendererError(f"LFE cutoff must be 0 Hz or more, got {self.cutoff_hz:g}")
        lo, hi = LFE_GAIN_RANGE_DB
        if not np.isfinite(self.gain_db) or not lo <= self.gain_db <= hi:
            raise RendererError(
                f"LFE gain must be between {lo:g} and {hi:g} dB, got {self.gain_db:g}"
            )
        if not 1 <= int(self.order) <= 12:
            raise RendererError(f"LFE filter order must be 1 to 12, got {self.order!r}")


def lfe_filter(
    samplerate: float,
    options: LfeOptions = LfeOptions(),
    *,
    reference_gain: float = 1.0,
    delay: int = 0,
) -> NDArray[np.float64]:
    """FIR pair (2, L) that carries the LFE channel to both ears.

    Parameters
    ----------
    samplerate : float
        Rate in Hz.
    options : LfeOptions
        Corner, gain and order.
    reference_gain : float
        Linear low-frequency gain of the HRIR set (what a centre loudspeaker gives at low
        frequencies), so that the LFE sits at the same reference level as the mains.
    delay : int
        Samples of delay, to arrive with the front-centre direct sound.
    """
    signal = scipy_signal()

    gain = reference_gain * 10 ** (options.gain_db / 20)
    if options.cutoff_hz == 0 or options.cutoff_hz >= samplerate / 2:
        h = np.zeros(1)
        h[0] = 1.0
    else:
        sos = signal.butter(options.order, options.cutoff_hz, fs=samplerate, output="sos")
        # Long enough for the slowest pole to decay past the truncation level.
        n = int(samplerate * 0.25)
        impulse = np.zeros(n)
        impulse[0] = 1.0
        h = signal.sosfilt(sos, impulse)
        env = np.abs(h)
        above = np.nonzero(env > env.max() * 10 ** (LFE_TRUNCATION_DB / 20))[0]
        h = h[: above[-1] + 1]
    h = np.concatenate([np.zeros(max(int(delay), 0)), h * gain])
    return np.stack([h, h])
