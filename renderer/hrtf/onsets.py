"""Onsets of impulse responses, interaural time differences, fractional delays.

Two ITD estimates are offered:

* :func:`interaural_time_difference` -- the difference of the two ears' *onsets*, each
  the first crossing of a threshold (default -20 dB) below that IR's peak. It follows the
  arrival of the direct sound's leading edge, which is what the Woodworth formula models,
  and is what ``earfold hrtf inspect`` reports (through
  :meth:`earfold.renderer.hrtf.HrirSet.itd`).
* :func:`cross_correlation_itd` -- the lag of the maximum of the interaural
  cross-correlation of the pair low-passed below 1.5 kHz. It needs no threshold and
  measures the low-frequency delay that governs ITD perception; on a sphere it reads
  longer than the onset ITD (towards Kuhn's low-frequency limit ``3 a sin(theta) / c``).
  Use it as a cross-check: a large disagreement points at a noisy or pre-ringing IR.

Both are positive when the LEFT ear leads (the source is on the left).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import fft as sp_fft

from ..errors import HrirError, shown
from ..signals import scipy_signal

#: Default onset threshold in dB relative to each IR's absolute peak (common practice for
#: onset-based ITD estimation on measured HRIRs).
DEFAULT_THRESHOLD_DB = -20.0

#: Default oversampling factor for onset detection: the crossing is located on the
#: band-limited signal at 1/8-sample resolution, and linear interpolation between those
#: points leaves an error well under 0.01 sample on smooth onsets.
DEFAULT_OVERSAMPLE = 8

#: Cut-off (Hz) of the low-pass before cross-correlation: below about 1.5 kHz the ITD is
#: carried by the waveform's phase (common practice, after the duplex theory).
IACC_CUTOFF_HZ = 1500.0

#: Largest lag (seconds) the cross-correlation ITD searches: a little more than a large
#: human head's low-frequency ITD.
IACC_MAX_LAG_S = 1.0e-3


def onset_times(
    ir: np.ndarray,
    *,
    threshold_db: float = DEFAULT_THRESHOLD_DB,
    oversample: int = DEFAULT_OVERSAMPLE,
) -> np.ndarray:
    """Onset of each impulse response, in fractional samples.

    The onset is the first point where ``|ir|`` reaches ``threshold_db`` relative to its
    absolute peak. Each IR is oversampled by band-limited (trigonometric) interpolation,
    so that the peak and the crossing are those of the continuous signal rather than of
    its samples, and the crossing is placed by linear interpolation between the two
    oversampled points that straddle it.

    The interpolation zero-pads the spectrum of the IR (itself zero-padded to twice its
    length, so that the end does not wrap onto the start), with the Nyquist bin split
    between the two halves: the ideal sinc interpolator. A polyphase interpolator
    (:func:`scipy.signal.resample_poly`) was tried first; its anti-imaging filter rolls
    off just below Nyquist, which for responses with energy up to Nyquist (a band-limited
    impulse) made the -20 dB crossing move by up to 2 samples with the impulse's
    fractional position, and so spoiled onset alignment.

    Parameters
    ----------
    ir : ndarray, shape (..., N)
        Impulse responses along the last axis.
    threshold_db : float
        Threshold in dB relative to each IR's peak; negative.
    oversample : int
        Oversampling factor (1 disables it).

    Returns
    -------
    ndarray of float, shape ``ir.shape[:-1]``
        Onsets in samples from the start of each IR (0 if the first sample already
        reaches the threshold).

    Raises
    ------
    HrirError
        If an IR is all zeros (it has no onset) or the arguments are invalid.
    """
    x = np.asarray(ir, dtype=float)
    if x.ndim < 1 or x.shape[-1] < 1:
        raise HrirError(f"impulse responses need at least one sample, got shape {x.shape!r}")
    if not (np.isfinite(threshold_db) and threshold_db < 0):
        raise HrirError(
            f"onset threshold must be a negative number of dB, got {shown(threshold_db)}"
        )
    if int(oversample) != oversample or oversample < 1:
        raise HrirError(f"oversample must be a positive integer, got {shown(oversample)}")
    oversample = int(oversample)
    lead = x.shape[:-1]
    flat = x.reshape(-1, x.shape[-1])
    n = flat.shape[-1]
    onsets = np.empty(flat.shape[0])
    # Blocks bound the memory of the oversampled copies (a 710 x 2 x 512 set at 8x would
    # otherwise need about 200 MB at once).
    step = max(1, _ONSET_BLOCK_SAMPLES // (2 * n * oversample))
    for start in range(0, flat.shape[0], step):
        block = flat[start : start + step]
        fine = _oversample(block, oversample)
        mag = np.abs(fine)
        peak = mag.max(axis=-1)
        silent = np.flatnonzero(peak == 0)
        if silent.size:
            index = start + int(silent[0])
            where = np.unravel_index(index, lead) if lead else ()
            raise HrirError(
                f"impulse response at index {tuple(int(i) for i in where)!r} is all zeros, "
                f"so it has no onset"
            )
        level = peak * 10.0 ** (threshold_db / 20.0)
        first = np.argmax(mag >= level[:, None], axis=-1)  # exists: the peak is above
        rows = np.arange(block.shape[0])
        prev = np.maximum(first - 1, 0)
        lo = mag[rows, prev]
        hi = mag[rows, first]
        span = hi - lo
        frac = np.divide(level - lo, span, out=np.ones_like(span), where=span > 0)
        onsets[start : start + step] = np.where(first == 0, 0.0, prev + frac) / oversample
    return onsets.reshape(lead)


#: Oversampled samples held at once by :func:`onset_times` (about 32 MB of float64).
_ONSET_BLOCK_SAMPLES = 1 << 22


def _oversample(block: np.ndarray, factor: int) -> np.ndarray:
    """Trigonometric interpolation by ``factor`` of rows of ``block`` (see onset_times)."""
    n = block.shape[-1]
    if factor == 1:
        return block
    padded = 2 * n
    spectrum = np.fft.rfft(block, n=padded, axis=-1)
    # The Nyquist bin stands for a cosine shared by +/- Nyquist; on the finer grid those
    # are two bins, each taking half.
    spectrum[..., -1] *= 0.5
    fine = np.fft.irfft(spectrum, n=padded * factor, axis=-1) * factor
    return fine[..., : n * factor]


def interaural_time_difference(
    ir_pair: npt.ArrayLike,
    samplerate: float,
    *,
    threshold_db: float = DEFAULT_THRESHOLD_DB,
    oversample: int = DEFAULT_OVERSAMPLE,
) -> float:
    """Onset-based interaural time difference of an HRIR pair, in seconds.

    ``(onset_right - onset_left) / samplerate`` with :func:`onset_times`; positive when
    the left ear leads.

    Parameters
    ----------
    ir_pair : ndarray, shape (2, N)
        Left ear first.
    samplerate : float
        Sampling rate in Hz.
    threshold_db, oversample
        As for :func:`onset_times`.

    Returns
    -------
    float
    """
    pair = _check_pair(ir_pair, samplerate)
    onset = onset_times(pair, threshold_db=threshold_db, oversample=oversample)
    return float(onset[1] - onset[0]) / float(samplerate)


def cross_correlation_itd(
    ir_pair: np.ndarray,
    samplerate: float,
    *,
    cutoff: float = IACC_CUTOFF_HZ,
    max_lag: float = IACC_MAX_LAG_S,
) -> float:
    """Threshold-free ITD: lag of the interaural cross-correlation maximum, in seconds.

    Both ears are low-passed (4th-order Butterworth at ``cutoff``, the same filter for
    both, so its delay cancels), cross-correlated, and the largest correlation within
    ``+/- max_lag`` is located with parabolic interpolation between the three lags
    around it. Positive when the left ear leads.

    Parameters
    ----------
    ir_pair : ndarray, shape (2, N)
        Left ear first.
    samplerate : float
        Sampling rate in Hz.
    cutoff : float
        Low-pass cut-off in Hz (below Nyquist).
    max_lag : float
        Largest lag searched, in seconds.

    Returns
    -------
    float
    """
    signal = scipy_signal()

    pair = _check_pair(ir_pair, samplerate)
    if not (0 < cutoff < samplerate / 2):
        raise HrirError(
            f"cut-off must lie between 0 and Nyquist ({samplerate / 2!r} Hz), got {shown(cutoff)}"
        )
    sos = signal.butter(4, cutoff, fs=samplerate, output="sos")
    # Zero-padding lets the filters ring out so both ears keep their whole response.
    pad = int(np.ceil(8 * samplerate / cutoff))
    padded = np.pad(pair, ((0, 0), (0, pad)))
    left, right = signal.sosfilt(sos, padded, axis=-1)
    if not np.any(left) or not np.any(right):
        raise HrirError("an ear's impulse response is all zeros, so it has no ITD")
    xcorr = signal.correlate(right, left, mode="full", method="fft")
    lags = signal.correlation_lags(right.size, left.size, mode="full")
    window = np.abs(lags) <= max_lag * samplerate
    idx = np.flatnonzero(window)[np.argmax(xcorr[window])]
    shift = 0.0
    if 0 < idx < xcorr.size - 1:
        y0, y1, y2 = xcorr[idx - 1], xcorr[idx], xcorr[idx + 1]
        denom = y0 - 2.0 * y1 + y2
        if denom < 0:
            shift = 0.5 * (y0 - y2) / denom
    return float(lags[idx] + shift) / float(samplerate)


#: Padded samples transformed at once by :func:`fractional_delay` (2**22: some 130 MB of
#: FFT buffers at most, however many responses are delayed).
_BLOCK_SAMPLES = 2**22


def fractional_delay(
    ir: np.ndarray, delay: float | np.ndarray, length: int | None = None
) -> np.ndarray:
    """Delay impulse responses by (fractional) samples along the last axis.

    Band-limited: each IR is zero-padded, transformed with a real FFT, multiplied by the
    linear phase ``exp(-2 pi i k d / L)`` and transformed back, which is an ideal
    (sinc) interpolator on the padded length ``L``. The padding leaves room for the
    whole shifted response plus three times its length, so wrap-around is negligible
    and integer delays are exact shifts (to rounding).

    Parameters
    ----------
    ir : ndarray, shape (..., N)
        Impulse responses.
    delay : float or ndarray
        Delay in samples, broadcast against ``ir.shape[:-1]``; negative values advance
        (samples moved before the start are dropped).
    length : int, optional
        Output length; default ``N``.

    Returns
    -------
    ndarray, shape ``ir.shape[:-1] + (length,)``, float64
    """
    x = np.asarray(ir, dtype=float)
    if x.ndim < 1:
        raise HrirError(f"impulse responses need a time axis, got shape {x.shape!r}")
    n = x.shape[-1]
    out_len = n if length is None else length
    if int(out_len) != out_len or out_len < 0:
        raise HrirError(f"output length must be a non-negative integer, got {shown(length)}")
    out_len = int(out_len)
    d = np.asarray(delay, dtype=float)
    if not np.all(np.isfinite(d)):
        raise HrirError(f"delays must be finite numbers of samples, got {shown(delay)}")
    try:
        d = np.broadcast_to(d, x.shape[:-1])
    except ValueError:
        raise HrirError(
            f"delay shape {d.shape!r} does not broadcast against the IRs' leading shape "
            f"{x.shape[:-1]!r}"
        ) from None
    if out_len == 0 or n == 0:
        return np.zeros(x.shape[:-1] + (out_len,))
    reach = int(np.ceil(np.max(np.abs(d)))) if d.size else 0
    nfft = sp_fft.next_fast_len(4 * (max(n, out_len) + reach), real=True)
    k = np.arange(nfft // 2 + 1)
    # In blocks of responses, so that the FFT buffers (some 32 bytes per padded sample)
    # stay near _BLOCK_SAMPLES whatever the set's size; each response is transformed on its
    # own either way, so the result does not depend on the block size.
    rows = x.reshape(-1, n)
    shifts = d.reshape(-1)
    out = np.empty((rows.shape[0], out_len))
    step = max(1, _BLOCK_SAMPLES // nfft)
    for start in range(0, rows.shape[0], step):
        block = slice(start, start + step)
        spectrum = np.fft.rfft(rows[block], n=nfft, axis=-1)
        spectrum *= np.exp(-2j * np.pi * shifts[block, None] * k / nfft)
        # An advance moves the samples before time 0 to the end of the circular buffer,
        # past ``out_len``, so taking the first ``out_len`` samples drops them.
        out[block] = np.fft.irfft(spectrum, n=nfft, axis=-1)[:, :out_len]
    return out.reshape(x.shape[:-1] + (out_len,))


def _check_pair(ir_pair: npt.ArrayLike, samplerate: float) -> npt.NDArray[np.float64]:
    pair = np.asarray(ir_pair, dtype=float)
    if pair.ndim != 2 or pair.shape[0] != 2:
        raise HrirError(f"an HRIR pair must have shape (2, N), left ear first; got {pair.shape!r}")
    if not (np.isfinite(samplerate) and samplerate > 0):
        raise HrirError(f"sampling rate must be a positive number of Hz, got {shown(samplerate)}")
    return pair
