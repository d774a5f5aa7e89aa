"""What a render needs without scipy.signal: numpy replacements checked against scipy,
and a render from cached filters that never imports the heavy parts of scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from earfold.renderer.loudness import k_weighting_sos
from earfold.renderer.render.plot_data import periodic_hann
from earfold.renderer.signals import sos_response


@pytest.mark.parametrize("n", [2, 7, 512, 32768])
def test_periodic_hann_is_scipys_hann_window(n: int) -> None:
    # scipy.signal.get_window("hann", n) is the periodic (DFT-even) Hann window.
    np.testing.assert_allclose(periodic_hann(n), signal.get_window("hann", n), atol=1e-15)


@pytest.mark.parametrize("fs", [44100.0, 48000.0, 96000.0])
def test_sos_response_is_scipys_sosfreqz(fs: float) -> None:
    freqs = np.linspace(0.0, fs / 2, 1001)
    for sos in (
        k_weighting_sos(fs),
        signal.butter(4, 120.0, fs=fs, output="sos"),
        signal.butter(3, [500.0, 2000.0], btype="bandpass", fs=fs, output="sos"),
    ):
        _, expected = signal.sosfreqz(sos, worN=freqs, fs=fs)
        np.testing.assert_allclose(sos_response(sos, freqs, fs), expected, rtol=1e-12, atol=1e-14)


def test_sos_response_refuses_a_wrong_shape() -> None:
    with pytest.raises(ValueError, match="sections, 6"):
        sos_response(np.ones((2, 5)), [0.0], 48000.0)
