"""FoldEngine feeds its convolvers whole hops of their chosen transforms: whatever the
stream's block and the hops, the output is the whole convolution, frame for frame
(oracle: scipy.signal.oaconvolve per filter, convolve_reference)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.engine import FoldEngine, convolve_reference


def _run(engine: FoldEngine, signal: np.ndarray, block: int, tail_frames: int) -> np.ndarray:
    outs = [engine.process(signal[i : i + block]) for i in range(0, len(signal), block)]
    outs.extend(engine.tail_blocks(tail_frames))
    engine.close()
    return np.concatenate(outs)


def _case(seed: int, channels: int, frames: int, taps: int):
    rng = np.random.default_rng(seed)
    signal = rng.uniform(-1, 1, (frames, channels)).astype(np.float32)
    decay = np.exp(-np.arange(taps) / (taps / 4))
    filters = (0.3 * rng.standard_normal((channels, 2, taps)) * decay).astype(np.float32)
    return rng, signal, filters


@pytest.mark.parametrize("block", [64, 256, 1024])
def test_direct_and_headphone_equal_the_cascade(block):
    rng, signal, filters = _case(block, 5, 3001, 700)
    headphone = np.zeros((2, 2, 90), dtype=np.float32)
    headphone[0, 0] = rng.standard_normal(90) * np.exp(-np.arange(90) / 20)
    headphone[1, 1] = rng.standard_normal(90) * np.exp(-np.arange(90) / 20)
    engine = FoldEngine(filters, block, headphone=headphone)
    # The convolvers' hops follow their cost model, not the stream's block.
    assert engine.direct.hop != block
    out = _run(engine, signal, block, filters.shape[2] - 1)
    ref = convolve_reference(convolve_reference(signal, filters), headphone)
    ref = ref[: len(signal) + filters.shape[2] - 1]
    assert out.shape == ref.shape
    assert_allclose(out, ref, rtol=0, atol=2e-6 * np.max(np.abs(ref)))


@pytest.mark.parametrize("block", [64, 512])
def test_direct_and_shared_tail_equal_the_whole_convolution(block):
    rng, signal, filters = _case(7 + block, 3, 5000, 300)
    weights = np.array([0.5, 0.3, 0.2], dtype=np.float32)
    tail = (0.05 * rng.standard_normal((2, 2000)) * np.exp(-np.arange(2000) / 500)).astype(
        np.float32
    )
    offset = 150
    engine = FoldEngine(filters, block, tail=tail, tail_weights=weights, tail_offset=offset)
    length = max(filters.shape[2], offset + tail.shape[1])
    out = _run(engine, signal, block, length - 1)
    # The same response as one filter bank: each channel's filter plus its share of the
    # delayed tail.
    whole = np.zeros((3, 2, length), dtype=np.float64)
    whole[:, :, : filters.shape[2]] = filters
    whole[:, :, offset : offset + tail.shape[1]] += weights[:, None, None] * tail[None]
    ref = convolve_reference(signal, whole)
    assert out.shape == ref.shape
    assert_allclose(out, ref, rtol=0, atol=2e-6 * np.max(np.abs(ref)))
