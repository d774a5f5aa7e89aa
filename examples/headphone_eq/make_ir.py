"""Write examples/headphone_eq/dark-ir.wav: the "dark" band list as a short impulse response.

It shows the second headphone-EQ format (an impulse response file) with a curve of our own
invention. Run from the repository root:

    python -m examples.headphone_eq.make_ir      # or: python examples/headphone_eq/make_ir.py

The output is deterministic; tests/renderer/test_biquads.py regenerates it and compares.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
RATE = 44100  # deliberately not 48 kHz: the reader resamples to the render's rate
TAPS = 2048


def make(path: Path = HERE / "dark-ir.wav") -> Path:
    sys.path.insert(0, str(HERE.parents[1]))
    from earfold.renderer.eq import load_headphone_eq
    from earfold.renderer.io import write_audio

    eq = load_headphone_eq(HERE / "dark.json", RATE)
    ir = np.zeros(TAPS)
    n = min(TAPS, eq.ir.shape[-1])
    ir[:n] = eq.ir[0, :n]
    fade = TAPS // 8  # the cascade has decayed by then; fade the rest to zero
    ir[-fade:] *= 0.5 * (1 + np.cos(np.linspace(0, np.pi, fade)))
    write_audio(path, ir[:, None].astype(np.float32), RATE, subtype="FLOAT")
    return path


if __name__ == "__main__":
    print(make())
