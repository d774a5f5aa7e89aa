"""Moving sources to two ears (renderer/engine/moving.py, renderer/render/moving_sources.py):
exactness for resting sources, interaural cues that follow the path, no clicks, gains,
streaming, bounds and errors."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.ndimage
import scipy.signal

from earfold.hrtf_sets import get_shipped
from earfold.renderer.engine import MovingSourceEngine, PairTable, SourcePath
from earfold.renderer.eq import equalised
from earfold.renderer.errors import AudioError, HrirError
from earfold.renderer.geometry import direction_to_vector, normalize
from earfold.renderer.hrtf import cross_correlation_itd, load_hrir_set
from earfold.renderer.render.moving_sources import moving_source_engine

RATE = 48000.0


@pytest.fixture(scope="module")
def kemar():
    return load_hrir_set(get_shipped("mit-kemar").path, RATE)


@pytest.fixture(scope="module")
def kemar_eq(kemar):
    return equalised(kemar)[0]


def _render(engine, x, blocks=(8192,)):
    """Stream ``x`` through ``engine`` in blocks cycling through ``blocks``; whole output."""
    out, pos, i = [], 0, 0
    while pos < len(x):
        size = blocks[i % len(blocks)]
        out.append(engine.process(x[pos : pos + size]))
        pos += size
        i += 1
    out.extend(engine.flush())
    return np.concatenate(out)


def _fixed(x, ir):
    """Reference: scipy.signal.oaconvolve of a mono signal with a fixed pair, per ear."""
    return np.stack([scipy.signal.oaconvolve(x, ir[0]), scipy.signal.oaconvolve(x, ir[1])], 1)


def _noise(frames, channels=1, seed=0):
    return np.random.default_rng(seed).standard_normal((frames, channels)) * 0.25


# -- the set's pairs in bulk ---------------------------------------------------------


def test_pairs_in_bulk_equal_one_lookup_at_a_time(kemar, kemar_eq):
    rng = np.random.default_rng(0)
    directions = np.vstack(
        [
            rng.standard_normal((60, 3)),  # interpolated, some in the hole below -40
            kemar.directions[:5] * 2.0,  # measured (any length)
            direction_to_vector(np.array([0.0, 90.0]), np.array([-80.0, -90.0])),  # nearest
        ]
    )
    for hset in (kemar, kemar_eq):
        one_by_one = np.stack([hset.pair(d).ir for d in directions])
        np.testing.assert_allclose(hset.pairs(directions), one_by_one, rtol=0, atol=1e-12)
    with pytest.raises(HrirError, match="non-zero"):
        kemar.pairs(np.zeros((1, 3)))


# -- a resting source ---------------------------------------------------------------


@pytest.mark.parametrize(
    "azimuth, elevation",
    [(37.0, 12.0), (0.0, 0.0), (-120.0, -60.0)],  # interpolated, measured, in the hole
)
def test_a_resting_source_renders_as_its_fixed_pair(kemar_eq, azimuth, elevation):
    # The reference: the pair a loudspeaker there gets (HrirSet.pair of the equalised
    # set, as render/feeds.py uses), convolved by scipy.signal.oaconvolve. The engine
    # convolves the original set's pair and applies the EQ to the ears' sum; in float32
    # the two agree to 1e-6 of the output's peak, blocks of any size.
    d = direction_to_vector(azimuth, elevation)
    x = _noise(30000)
    engine = moving_source_engine(kemar_eq, [SourcePath.fixed(d)])
    y = _render(engine, x, blocks=(1, 7, 479, 481, 1000, 8192))
    ref = _fixed(x[:, 0], kemar_eq.pair(d).ir)
    assert y.shape == ref.shape == (30000 + kemar_eq.pair(d).ir.shape[-1] - 1, 2)
    assert y.dtype == np.float32
    assert np.abs(y - ref).max() <= 1e-6 * np.abs(ref).max()


def test_resting_sources_with_gains_sum_as_fixed_pairs_in_float64(kemar_eq):
    directions = direction_to_vector(np.array([30.0, -110.0, 170.0]), np.array([0.0, 30.0, -20.0]))
    gains = [0.5, 1.0, 2.0]
    x = _noise(20000, 3, seed=1)
    paths = [SourcePath.fixed(d, g) for d, g in zip(directions, gains)]
    y = _render(moving_source_engine(kemar_eq, paths, gain=0.7, dtype=np.float64), x)
    ref = sum(
        0.7 * g * _fixed(x[:, k], kemar_eq.pair(d).ir)
        for k, (d, g) in enumerate(zip(directions, gains))
    )
    assert y.dtype == np.float64
    assert np.abs(y - ref).max() <= 1e-9 * np.abs(ref).max()


# -- a moving source: interaural cues follow the path --------------------------------


def test_interaural_differences_follow_a_source_moving_left_to_right(kemar_eq):
    # A noise source sweeps from azimuth +90 (left) through the front to -90 (right) in
    # 3 s. In each 50 ms window the ITD (interaural cross-correlation below 1.5 kHz,
    # hrtf.cross_correlation_itd) and the ILD (broadband energy ratio) of the moving
    # render are compared with those of a fixed render at the path's direction in the
    # middle of the window. Tolerances: the source moves 3-4 degrees per window, a grid
    # snap adds at most 1.5 degrees, and the ITD of a head changes by at most about
    # 9 us per degree in front (2a/c per radian for a = 8.75 cm, Woodworth's formula):
    # 5.5 degrees = 50 us, plus the estimator's spread on 50 ms of noise -> 60 us (35 us
    # measured). The ILD changes by at most about 0.5 dB per degree near the side: 3 dB
    # (0.9 measured).
    seconds, window = 3.0, int(0.05 * RATE)
    frames = int(seconds * RATE)
    # Two breakpoints 180 degrees apart are refused (no unique way): go through the front.
    path = SourcePath(
        [0, frames // 2, frames],
        direction_to_vector(np.array([90.0, 0.0, -90.0]), np.zeros(3)),
    )
    x = _noise(frames, seed=2)
    y = _render(moving_source_engine(kemar_eq, [path]), x)
    centres = np.arange(window, frames - window, window)
    got_itd, want_itd, got_ild, want_ild = [], [], [], []
    for c in centres:
        d = path.at(np.array([c]))[0][0]
        ref = _fixed(x[:, 0], kemar_eq.pair(d).ir)
        lo, hi = c - window // 2, c + window // 2
        for signal, itds, ilds in ((y, got_itd, got_ild), (ref, want_itd, want_ild)):
            part = signal[lo:hi].T.astype(np.float64)
            itds.append(cross_correlation_itd(part, RATE))
            ilds.append(10 * np.log10(np.sum(part[0] ** 2) / np.sum(part[1] ** 2)))
    got_itd, want_itd = np.array(got_itd), np.array(want_itd)
    got_ild, want_ild = np.array(got_ild), np.array(want_ild)
    assert np.abs(got_itd - want_itd).max() < 60e-6
    assert np.abs(got_ild - want_ild).max() < 3.0
    clear = np.abs(want_ild) > 1.0
    assert np.all(np.sign(got_ild[clear]) == np.sign(want_ild[clear]))
    # Left leads (ITD > 0, ILD > 0) at the start, right at the end.
    assert got_itd[0] > 400e-6 and got_itd[-1] < -400e-6
    assert got_ild[0] > 6 and got_ild[-1] < -6


# -- no clicks ----------------------------------------------------------------------


def _high_band_jumps(y):
    """Energy above 16 kHz per 5 ms frame, in dB above its running median (21 frames)."""
    sos = scipy.signal.butter(8, 16000.0, "highpass", fs=RATE, output="sos")
    band = scipy.signal.sosfilt(sos, y.astype(np.float64), axis=0)
    frame = int(0.005 * RATE)
    count = len(band) // frame
    energy = np.sum(band[: count * frame].reshape(count, frame, 2) ** 2, axis=(1, 2))
    level = 10 * np.log10(energy + 1e-30)
    median = scipy.ndimage.median_filter(level, size=21, mode="nearest")
    return level - median


@pytest.mark.parametrize("band", ["white", "below 12 kHz"])
def test_a_source_moving_around_the_head_renders_without_clicks(kemar_eq, band):
    # The check: broadband noise circling the head (360 degrees in 2 s, elevation
    # swinging +/-30 degrees); the energy above 16 kHz per 5 ms frame never rises more
    # than 6 dB above its running median (105 ms). Noise alone rises up to about 3-4 dB
    # (measured: 3.1 dB white, 4.2 dB low-passed, over some 750 frames). White noise
    # masks clicks in that band (a switch without crossfade rose only 3.4 dB): low-passed
    # at 12 kHz (still broadband for the ear), any energy above 16 kHz comes from the
    # filter changes, and the same engine switching filters at each hop without the
    # crossfade rises some 27 dB there, so the check can tell.
    frames = int(4 * RATE)
    times = np.linspace(0, frames, 41)
    azimuth = 360.0 * times / (2 * RATE)
    elevation = 30.0 * np.sin(2 * np.pi * times / (1.3 * RATE))
    path = SourcePath(times, direction_to_vector(azimuth, elevation))
    x = _noise(frames, seed=3)
    if band != "white":
        sos = scipy.signal.butter(8, 12000.0, "lowpass", fs=RATE, output="sos")
        x = scipy.signal.sosfilt(sos, x, axis=0)
    edge = int(0.1 * RATE)  # leave out the start and the tail

    smooth = _render(moving_source_engine(kemar_eq, [path]), x)[edge : frames - edge]
    assert _high_band_jumps(smooth).max() < 6.0
    if band != "white":
        naive = moving_source_engine(kemar_eq, [path])
        naive._ramp[...] = 1.0  # switch to the new filter at the start of each hop
        switched = _render(naive, x)[edge : frames - edge]
        assert _high_band_jumps(switched).max() > 20.0


# -- gains ----------------------------------------------------------------------------


def test_a_gain_change_is_applied_smoothly(kemar):
    # A resting source whose gain falls from 1 to 0.25 over 0.5 s. The render is the fixed
    # render times the gain at the 10 ms updates, joined by the raised-cosine ramp
    # (exactly, in float64); that curve differs from the linear ramp by at most 0.105 of
    # the change per hop (max |(1 - cos(pi u)) / 2 - u|), 0.0016 of the signal here.
    # (The set without EQ: an equalised set's filter follows the gain, smoothing it
    # further, so the render is no longer the fixed render times a curve.)
    d = direction_to_vector(60.0, 10.0)
    frames = int(1.5 * RATE)
    path = SourcePath([RATE * 0.5, RATE], np.tile(d, (2, 1)), [1.0, 0.25])
    x = _noise(frames, seed=4)
    engine = moving_source_engine(kemar, [path], dtype=np.float64)
    y = _render(engine, x)
    static = _render(moving_source_engine(kemar, [SourcePath.fixed(d)], dtype=np.float64), x)
    hop = engine.hop
    t = np.arange(len(y))
    j, u = t // hop, (t % hop) / hop
    g0, g1 = path.at(j * hop)[1], path.at((j + 1) * hop)[1]
    curve = g0 + (0.5 - 0.5 * np.cos(np.pi * u)) * (g1 - g0)
    peak = np.abs(static).max()
    assert np.abs(y - curve[:, None] * static).max() < 1e-9 * peak
    linear = np.interp(t, [RATE * 0.5, RATE], [1.0, 0.25])
    assert np.abs(y - linear[:, None] * static).max() < 0.0016 * peak
    assert np.abs(np.diff(curve)).max() < 0.75 / (0.5 * RATE) * np.pi / 2 + 1e-12  # no step


# -- streaming, bounds --------------------------------------------------------------


def test_blocks_of_any_size_give_the_same_render(kemar_eq):
    frames = 24000
    path = SourcePath(
        [0, frames], direction_to_vector(np.array([10.0, 100.0]), np.array([0.0, 20.0]))
    )
    x = _noise(frames, seed=5)
    whole = _render(moving_source_engine(kemar_eq, [path]), x, blocks=(frames,))
    for blocks in [(1, 2, 3, 500), (480,), (479, 4801)]:
        part = _render(moving_source_engine(kemar_eq, [path]), x, blocks=blocks)
        assert part.shape == whole.shape
        assert np.abs(part - whole).max() <= 1e-6 * np.abs(whole).max()


def test_memory_does_not_grow_with_the_stream(kemar):
    table = PairTable(kemar.pairs, RATE)
    # 720 degrees in 20 s, in 1-degree breakpoints so each is a short way
    times = np.linspace(0, 20 * RATE, 721)
    path = SourcePath(times, direction_to_vector(np.linspace(0, 720, 721), np.zeros(721)))
    engine = MovingSourceEngine([path], table)
    block = _noise(8192, seed=6)
    sizes = []
    for i in range(int(20 * RATE) // 8192):
        engine.process(block)
        if i in (10, 100):
            sizes.append((engine.nbytes, table.rows))
    assert sizes[0][0] == sizes[1][0]
    # One ring of the grid (2 degrees): 180 grid pairs at most, however long the stream.
    assert table.rows <= 1 + 181
    assert table.rows <= table.grid_points


def test_a_table_loaded_from_grid_pairs_renders_the_same_bits_without_computing_them(kemar):
    # What the cache does: one table computes every grid pair, another (a later process)
    # takes them and never calls its pair function for a moving source; a third computes
    # the pairs as the source passes. The pairs are rounded to float32 before their
    # spectra are taken in all three, so the renders are the same bits.
    first = PairTable(kemar.pairs, RATE, grid_step_deg=10.0)
    stored = first.grid_pairs()
    assert stored.shape == (first.grid_points, 2, kemar.taps) and stored.dtype == np.float32
    calls = []

    def counted(vectors):
        calls.append(len(vectors))
        return kemar.pairs(vectors)

    second = PairTable(counted, RATE, grid_step_deg=10.0, filter_length=kemar.taps)
    assert not calls  # the length was given: no pair looked up to learn it
    assert second.load_grid_pairs(stored) and second.has_grid_pairs
    frames = 24000
    path = SourcePath([0, frames], direction_to_vector(np.array([0.0, 120.0]), np.zeros(2)))
    x = _noise(frames, seed=8)
    y = _render(MovingSourceEngine([path], second), x)
    assert sum(calls) == 2  # only the two ends, where the path holds: exact pairs
    ref = _render(MovingSourceEngine([path], first), x)
    as_passed = _render(
        MovingSourceEngine([path], PairTable(kemar.pairs, RATE, grid_step_deg=10.0)), x
    )
    np.testing.assert_array_equal(y, ref)
    np.testing.assert_array_equal(as_passed, ref)


def test_grid_pairs_that_do_not_fit_are_not_taken(kemar):
    table = PairTable(kemar.pairs, RATE, grid_step_deg=10.0)
    good = PairTable(kemar.pairs, RATE, grid_step_deg=10.0).grid_pairs()
    bad = good.copy()
    bad[3, 1, 7] = np.nan
    assert not table.load_grid_pairs(good[:-1])  # a grid of another size
    assert not table.load_grid_pairs(good[:, :, :-1])  # pairs of another length
    assert not table.load_grid_pairs(good.astype(np.float64))  # not what a cache keeps
    assert not table.load_grid_pairs(bad)
    wide = PairTable(kemar.pairs, RATE, grid_step_deg=10.0, dtype=np.float64)
    assert not wide.load_grid_pairs(good)  # float64 pairs are not rounded to float32
    assert not table.has_grid_pairs and table.load_grid_pairs(good)
    with pytest.raises(AudioError, match="filter_length must be 1 or more"):
        PairTable(kemar.pairs, RATE, filter_length=0)


def test_silent_and_muted_sources_add_exactly_nothing(kemar):
    # Sources that are silent over a batch, or at gain 0 in all its states, are left out
    # of its transforms and sums: the render is the same bits as without them.
    frames = 48000
    moving = SourcePath([0, frames], direction_to_vector(np.array([30.0, -60.0]), np.zeros(2)))
    muted = SourcePath([0, frames], direction_to_vector(np.array([90.0, 0.0]), np.zeros(2)), [0, 0])
    later = SourcePath.fixed(direction_to_vector(-120.0, 20.0))
    x = np.zeros((frames, 4), np.float32)
    x[:, 0] = _noise(frames, seed=3)[:, 0]
    x[:, 2] = _noise(frames, seed=4)[:, 0]  # loud, but its gain is 0 throughout
    start = 30000
    x[start:, 3] = _noise(frames - start, seed=5)[:, 0]  # silent until `start`
    table = PairTable(kemar.pairs, RATE)
    silent = SourcePath.fixed([1.0, 0.0, 0.0])
    y = _render(MovingSourceEngine([moving, silent, muted, later], table), x, (7680, 1000))
    alone = _render(MovingSourceEngine([moving], table), x[:, :1], (7680, 1000))
    before = start - 2 * 7680  # batches whose windows end before the late source starts
    np.testing.assert_array_equal(y[:before], alone[:before])
    assert np.abs(y[start + 1000 :] - alone[start + 1000 :]).max() > 0.01  # it plays later
    quiet = MovingSourceEngine([silent, muted], table)
    assert not np.any(_render(quiet, x[:, 1:3], (7680,)))


def test_the_grid_snaps_by_less_than_a_step():
    table = PairTable(lambda v: np.zeros((len(v), 2, 4)), RATE)
    grid = table._grid
    v = normalize(np.random.default_rng(7).standard_normal((20000, 3)))
    snapped = grid.vectors(grid.nearest(v))
    angle = np.degrees(np.arccos(np.clip(np.sum(v * snapped, axis=1), -1, 1)))
    # half a step in elevation and about half a step of arc along the ring: 1.5 degrees
    assert angle.max() < table.grid_step_deg * 0.8


# -- paths --------------------------------------------------------------------------


def test_paths_hold_jump_and_interpolate():
    left, front = direction_to_vector(90.0, 0.0), direction_to_vector(0.0, 0.0)
    path = SourcePath([100, 200, 200, 300], [left, front, left, left], [1.0, 0.0, 1.0, 1.0])
    v, g = path.at(np.array([0, 100, 150, 199, 200, 250, 400]))
    np.testing.assert_array_equal(v[0], v[1])  # held before the first breakpoint
    np.testing.assert_allclose(v[2], normalize(left + front), atol=1e-12)  # halfway
    np.testing.assert_array_equal(v[4], left)  # the jump at frame 200
    np.testing.assert_array_equal(v[5], v[4])  # resting: bit for bit the same vector
    np.testing.assert_allclose(g, [1.0, 1.0, 0.5, 0.01, 1.0, 1.0, 1.0])


@pytest.mark.parametrize(
    "frames, vectors, gains, match",
    [
        ([0, 10], [[1, 0, 0], [-1, 0, 0]], None, "opposite"),
        ([10, 0], [[1, 0, 0], [0, 1, 0]], None, "must not decrease"),
        ([0, 10], [[1, 0, 0], [0, 0, 0]], None, "zero vector"),
        ([0, 10], [[1, 0, 0], [0, 1, 0]], [1.0, -1.0], ">= 0"),
        ([0, np.nan], [[1, 0, 0], [0, 1, 0]], None, "finite"),
        ([0, 10], [[1, 0, 0]], None, "vectors"),
    ],
)
def test_bad_paths_are_refused(frames, vectors, gains, match):
    with pytest.raises(AudioError, match=match):
        SourcePath(frames, vectors, gains)


def test_bad_engines_are_refused(kemar):
    table = PairTable(kemar.pairs, RATE)
    with pytest.raises(AudioError, match="hop must be"):
        PairTable(kemar.pairs, RATE, hop=481)
    with pytest.raises(AudioError, match="at least one"):
        MovingSourceEngine([], table)
    with pytest.raises(HrirError, match=r"shape \(n, 2, L\)"):
        PairTable(lambda v: np.zeros((len(v), 3)), RATE)
    engine = MovingSourceEngine([SourcePath.fixed([1.0, 0, 0])], table)
    with pytest.raises(AudioError, match=r"shape \(frames, 1\)"):
        engine.process(np.zeros((10, 2)))


# -- spread (width, height, depth, diffuse per breakpoint) ---------------------------


def test_a_path_without_spread_has_none_and_reads_as_a_point():
    path = SourcePath([0, 100], [[1.0, 0, 0], [0, 1.0, 0]], [1.0, 0.5])
    assert path.spread is None
    np.testing.assert_array_equal(path.at_spread(np.array([0, 50, 500])), np.zeros((3, 4)))
    with_spread = SourcePath([0, 100], [[1.0, 0, 0], [0, 1.0, 0]], [1.0, 0.5], np.zeros((2, 4)))
    frames = np.arange(0, 200, 7)
    for got, want in zip(with_spread.at(frames), path.at(frames)):
        np.testing.assert_array_equal(got, want)  # the spread leaves direction and gain alone


def test_spread_holds_jumps_and_interpolates_like_the_gains():
    front = direction_to_vector(0.0, 0.0)
    spread = [[0, 0, 0, 0], [90, 30, 0.2, 0.5], [10, 10, 0, 1.0], [10, 10, 0, 1.0]]
    path = SourcePath([100, 200, 200, 300], [front] * 4, [1.0, 0.0, 1.0, 1.0], spread)
    frames = np.array([0, 100, 150, 199, 200, 250, 400])
    s = path.at_spread(frames)
    g = path.at(frames)[1]
    # Column by column the same weights as the gains (linear, held, the jump at 200).
    np.testing.assert_allclose(s[:, 0], [0, 0, 45, 89.1, 10, 10, 10], atol=1e-12)
    np.testing.assert_allclose(s[:, 3], [0, 0, 0.25, 0.495, 1.0, 1.0, 1.0], atol=1e-12)
    np.testing.assert_allclose(1.0 - g[:4], s[:4, 3] / 0.5, atol=1e-12)
    # Resting with a constant spread: bit for bit the breakpoint's row, frame after frame.
    rest = path.at_spread(np.arange(200, 400, 3))
    assert np.all(rest == np.array(spread[2], dtype=float))
    fixed = SourcePath.fixed(front, 0.5, [20.0, 5.0, 0.0, 0.1])
    assert np.all(fixed.at_spread(np.arange(10)) == [20.0, 5.0, 0.0, 0.1])


@pytest.mark.parametrize(
    "spread, match",
    [
        (np.zeros((2, 3)), r"shape \(2, 4\)"),
        ([[0, 0, 0, 0], [-1, 0, 0, 0]], "width must be >= 0"),
        ([[0, 0, 0, 0], [0, 0, 0, 1.5]], "diffuse must be from 0 to 1"),
        ([[0, np.inf, 0, 0], [0, 0, 0, 0]], "finite"),
    ],
)
def test_bad_spreads_are_refused(spread, match):
    with pytest.raises(AudioError, match=match):
        SourcePath([0, 10], [[1, 0, 0], [0, 1, 0]], None, spread)
