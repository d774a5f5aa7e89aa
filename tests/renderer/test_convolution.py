"""Tests of the streaming convolution engine against direct convolution.

The oracle is numpy.convolve (numpy documentation: the discrete, linear convolution
``(a * v)[n] = sum_m a[m] v[n - m]``, mode "full", length ``N + M - 1``), applied per
(channel, ear) in float64 and summed over channels. "Within 1e-6 of full scale" is taken as
an absolute tolerance of 1e-6 times the reference output's peak.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from numpy.testing import assert_allclose

from earfold.renderer.engine import (
    DEFAULT_BLOCK_SIZE,
    BinauralConvolver,
    TransformPlan,
    choose_transform,
    convolve_reference,
)
from earfold.renderer.errors import AudioError, HrirError, RendererError

TOLERANCE = 1e-6  # of full scale (the reference output's peak): the engine's accuracy target


def direct_binaural(signal: np.ndarray, filters: np.ndarray) -> np.ndarray:
    """(T, C) x (C, 2, L) -> (T + L - 1, 2) by numpy.convolve (numpy docs: direct linear
    convolution, mode 'full'), in float64, summed over channels."""
    frames, channels = signal.shape
    out = np.zeros((frames + filters.shape[2] - 1, 2))
    for c in range(channels):
        for ear in range(2):
            out[:, ear] += np.convolve(
                signal[:, c].astype(np.float64), filters[c, ear].astype(np.float64)
            )
    return out


def assert_close_to_full_scale(actual: np.ndarray, expected: np.ndarray) -> None:
    assert actual.shape == expected.shape
    assert_allclose(actual, expected, rtol=0, atol=TOLERANCE * np.max(np.abs(expected)))


def stream(engine: BinauralConvolver, signal: np.ndarray, sizes) -> np.ndarray:
    """Feed ``signal`` in calls of the given sizes (cycled), then flush; checks the
    frames-out-per-call rule on the way and returns the whole output."""
    sizes = list(sizes)
    outs = []
    pos, i = 0, 0
    while pos < len(signal):
        n = sizes[i % len(sizes)]
        block = signal[pos : pos + n]
        y = engine.process(block)
        assert y.shape == (len(block), 2)  # the rule: as many frames out as went in
        outs.append(y)
        pos += n
        i += 1
    tail = list(engine.flush())
    assert all(1 <= len(t) <= engine.block_size for t in tail)
    return np.concatenate(outs + tail) if outs or tail else np.zeros((0, 2))


def random_case(rng: np.random.Generator, channels: int, frames: int, taps: int):
    signal = rng.uniform(-1.0, 1.0, (frames, channels)).astype(np.float32)
    # Decaying noise, about as peaky as a measured HRIR; only its linearity matters here.
    decay = np.exp(-np.arange(taps) / max(taps / 4, 1.0))
    filters = (0.3 * rng.standard_normal((channels, 2, taps)) * decay).astype(np.float32)
    return signal, filters


BLOCK = 64  # the smallest allowed block keeps the tests fast and gives many partitions


# Filter lengths relative to the block: 1 tap, shorter than, equal to, just longer than
# the block, and several partitions (5 and a ragged last one).
LENGTHS = {"one": 1, "short": 37, "equal": BLOCK, "longer": BLOCK + 1, "several": 4 * BLOCK + 19}
# Caller block sizes: whole engine blocks, single frames, odd sizes, and a mix including
# empty calls and calls longer than the engine block.
CHUNKINGS = {
    "whole": [BLOCK],
    "single": [1],
    "odd": [7, 63, 1, 129, 3],
    "mixed": [0, 200, 64, 5, 64, 1000, 31],
}


# Transform plans: the cost model's choice (one partition, transforms of a fast size that
# is not a power of two) and uniform partitions of the block (many partitions).
PLANS = {"chosen": None, "uniform": TransformPlan.uniform(BLOCK)}


@pytest.mark.parametrize("length", LENGTHS.values(), ids=LENGTHS.keys())
@pytest.mark.parametrize("chunking", CHUNKINGS.values(), ids=CHUNKINGS.keys())
@pytest.mark.parametrize("plan", PLANS.values(), ids=PLANS.keys())
def test_matches_numpy_convolve(length, chunking, plan):
    rng = np.random.default_rng([length, len(chunking), sum(chunking)])
    channels = int(rng.integers(1, 13))  # 1..12 channels
    frames = 700 if chunking == [1] else int(rng.integers(1500, 2500))
    signal, filters = random_case(rng, channels, frames, length)
    engine = BinauralConvolver(filters, BLOCK, plan=plan)
    out = stream(engine, signal, chunking)
    assert_close_to_full_scale(out, direct_binaural(signal, filters))


@pytest.mark.parametrize("seed", range(6))
def test_matches_numpy_convolve_random_shapes(seed):
    rng = np.random.default_rng(1000 + seed)
    block = int(rng.choice([64, 128, 256]))
    channels = int(rng.integers(1, 13))
    taps = int(rng.integers(1, 6 * block))
    frames = int(rng.integers(1, 4000))
    sizes = [int(s) for s in rng.integers(1, 3 * block, size=5)]
    signal, filters = random_case(rng, channels, frames, taps)
    out = stream(BinauralConvolver(filters, block), signal, sizes)
    assert_close_to_full_scale(out, direct_binaural(signal, filters))


def test_matches_scipy_fftconvolve_longer_case():
    # Reference: scipy.signal.fftconvolve per (channel, ear), summed (scipy docs).
    rng = np.random.default_rng(7)
    signal, filters = random_case(rng, 12, 48000, 3000)
    out = stream(BinauralConvolver(filters, 512), signal, [1000])
    ref = np.zeros((48000 + 3000 - 1, 2))
    for c in range(12):
        for ear in range(2):
            ref[:, ear] += scipy.signal.fftconvolve(
                signal[:, c].astype(np.float64), filters[c, ear].astype(np.float64)
            )
    assert_close_to_full_scale(out, ref)


def test_many_partitions_stay_within_tolerance():
    # Regression: summing P * C = 3756 complex64 products row after row drifted to
    # 1.3e-6 of full scale here; the pairwise sum keeps it near 2e-7. Reference:
    # scipy.signal.oaconvolve in float64 (convolve_reference, checked against
    # numpy.convolve below); numpy.convolve itself is too slow at this length.
    rng = np.random.default_rng(2)
    signal, filters = random_case(rng, 12, 25000, 20000)
    engine = BinauralConvolver(filters, BLOCK, plan=TransformPlan.uniform(BLOCK))
    assert engine.partitions == 313
    out = stream(engine, signal, [BLOCK])
    assert_close_to_full_scale(out, convolve_reference(signal, filters))


def test_default_block_size_matches_numpy_convolve():
    rng = np.random.default_rng(11)
    signal, filters = random_case(rng, 3, 2 * DEFAULT_BLOCK_SIZE + 100, 700)
    out = stream(BinauralConvolver(filters), signal, [DEFAULT_BLOCK_SIZE])
    assert_close_to_full_scale(out, direct_binaural(signal, filters))


def test_float64_engine_is_closer():
    rng = np.random.default_rng(12)
    signal, filters = random_case(rng, 4, 1000, 300)
    engine = BinauralConvolver(filters, BLOCK, dtype=np.float64)
    out = stream(engine, signal.astype(np.float64), [100])
    assert out.dtype == np.float64
    ref = direct_binaural(signal, filters)
    # float64 rounding over a few thousand operations (numpy's float64 eps 2.2e-16).
    assert_allclose(out, ref, rtol=0, atol=1e-12 * np.max(np.abs(ref)))


@pytest.mark.parametrize(
    ("frames", "taps", "block"),
    [(1, 1, 64), (100, 1, 64), (10, 500, 64), (1000, 64, 64), (129, 4097, 128)],
)
def test_output_length_is_input_plus_filter_minus_one(frames, taps, block):
    # Linear convolution of N and M samples has N + M - 1 (numpy.convolve docs, mode 'full').
    filters = np.ones((2, 2, taps), dtype=np.float32)
    engine = BinauralConvolver(filters, block)
    assert engine.process(np.ones((frames, 2), dtype=np.float32)).shape == (frames, 2)
    tail = list(engine.flush())
    assert sum(len(t) for t in tail) == taps - 1
    assert all(1 <= len(t) <= block for t in tail)


def test_impulse_gives_the_filters_back():
    # Convolution with a unit impulse is the identity (definition of convolution).
    rng = np.random.default_rng(3)
    _, filters = random_case(rng, 5, 1, 300)
    for c in range(5):
        impulse = np.zeros((200, 5), dtype=np.float32)
        impulse[0, c] = 1.0
        out = stream(BinauralConvolver(filters, BLOCK), impulse, [13])
        expected = np.zeros((200 + 300 - 1, 2))
        expected[:300] = filters[c].T
        assert_close_to_full_scale(out, expected)


def test_delayed_impulse_gives_delayed_filters():
    # Time invariance: an impulse at frame d returns the filters starting at frame d.
    rng = np.random.default_rng(4)
    _, filters = random_case(rng, 2, 1, 150)
    for delay in (1, 63, 64, 65, 200):
        impulse = np.zeros((300, 2), dtype=np.float32)
        impulse[delay, 1] = 1.0
        out = stream(BinauralConvolver(filters, BLOCK), impulse, [50])
        expected = np.zeros((300 + 150 - 1, 2))
        expected[delay : delay + 150] = filters[1].T
        assert_close_to_full_scale(out, expected)


def test_linearity():
    # Convolution is linear: conv(a x1 + b x2) = a conv(x1) + b conv(x2) (definition).
    rng = np.random.default_rng(5)
    x1, filters = random_case(rng, 6, 1500, 400)
    x2 = rng.uniform(-1, 1, x1.shape).astype(np.float32)
    a, b = 0.7, -1.9
    mixed = stream(BinauralConvolver(filters, BLOCK), (a * x1 + b * x2).astype(np.float32), [77])
    engine = BinauralConvolver(filters, BLOCK)
    y1 = stream(engine, x1, [77])
    y2 = stream(engine, x2, [77])  # flush reset the engine, so this is a fresh stream
    assert_close_to_full_scale(mixed, a * y1 + b * y2)


def test_output_depends_only_on_past_input():
    # Causality of a streamed FIR filter: output frame t uses input frames <= t only.
    rng = np.random.default_rng(6)
    x, filters = random_case(rng, 3, 1000, 200)
    changed = x.copy()
    changed[500:] = rng.uniform(-1, 1, changed[500:].shape)
    e1, e2 = BinauralConvolver(filters, BLOCK), BinauralConvolver(filters, BLOCK)
    y1 = np.concatenate([e1.process(x[i : i + 37]) for i in range(0, 1000, 37)])
    y2 = np.concatenate([e2.process(changed[i : i + 37]) for i in range(0, 1000, 37)])
    # Equal up to rounding: frames before 500 that share a transform with later ones see
    # different rounding, never different values.
    assert_close_to_full_scale(y1[:500], y2[:500].astype(np.float64))
    assert not np.allclose(y1[500:], y2[500:])


def test_state_memory_does_not_grow_with_stream_length():
    rng = np.random.default_rng(8)
    x, filters = random_case(rng, 4, BLOCK, 300)
    engine = BinauralConvolver(filters, BLOCK)

    def state_bytes() -> int:
        return sum(v.nbytes for v in vars(engine).values() if isinstance(v, np.ndarray))

    for _ in range(10):
        engine.process(x)
    after_10 = state_bytes()
    for _ in range(990):
        engine.process(x)
    engine.process(x[:5])  # leave a part-filled block as well
    assert state_bytes() == after_10
    assert engine.nbytes == after_10
    list(engine.flush())
    assert state_bytes() == after_10


def test_reset_starts_a_new_stream():
    rng = np.random.default_rng(9)
    x, filters = random_case(rng, 2, 500, 100)
    fresh = BinauralConvolver(filters, BLOCK).process(x)
    engine = BinauralConvolver(filters, BLOCK)
    engine.process(rng.uniform(-1, 1, (333, 2)).astype(np.float32))
    engine.reset()
    assert_allclose(engine.process(x), fresh, rtol=0, atol=0)


def test_attributes():
    engine = BinauralConvolver(np.zeros((7, 2, 1000)), 256, plan=TransformPlan.uniform(256))
    assert engine.channels == 7
    assert engine.block_size == 256
    assert engine.filter_length == 1000
    assert engine.partitions == 4  # ceil(1000 / 256)
    assert (engine.hop, engine.transform_size) == (256, 512)
    assert engine.latency == 0
    assert engine.process(np.zeros((10, 7))).dtype == np.float32


@pytest.mark.parametrize(("taps", "channels"), [(600, 12), (4800, 12), (300, 2), (128801, 1)])
def test_chosen_plan_is_valid_and_cheaper_than_2b_transforms(taps, channels):
    plan = choose_transform(taps, channels, DEFAULT_BLOCK_SIZE)
    parts = plan.partitions(taps)
    # Overlap-save: a transform holds the hop and a partition; several partitions step
    # by one hop each.
    assert plan.size >= plan.hop + plan.partition - 1
    assert parts == 1 or plan.hop == plan.partition
    assert plan.size <= 1 << 18
    uniform = TransformPlan.uniform(DEFAULT_BLOCK_SIZE)
    assert plan.cost(taps, channels) <= uniform.cost(taps, channels)
    if taps <= 4800:  # the HRIR filters: one partition, well over half of each transform kept
        assert parts == 1 and plan.hop / plan.size > 0.6


def test_chosen_plan_attributes():
    engine = BinauralConvolver(np.zeros((12, 2, 4800)), DEFAULT_BLOCK_SIZE)
    assert engine.plan == choose_transform(4800, 12, DEFAULT_BLOCK_SIZE)
    assert engine.block_size == DEFAULT_BLOCK_SIZE
    assert engine.partitions == 1
    assert engine.hop == engine.transform_size - 4800 + 1


@pytest.mark.parametrize(
    "plan",
    [
        TransformPlan(hop=100, partition=64, size=100),  # no room for the partition
        TransformPlan(hop=64, partition=32, size=128),  # several partitions, hop != partition
        TransformPlan(hop=0, partition=10, size=64),
    ],
)
def test_bad_plan_is_refused(plan):
    with pytest.raises(AudioError, match="does not fit filters of 100 taps"):
        BinauralConvolver(np.zeros((1, 2, 100)), 64, plan=plan)


def test_convolve_reference_matches_numpy_convolve():
    rng = np.random.default_rng(10)
    signal, filters = random_case(rng, 3, 400, 90)
    ref = convolve_reference(signal, filters)
    assert ref.shape == (400 + 90 - 1, 2)
    # scipy.signal.oaconvolve against numpy.convolve: float64 agreement (scipy's own
    # TestOAConvolve checks the same pair).
    assert_allclose(ref, direct_binaural(signal, filters), rtol=0, atol=1e-12)


# -- errors ----------------------------------------------------------------------------


def test_wrong_channel_count_names_expected_and_got():
    engine = BinauralConvolver(np.zeros((6, 2, 10)), BLOCK)
    expected_and_got = r"shape \(frames, 6\) for 6 channels, got shape \(10, 5\)"
    with pytest.raises(AudioError, match=expected_and_got):
        engine.process(np.zeros((10, 5), dtype=np.float32))
    with pytest.raises(AudioError, match=r"got shape \(10,\)"):
        engine.process(np.zeros(10, dtype=np.float32))


def test_complex_block_is_refused():
    engine = BinauralConvolver(np.zeros((1, 2, 10)), BLOCK)
    with pytest.raises(AudioError, match=r"real numbers, got dtype 'complex128'"):
        engine.process(np.zeros((10, 1), dtype=complex))


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_filters_are_refused(bad):
    filters = np.zeros((3, 2, 20))
    filters[2, 1, 7] = bad
    with pytest.raises(HrirError, match=r"non-finite.*\[channel, ear, tap\] = \(2, 1, 7\)"):
        BinauralConvolver(filters)
    with pytest.raises(HrirError, match="non-finite"):
        convolve_reference(np.zeros((5, 3)), filters)


@pytest.mark.parametrize(
    "shape", [(2, 20), (3, 1, 20), (3, 3, 20), (0, 2, 20), (3, 2, 0), (1, 3, 2, 20)]
)
def test_filters_of_wrong_shape_are_refused(shape):
    with pytest.raises(HrirError, match=r"shape \(channels, 2, taps\).*got shape"):
        BinauralConvolver(np.zeros(shape))


def test_complex_filters_are_refused():
    with pytest.raises(HrirError, match=r"real numbers, got dtype 'complex128'"):
        BinauralConvolver(np.zeros((1, 2, 4), dtype=complex))


@pytest.mark.parametrize("block_size", [0, 32, 63, 100, 3000, 1 << 21, 64.0, True, "64"])
def test_bad_block_size_is_refused(block_size):
    with pytest.raises(
        AudioError,
        match=r"block_size must be a power of two from 64 to 1048576 "
        r"frames, got",
    ):
        BinauralConvolver(np.zeros((1, 2, 4)), block_size)


@pytest.mark.parametrize("dtype", [np.int16, np.complex64, None, "no-such-type"])
def test_bad_dtype_is_refused(dtype):
    with pytest.raises(AudioError, match=r"dtype must be one of 'float32', 'float64', got"):
        BinauralConvolver(np.zeros((1, 2, 4)), dtype=dtype)


def test_reference_channel_mismatch_is_refused():
    with pytest.raises(AudioError, match=r"shape \(frames, 2\).*got shape \(5, 3\)"):
        convolve_reference(np.zeros((5, 3)), np.zeros((2, 2, 4)))


def test_errors_are_renderer_errors_and_value_errors():
    # The CLI turns RendererError into one line and exit code 2 (DESIGN.md).
    with pytest.raises(RendererError):
        BinauralConvolver(np.zeros((1, 2, 4)), 100)
    with pytest.raises(ValueError, match="non-finite"):
        BinauralConvolver(np.full((1, 2, 4), np.nan))


@pytest.mark.parametrize("plan", PLANS.values(), ids=PLANS.keys())
@pytest.mark.parametrize("chunking", CHUNKINGS.values(), ids=CHUNKINGS.keys())
def test_push_and_drain_give_what_process_gives(plan, chunking):
    rng = np.random.default_rng([len(chunking), sum(chunking), 3])
    signal, filters = random_case(rng, 5, 1900, 4 * BLOCK + 19)
    engine = BinauralConvolver(filters, BLOCK, plan=plan)
    pieces, pos, i = [], 0, 0
    while pos < len(signal):
        n = chunking[i % len(chunking)]
        out = engine.push(signal[pos : pos + n])
        assert len(out) % engine.hop == 0  # whole hops only
        pieces.append(out)
        pos, i = pos + n, i + 1
    pieces.append(engine.drain())
    assert sum(len(p) for p in pieces) == len(signal)
    pieces.extend(engine.flush())
    out = np.concatenate(pieces)
    assert_close_to_full_scale(out, direct_binaural(signal, filters))
    # The same frames through process(): the same output, to the float32 rounding.
    again = BinauralConvolver(filters, BLOCK, plan=plan)
    assert_close_to_full_scale(stream(again, signal, chunking), out)


def test_drain_with_nothing_waiting_is_empty():
    engine = BinauralConvolver(np.ones((2, 2, 10)), BLOCK)
    assert engine.drain().shape == (0, 2)
    assert engine.push(np.zeros((0, 2))).shape == (0, 2)


def test_flush_after_push_gives_the_held_frames_first():
    rng = np.random.default_rng(21)
    signal, filters = random_case(rng, 3, 300, 50)
    engine = BinauralConvolver(filters, BLOCK)
    assert engine.hop > 300  # everything is held
    assert len(engine.push(signal)) == 0
    out = np.concatenate(list(engine.flush()))
    assert_close_to_full_scale(out, direct_binaural(signal, filters))


def test_push_and_process_do_not_mix_mid_hop():
    engine = BinauralConvolver(np.ones((1, 2, 10)), BLOCK)
    engine.push(np.ones((5, 1)))
    with pytest.raises(AudioError, match=r"call drain\(\) before process\(\)"):
        engine.process(np.ones((5, 1)))
    engine.drain()
    engine.process(np.ones((5, 1)))  # after drain, process continues the hop
    with pytest.raises(AudioError, match="push\\(\\) continues only from a hop boundary"):
        engine.push(np.ones((5, 1)))
