"""The panning mixer (renderer/engine/panning.py): sources onto a virtual array with VBAP
gains (Pulkki, JAES 45(6), 1997) that follow their paths, crossfaded between updates."""

from __future__ import annotations

import numpy as np
import pytest

from earfold.renderer.engine import PanningMixer, SourcePath
from earfold.renderer.errors import AudioError, LayoutError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.layouts import SpreadPanner, VbapPanner
from earfold.renderer.scenes import virtual_layout

RATE = 48000.0


@pytest.fixture(scope="module")
def panner():
    return VbapPanner(virtual_layout(4))  # 50 points


def _mix(mixer, x, blocks):
    out, pos, i = [], 0, 0
    while pos < len(x):
        out.append(mixer.process(x[pos : pos + blocks[i % len(blocks)]]))
        pos += blocks[i % len(blocks)]
        i += 1
    return np.concatenate(out)


def test_a_resting_source_feeds_its_vbap_gains_with_unit_power(panner):
    x = np.random.default_rng(0).standard_normal((5000, 1))
    d = direction_to_vector(33.0, 21.0)
    y = PanningMixer([SourcePath.fixed(d, 0.5)], panner.gains, RATE, dtype=np.float64).process(x)
    np.testing.assert_allclose(y, 0.5 * x * panner.gains(d), rtol=0, atol=1e-15)
    # Pulkki 1997, eq. 10: unit power, so the channels' energies sum to the source's.
    np.testing.assert_allclose(np.sum(y**2), np.sum((0.5 * x) ** 2), rtol=1e-12)
    on_point = PanningMixer([SourcePath.fixed(panner.vectors[7])], panner.gains, RATE)
    y = on_point.process(x.astype(np.float32))
    np.testing.assert_array_equal(y[:, 7], x[:, 0].astype(np.float32))
    assert not np.any(np.delete(y, 7, axis=1))


def test_moving_gains_are_vbap_at_updates_and_raised_cosine_between(panner):
    frames = 48000
    path = SourcePath(
        [0, frames], direction_to_vector(np.array([0.0, 150.0]), np.array([0.0, 40.0]))
    )
    mixer = PanningMixer([path], panner.gains, RATE, dtype=np.float64)
    y = _mix(mixer, np.ones((frames, 1)), blocks=(1000, 333, 8192))
    hop = mixer.hop
    updates = np.arange(0, frames, hop)
    np.testing.assert_allclose(y[updates], panner.gains(path.at(updates)[0]), atol=1e-15)
    t = np.arange(frames)
    g0 = panner.gains(path.at(t // hop * hop)[0])
    g1 = panner.gains(path.at((t // hop + 1) * hop)[0])
    u = 0.5 - 0.5 * np.cos(np.pi * (t % hop) / hop)
    np.testing.assert_allclose(y, g0 + u[:, None] * (g1 - g0), atol=1e-15)
    assert np.abs(np.diff(y, axis=0)).max() < 0.01  # no steps


def test_blocks_of_any_size_give_the_same_mix(panner):
    rng = np.random.default_rng(1)
    frames = 20000
    paths = [
        SourcePath([0, frames], rng.standard_normal((2, 3))),
        SourcePath.fixed([0.0, 1.0, 0.0]),
    ]
    x = rng.standard_normal((frames, 2)).astype(np.float32)
    whole = PanningMixer(paths, panner.gains, RATE).process(x)
    parts = _mix(PanningMixer(paths, panner.gains, RATE), x, blocks=(1, 479, 481, 4096))
    np.testing.assert_array_equal(parts, whole)


def test_bad_mixers_are_refused(panner):
    with pytest.raises(AudioError, match="at least one"):
        PanningMixer([], panner.gains, RATE)
    with pytest.raises(AudioError, match="hop must be"):
        PanningMixer([SourcePath.fixed([1.0, 0, 0])], panner.gains, RATE, hop=481)
    with pytest.raises(LayoutError, match=r"shape \(n, M\)"):
        PanningMixer([SourcePath.fixed([1.0, 0, 0])], lambda v: np.ones(len(v)), RATE)
    mixer = PanningMixer([SourcePath.fixed([1.0, 0, 0])], panner.gains, RATE)
    with pytest.raises(AudioError, match=r"shape \(frames, 1\)"):
        mixer.process(np.zeros((4, 2)))


# -- gain functions that take the spread ---------------------------------------------


class _Recorder:
    """A SpreadGains: the spread's width as channel 0, the direction's x as channel 1."""

    def __init__(self):
        self.calls = 0

    def spread_gains(self, vectors, spread):
        self.calls += 1
        return np.column_stack([spread[:, 0], vectors[:, 0]])


def test_a_spread_gain_function_gets_each_states_spread():
    frames = 9600
    path = SourcePath(
        [0, frames], [[1.0, 0, 0], [1.0, 0, 0]], spread=[[0, 0, 0, 0], [100, 0, 0, 0]]
    )
    recorder = _Recorder()
    mixer = PanningMixer([path], recorder, RATE, dtype=np.float64)
    assert mixer.uses_spread and mixer.channels == 2
    y = _mix(mixer, np.ones((frames, 1)), blocks=(1000, 333))
    hop = mixer.hop
    updates = np.arange(0, frames, hop)
    # At each update the gain is the path's width there (SourcePath.at_spread).
    np.testing.assert_allclose(y[updates, 0], path.at_spread(updates)[:, 0], atol=1e-12)
    assert recorder.calls >= 2  # the check at construction, then the states
    # A plain callable is still called with the directions alone.
    plain = PanningMixer([path], lambda v: v[:, :1], RATE)
    assert not plain.uses_spread


def test_a_resting_source_with_a_constant_spread_keeps_its_gains_exactly(panner):
    spread_panner = SpreadPanner(panner, diffuse_channel=True)
    d = direction_to_vector(33.0, 21.0)
    path = SourcePath.fixed(d, 0.5, [60.0, 20.0, 0.0, 0.3])
    mixer = PanningMixer([path], spread_panner, RATE, dtype=np.float64)
    assert mixer.channels == panner.loudspeakers + 1
    x = np.random.default_rng(2).standard_normal((30000, 1))  # past one lookahead
    y = _mix(mixer, x, blocks=(4096, 1001))
    g = spread_panner.spread_gains(d[None, :], np.array([[60.0, 20.0, 0.0, 0.3]]))[0]
    # No per-state float noise: every frame is the input times the same gains.
    np.testing.assert_array_equal(y, 0.5 * x * g[None, :])
    # Power preserving split (common practice): direct sqrt(0.7) at unit power, diffuse
    # sqrt(0.3).
    np.testing.assert_allclose(np.sum(g[:-1] ** 2), 0.7, rtol=1e-12)
    np.testing.assert_allclose(g[-1] ** 2, 0.3, rtol=1e-12)


def test_a_path_without_spread_pans_as_a_point_through_a_spread_panner(panner):
    x = np.random.default_rng(3).standard_normal((5000, 1))
    path = SourcePath([0, 5000], direction_to_vector(np.array([10.0, 80.0]), np.zeros(2)))
    plain = PanningMixer([path], panner.gains, RATE, dtype=np.float64).process(x)
    spread = PanningMixer([path], SpreadPanner(panner), RATE, dtype=np.float64).process(x)
    np.testing.assert_array_equal(spread, plain)
