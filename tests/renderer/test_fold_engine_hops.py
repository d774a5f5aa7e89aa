"""FoldEngine feeds its convolvers whole hops of their chosen transforms: whatever the
stream's block and the hops, the output is the whole convolution, frame for frame
(oracle: scipy.signal.oaconvolve per filter, convolve_reference)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

import earfold.renderer.engine.scheduler as scheduler
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


def test_stream_blocks_larger_than_the_tail_chunk_give_the_same_samples(monkeypatch):
    # Reads of several tail chunks at once hand every whole chunk to the tail's thread in
    # one job: the samples are those of engine-sized blocks, bit for bit, and the whole
    # convolution still (oracle: convolve_reference).
    monkeypatch.setattr(scheduler, "TAIL_BLOCK_FRAMES", 64)  # small chunks: many per read
    rng, signal, filters = _case(11, 3, 20000, 300)
    weights = np.array([0.5, 0.3, 0.2], dtype=np.float32)
    tail = (0.05 * rng.standard_normal((2, 3000)) * np.exp(-np.arange(3000) / 700)).astype(
        np.float32
    )
    offset = 120
    length = max(filters.shape[2], offset + tail.shape[1])
    outs = []
    for block in (64, 7 * 1024):
        engine = FoldEngine(filters, 64, tail=tail, tail_weights=weights, tail_offset=offset)
        assert engine.tail is not None and block in (64, 3 * engine.tail.hop + 1024)
        outs.append(_run(engine, signal, block, length - 1))
    assert_array_equal(outs[0], outs[1])
    whole = np.zeros((3, 2, length), dtype=np.float64)
    whole[:, :, : filters.shape[2]] = filters
    whole[:, :, offset : offset + tail.shape[1]] += weights[:, None, None] * tail[None]
    ref = convolve_reference(signal, whole)
    assert_allclose(outs[1], ref, rtol=0, atol=2e-6 * np.max(np.abs(ref)))
