"""The meter's K-weighting by FFT convolution and the true-peak taps, against scipy.

References: scipy.signal's ``sosfilt`` (the BS.1770 biquads run as a recursion, as the
meter did before) and ``firwin`` (the window method of FIR design), imported here only;
the package itself must not import scipy.signal (checked in a fresh interpreter).
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import scipy.signal
from numpy.testing import assert_allclose

import earfold.renderer.loudness._meter as meter_module
import earfold.renderer.loudness._true_peak as true_peak_module
from earfold.renderer.loudness import (
    LoudnessMeter,
    PeakInterpolator,
    interpolation_taps,
    k_weighting_sos,
)
from earfold.renderer.loudness._kfilter import KWeightingSquares
from earfold.renderer.loudness._kweighting import TAIL_BOUND, k_weighting_impulse_response

FS = 48000


def recursive_squares(x: np.ndarray, rate: int = FS) -> np.ndarray:
    """Squared K-weighted output by scipy.signal.sosfilt in float64, (C, n)."""
    y = scipy.signal.sosfilt(k_weighting_sos(rate), np.asarray(x, dtype=np.float64), axis=0)
    return (y * y).T


def streamed(f: KWeightingSquares, x: np.ndarray, sizes: list[int]) -> np.ndarray:
    parts, i = [], 0
    for n in sizes:
        parts.append(f.push(x[i : i + n]).copy())
        i += n
    parts.append(f.push(x[i:]).copy())
    parts.append(f.pending())
    return np.concatenate(parts, axis=1)


# ------------------------------------------------------------------ impulse response


@pytest.mark.parametrize("rate", [8000, 44100, 48000, 96000, 192000, 768000])
def test_impulse_response_is_the_recursions_and_its_cut_tail_is_bounded(rate):
    h = k_weighting_impulse_response(rate)
    impulse = np.zeros(h.size + 2 * rate)
    impulse[0] = 1.0
    reference = scipy.signal.sosfilt(k_weighting_sos(rate), impulse)
    # The recursion itself rounds at about 1e-15 per tap at 48 kHz (more as the poles
    # approach the unit circle at high rates); the grid method is below that.
    assert_allclose(h, reference[: h.size], rtol=0, atol=2e-13)
    left_out = np.abs(reference[h.size :]).sum()
    assert left_out <= TAIL_BOUND * 1.01
    assert left_out > TAIL_BOUND * 0.5  # cut where the bound is reached, not far later
    assert not h.flags.writeable


def test_impulse_response_length_at_48k():
    # Measured: the tail after 5234 taps sums to 1e-10 (about 5100 taps reach 1e-12 per tap).
    assert k_weighting_impulse_response(48000).size == 5234


# ---------------------------------------------------------------- streaming squares


@pytest.mark.parametrize("channels", [1, 2, 3, 5])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_squares_match_the_recursive_filter_over_random_blocks(channels, dtype):
    rng = np.random.default_rng(channels)
    x = (0.3 * rng.standard_normal((300_000, channels))).astype(dtype)
    f = KWeightingSquares(FS, np.ones(channels, dtype=bool))
    got = streamed(f, x, [int(n) for n in rng.integers(1, 90_000, size=6)])
    ref = recursive_squares(x)
    assert got.shape == ref.shape
    # float32 transforms: errors near 1e-7 of the signal's square.
    assert_allclose(got, ref, rtol=0, atol=3e-6 * ref.max())
    assert_allclose(got.sum(axis=1), ref.sum(axis=1), rtol=1e-6)


def test_block_sizes_do_not_change_a_single_bit():
    rng = np.random.default_rng(5)
    x = (0.2 * rng.standard_normal((400_000, 3))).astype(np.float32)
    whole = streamed(KWeightingSquares(FS, np.ones(3, dtype=bool)), x, [])
    small = streamed(KWeightingSquares(FS, np.ones(3, dtype=bool)), x, [4096] * 50)
    ragged = streamed(
        KWeightingSquares(FS, np.ones(3, dtype=bool)),
        x,
        [int(n) for n in rng.integers(1, 70_000, size=8)],
    )
    assert np.array_equal(whole, small)
    assert np.array_equal(whole, ragged)


@pytest.mark.parametrize("scale", [2.0**110, 1e-35])
def test_very_hot_and_very_quiet_float_signals_go_through_float64(scale):
    # Outside 2**-100 .. 2**100 float32 transforms would overflow or lose the signal
    # in subnormals; those segments are computed in float64, as exact as the recursion.
    rng = np.random.default_rng(8)
    x = scale * rng.standard_normal((150_000, 2))
    f = KWeightingSquares(FS, np.ones(2, dtype=bool))
    got = streamed(f, x, [70_000])
    ref = recursive_squares(x)
    assert np.all(np.isfinite(got))
    assert_allclose(got, ref, rtol=0, atol=1e-9 * ref.max())


def test_silence_reads_exactly_zero_and_inactive_channels_are_skipped():
    rng = np.random.default_rng(9)
    x = np.zeros((200_000, 3), dtype=np.float32)
    x[120_000:, 2] = rng.standard_normal(80_000)
    f = KWeightingSquares(FS, np.array([True, True, True]))
    got = streamed(f, x, [50_000])
    assert np.all(got[:2] == 0.0)  # channels 0 and 1 silent throughout
    assert f.hop < 120_000
    assert np.all(got[2, : f.hop] == 0.0)  # its first hop, silent; the second is not
    ref = recursive_squares(x[:, 2:])[0]
    assert_allclose(got[2], ref, rtol=0, atol=3e-6 * ref.max())
    skipping = KWeightingSquares(FS, np.array([False, True, True]))
    assert skipping.channels == 2
    pairs_shifted = streamed(skipping, x, [50_000])
    # Now the silent channel shares its transforms with the sounding one (paired by
    # position): it reads float32 rounding of that one, 130 dB under it, not zero.
    assert np.all(pairs_shifted[0] <= 1e-13 * ref.max())
    assert_allclose(pairs_shifted[1], ref, rtol=0, atol=3e-6 * ref.max())


def test_pending_does_not_consume_frames():
    rng = np.random.default_rng(10)
    x = (0.1 * rng.standard_normal((100_000, 2))).astype(np.float32)
    f = KWeightingSquares(FS, np.ones(2, dtype=bool))
    assert f.push(x[:30_000]).shape == (2, 0)
    early = f.pending()
    assert early.shape == (2, 30_000)
    rest = streamed(f, x[30_000:], [])
    late = streamed(KWeightingSquares(FS, np.ones(2, dtype=bool)), x, [])
    assert np.array_equal(rest, late)
    # The frames measured early read as the full stream does, to float32 rounding.
    assert_allclose(early, late[:, :30_000], rtol=0, atol=1e-6 * late.max())


# ------------------------------------------------------------ the meter, end to end


class RecursiveSquares:
    """The meter's former K-weighting (sosfilt with carried state), as an oracle."""

    def __init__(self, samplerate: float, active: np.ndarray) -> None:
        self._sos = k_weighting_sos(samplerate)
        self._active = np.flatnonzero(active)
        self._zi = np.zeros((self._sos.shape[0], self._active.size, 2))

    def push(self, block: np.ndarray) -> np.ndarray:
        x = np.asarray(block, dtype=np.float64)[:, self._active]
        y, self._zi = scipy.signal.sosfilt(self._sos, x.T, axis=-1, zi=self._zi)
        return y * y

    def pending(self) -> np.ndarray:
        return np.zeros((self._active.size, 0))


def _programmes() -> dict[str, tuple[np.ndarray, list[float] | None]]:
    rng = np.random.default_rng(21)
    t = np.arange(20 * FS) / FS
    tone = 0.5 * np.sin(2 * np.pi * 997.0 * t)
    lows = 0.3 * np.sin(2 * np.pi * 40.0 * t) + 0.1 * np.sin(2 * np.pi * 12000.0 * t)
    # Programme-like: 0.5 s segments of noise with levels from -60 to 0 dB, and silence.
    env = np.repeat(10 ** (rng.uniform(-60, 0, 40) / 20), FS // 2)
    env[rng.random(40).repeat(FS // 2) < 0.15] = 0.0
    programme = rng.standard_normal((20 * FS, 5)) * env[:, None] * 0.3
    # Near the absolute gate: blocks around -70 LUFS after a loud passage.
    near_gate = rng.standard_normal((20 * FS, 2)) * 10 ** ((-70.0 + 3.0) / 20)
    near_gate[: 3 * FS] *= 10 ** (55 / 20)
    near_gate[10 * FS : 11 * FS] = 0.0
    return {
        "noise": (0.1 * rng.standard_normal((20 * FS, 2)), None),
        "tone": (np.stack([tone, 0.5 * tone], axis=1), None),
        "low and high tones": (np.stack([lows, lows], axis=1), None),
        "programme, 5 channels": (programme, [1.0, 1.0, 1.0, 1.41, 1.41]),
        "near the -70 LUFS gate": (near_gate, None),
    }


@pytest.mark.parametrize("name", list(_programmes()))
def test_meter_reads_within_a_thousandth_of_a_lu_of_the_recursive_filter(name, monkeypatch):
    x, weights = _programmes()[name]
    x = x.astype(np.float32)
    results = []
    for kind in ("fft", "recursive"):
        if kind == "recursive":
            monkeypatch.setattr(meter_module, "KWeightingSquares", RecursiveSquares)
        m = LoudnessMeter(FS, x.shape[1], weights)
        for i in range(0, len(x), 65536):
            m.process(x[i : i + 65536])
        results.append(m.result())
    fft_result, recursive = results
    for field in (
        "integrated_lufs",
        "momentary_max_lufs",
        "short_term_max_lufs",
        "loudness_range_lu",
    ):
        a, b = getattr(fft_result, field), getattr(recursive, field)
        assert (a is None) == (b is None), field
        if a is not None:
            assert abs(a - b) <= 0.001, (field, a, b)
    a, b = np.array(fft_result.momentary_series), np.array(recursive.momentary_series)
    audible = b > -100.0  # lower readings are float rounding and the filters' decay
    assert np.max(np.abs(a[audible] - b[audible])) <= 0.001


# ------------------------------------------------------------------------ true peak


@pytest.mark.parametrize("factor", [1, 2, 4])
def test_interpolation_taps_equal_firwin(factor):
    taps = interpolation_taps(factor)
    if factor == 1:
        assert np.array_equal(taps, np.ones(1))
        return
    # scipy.signal.firwin, window method, Kaiser beta 8, cutoff at the input's Nyquist.
    reference = scipy.signal.firwin(12 * factor, 1.0 / factor, window=("kaiser", 8.0)) * factor
    assert_allclose(taps, reference, rtol=0, atol=1e-12)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_dense_and_chunked_peaks_give_the_same_bits(dtype, monkeypatch):
    rng = np.random.default_rng(12)
    x = (0.3 * rng.standard_normal((50_000, 2))).astype(dtype)
    context = (0.3 * rng.standard_normal((11, 2))).astype(dtype)
    dense = PeakInterpolator(FS).point_peaks(x, threshold=0.0, context=context)
    monkeypatch.setattr(true_peak_module, "_DENSE_FRACTION", 2.0)  # never dense
    chunked = PeakInterpolator(FS).point_peaks(x, threshold=0.0, context=context)
    assert np.array_equal(dense, chunked)


# ------------------------------------------------------------------------- imports


def test_metering_a_block_imports_neither_scipy_signal_nor_ndimage():
    code = (
        "import sys, numpy as np\n"
        "from earfold.renderer.loudness import LoudnessMeter, TruePeakLimiter\n"
        "x = (0.1 * np.random.default_rng(0).standard_normal((96000, 2))).astype(np.float32)\n"
        "m = LoudnessMeter(48000, 2)\n"
        "m.process(x)\n"
        "r = m.result()\n"
        "assert r.integrated_lufs is not None\n"
        "lim = TruePeakLimiter(48000, 2, ceiling_dbtp=-1.0, known_true_peak=0.5)\n"
        "assert lim.bypassed\n"
        "lim.process(x)\n"
        "lim.flush()\n"
        "print(sorted(n for n in ('scipy.signal', 'scipy.ndimage') if n in sys.modules))\n"
    )
    run = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120
    )
    assert run.stdout.strip() == "[]", run.stdout + run.stderr
