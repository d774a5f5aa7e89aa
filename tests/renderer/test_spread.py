"""Sources with an extent (renderer/layouts/_spread.py): VBAP gains (V. Pulkki, JAES 45(6),
1997) summed over a patch around the source as multiple-direction amplitude panning
(V. Pulkki, IEEE WASPAA 1999; from memory): unit power, the velocity vector kept, the
energy vector (M. Gerzon's rE) shrinking as the extent grows, rings and the whole sphere."""

from __future__ import annotations

import numpy as np
import pytest

from earfold.renderer.errors import LayoutError
from earfold.renderer.geometry import direction_to_vector, normalize
from earfold.renderer.layouts import SpreadPanner, VbapPanner, diffuse_split, get_layout
from earfold.renderer.scenes import virtual_layout


@pytest.fixture(scope="module")
def vbap():
    return VbapPanner(virtual_layout(4))  # the 50-point array objects are panned onto


@pytest.fixture(scope="module")
def spread(vbap):
    return SpreadPanner(vbap)


def _directions(count, seed=0):
    return normalize(np.random.default_rng(seed).standard_normal((count, 3)))


def _energy_vector(gains, vectors):
    """Gerzon's energy vector rE = sum g_i^2 l_i / sum g_i^2 (from memory)."""
    return (gains**2) @ vectors / np.sum(gains**2, axis=1, keepdims=True)


def test_the_step_is_at_most_half_the_arrays_widest_gap(vbap, spread):
    assert spread.step_deg <= 0.5 * vbap.spacing_deg
    # The t-design's neighbours are some 25-41 degrees apart.
    assert 20.0 < vbap.spacing_deg < 60.0


def test_gains_have_unit_power_and_are_non_negative(vbap, spread):
    rng = np.random.default_rng(1)
    d = _directions(2000)
    w, h = rng.uniform(0, 400, 2000), rng.uniform(0, 200, 2000)
    g = spread.gains(d, w, h)
    assert g.shape == (2000, vbap.loudspeakers) and np.all(g >= 0)
    # Pulkki 1997, eq. 10: sum g_i^2 = 1, kept for the sum over the extent.
    np.testing.assert_allclose(np.sum(g**2, axis=1), 1.0, atol=1e-12)


def test_zero_extent_is_plain_vbap_exactly(vbap, spread):
    d = np.vstack([_directions(500, seed=2), vbap.vectors])
    w = np.where(np.arange(len(d)) % 2 == 0, 0.0, 30.0)
    g = spread.gains(d, w, 0.0)
    points = w == 0
    np.testing.assert_array_equal(g[points], vbap.gains(d[points]))
    np.testing.assert_array_equal(spread.gains(d, 0.0, 0.0), vbap.gains(d))


def test_a_symmetric_extent_keeps_the_velocity_vector_on_the_source(vbap, spread):
    # Pulkki 1997, eq. 8: each sample's unscaled gains give sum g_i l_i = the sample's
    # vector; the extent is symmetric about the source in its own frame, so the sum of
    # its samples (and of their gains) points at the source.
    d = _directions(300, seed=3)
    for width, height in [(10.0, 0.0), (45.0, 20.0), (120.0, 60.0), (300.0, 150.0)]:
        g = spread.gains(d, width, height)
        np.testing.assert_allclose(normalize(g @ vbap.vectors), d, atol=1e-9)


def test_the_energy_vector_shrinks_as_the_width_grows(vbap, spread):
    widths = np.arange(0.0, 361.0, 5.0)

    def r_e(d, height_share):
        return np.array(
            [
                np.linalg.norm(
                    _energy_vector(spread.gains(d, w, min(height_share * w, 180.0)), vbap.vectors),
                    axis=1,
                )
                for w in widths
            ]
        )

    for height_share in (0.0, 0.5):
        # A source on a loudspeaker starts at rE = 1 and only ever spreads (Gerzon's
        # rE magnitude: 1 for one loudspeaker, smaller the more it is shared).
        on = r_e(vbap.vectors, height_share)
        np.testing.assert_allclose(on[0], 1.0, atol=1e-12)
        assert np.all(np.diff(on, axis=0) < 0)
        # Between loudspeakers VBAP already shares a point among up to three; widths
        # below the array's spacing (45 degrees here) keep rE within 0.005 of the
        # point's (measured: at most 0.0023), and from there on it only falls.
        between = r_e(_directions(60, seed=4), height_share)
        steps = np.diff(between, axis=0)
        assert steps.max() < 0.005
        assert np.all(steps[widths[:-1] >= 45.0] < 1e-12)
        assert np.all(between[-1] < between[0] - 0.5)


def test_width_360_is_a_ring_on_the_horizon(vbap, spread):
    g = spread.gains(direction_to_vector(np.array([0.0, 70.0]), np.zeros(2)), 360.0)
    elevation = np.degrees(np.arcsin(vbap.vectors[:, 2]))
    # Energy only on loudspeakers of the triangles the horizon crosses (the t-design's
    # nearest rings are within 30 degrees), and none left over in any direction.
    assert np.all(g[:, np.abs(elevation) > 30.0] == 0)
    assert np.count_nonzero(g[0]) >= 20
    np.testing.assert_allclose(_energy_vector(g, vbap.vectors), 0.0, atol=1e-9)


def test_a_whole_sphere_extent_feeds_every_loudspeaker(vbap, spread):
    g = spread.gains(_directions(5, seed=5), 360.0, 180.0)
    np.testing.assert_allclose(_energy_vector(g, vbap.vectors), 0.0, atol=1e-9)
    # The spread of energy: every loudspeaker within a factor 2 of an even share (the
    # t-design's loudspeakers hold triangles of unequal area; measured 0.66 to 1.59).
    share = g**2 * vbap.loudspeakers
    assert share.min() > 0.5 and share.max() < 2.0
    # Past the largest extents nothing changes.
    d = _directions(5, seed=5)
    np.testing.assert_array_equal(spread.gains(d, 500.0, 300.0), g)


def test_gains_change_smoothly_as_the_width_grows(spread):
    d = _directions(5, seed=6)
    widths = np.arange(0.0, 360.0, 0.25)
    g = np.array([spread.gains(d, w, 0.25 * w) for w in widths])
    # Samples appear at the ends with no weight, so no step as a width passes a multiple
    # of the sampling step (measured: at most 0.0025 per quarter degree).
    assert np.abs(np.diff(g, axis=0)).max() < 0.01
    np.testing.assert_allclose(g[1], spread.gains(d), atol=0.01)  # closing on the point


def test_arrays_with_holes_keep_unit_power():
    layout = get_layout("7.1.4")
    v = np.array(
        [direction_to_vector(s.azimuth, s.elevation) for s in layout.speakers if not s.lfe]
    )
    g = SpreadPanner(VbapPanner(v)).gains(_directions(500, seed=7), 90.0, 45.0)
    np.testing.assert_allclose(np.sum(g**2, axis=1), 1.0, atol=1e-12)
    assert np.all(g >= 0)


def test_summed_gains_equal_the_sum_of_single_gains(vbap):
    # The fast path (a guessed triangle, checked) against the plain one.
    p = _directions(3000, seed=8)
    owners = np.arange(3000) % 7
    weights = np.random.default_rng(8).uniform(0.1, 1.0, 3000)
    single = vbap.gains(p, unit_power=False) * weights[:, None]
    want = np.stack([single[owners == k].sum(axis=0) for k in range(7)])
    np.testing.assert_allclose(vbap.summed_gains(p, owners, weights, 7), want, atol=1e-12)
    # Unscaled gains reproduce the direction itself (Pulkki 1997, eq. 8).
    np.testing.assert_allclose(vbap.gains(p, unit_power=False) @ vbap.vectors, p, atol=1e-12)


def test_the_diffuse_split_preserves_power():
    d = np.linspace(0.0, 1.0, 11)
    direct, diffuse = diffuse_split(d)
    # Common practice: amplitudes sqrt(1 - d) and sqrt(d), powers summing to 1.
    np.testing.assert_allclose(direct**2 + diffuse**2, 1.0, atol=1e-15)
    np.testing.assert_allclose(diffuse**2, d, atol=1e-15)
    with pytest.raises(LayoutError, match="from 0 to 1"):
        diffuse_split([0.5, 1.2])


def test_bad_extents_are_refused(vbap, spread):
    front = direction_to_vector(0.0, 0.0)
    with pytest.raises(LayoutError, match="width must be a finite number"):
        spread.gains(front, -1.0)
    with pytest.raises(LayoutError, match="height must be one number or one per direction"):
        spread.gains(front, 10.0, [1.0, 2.0])
    with pytest.raises(LayoutError, match="zero or not finite"):
        spread.gains(np.zeros(3), 10.0)
    with pytest.raises(LayoutError, match="needs a VbapPanner"):
        SpreadPanner(vbap.vectors)
    with pytest.raises(LayoutError, match="step_deg"):
        SpreadPanner(vbap, step_deg=0.1)
    with pytest.raises(LayoutError, match=r"shape \(1, 4\)"):
        spread.spread_gains(front[None, :], np.zeros((1, 3)))
