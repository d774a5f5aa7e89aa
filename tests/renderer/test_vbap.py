"""VBAP gains (V. Pulkki, "Virtual sound source positioning using vector base amplitude
panning", J. Audio Eng. Soc. 45(6), 1997): unit power, the direction reproduced, a source
on a loudspeaker, continuity along paths, arrays with holes."""

from __future__ import annotations

import numpy as np
import pytest

from earfold.renderer.errors import LayoutError
from earfold.renderer.geometry import direction_to_vector, normalize
from earfold.renderer.layouts import VbapPanner, get_layout
from earfold.renderer.scenes import virtual_layout


def _layout_vectors(name: str) -> np.ndarray:
    layout = get_layout(name)
    return np.array(
        [direction_to_vector(s.azimuth, s.elevation) for s in layout.speakers if not s.lfe]
    )


def _ring(count: int) -> np.ndarray:
    return direction_to_vector(np.arange(count) * 360.0 / count, np.zeros(count))


ARRAYS = {
    "t-design 7 (32 points)": virtual_layout(3),
    "t-design 15 (124 points)": virtual_layout(7),
    "7.1.4 (no loudspeaker below)": _layout_vectors("7.1.4"),
    "5.1 ring (horizontal only)": _layout_vectors("5.1"),
    "8-ring": _ring(8),
}


def _random_directions(count: int, seed: int = 0) -> np.ndarray:
    return normalize(np.random.default_rng(seed).standard_normal((count, 3)))


@pytest.mark.parametrize("name", ARRAYS)
def test_gains_have_unit_power_and_are_non_negative(name):
    # Pulkki 1997, eq. 10: the gains are scaled so that sum g_i^2 = 1.
    gains = VbapPanner(ARRAYS[name]).gains(_random_directions(5000))
    np.testing.assert_allclose(np.sum(gains**2, axis=1), 1.0, atol=1e-12)
    assert np.all(gains >= 0)


@pytest.mark.parametrize("name", ["t-design 7 (32 points)", "t-design 15 (124 points)"])
def test_gain_vector_reproduces_the_direction_on_a_full_sphere(name):
    # Pulkki 1997, eq. 8: p = g L, so sum_i g_i l_i is parallel to p (here, after the
    # power normalisation, a positive multiple of it).
    panner = VbapPanner(ARRAYS[name])
    p = _random_directions(5000, seed=1)
    g = panner.gains(p)
    assert np.count_nonzero(g > 1e-12, axis=1).max() <= 3
    reproduced = g @ panner.vectors
    np.testing.assert_allclose(normalize(reproduced), p, atol=1e-12)


def test_gain_vector_reproduces_the_direction_where_real_loudspeakers_cover_it():
    # 7.1.4: above the horizon every triangle is made of real loudspeakers.
    panner = VbapPanner(ARRAYS["7.1.4 (no loudspeaker below)"])
    p = _random_directions(5000, seed=2)
    p = p[p[:, 2] >= 0]
    np.testing.assert_allclose(normalize(panner.gains(p) @ panner.vectors), p, atol=1e-12)


@pytest.mark.parametrize("name", ARRAYS)
def test_a_source_on_a_loudspeaker_gets_gain_one_there(name):
    vectors = normalize(ARRAYS[name])
    gains = VbapPanner(vectors).gains(vectors)
    np.testing.assert_allclose(gains, np.eye(len(vectors)), atol=1e-12)


def test_between_two_horizontal_loudspeakers_the_tangent_law_holds():
    # On the horizon of a ring (a virtual pole's gain is 0 there) 3-D VBAP reduces to
    # 2-D pair-wise panning, which obeys the tangent law (Pulkki 1997, eq. 3; Bennett,
    # Barker and Edeko 1985): tan(phi) / tan(phi0) = (g1 - g2) / (g1 + g2), base angle
    # phi0 = 30 degrees measured from the pair's centre.
    vectors = direction_to_vector(np.array([30.0, -30.0, 110.0, -110.0]), np.zeros(4))
    panner = VbapPanner(vectors)
    phi = np.linspace(-29.0, 29.0, 59)
    g = panner.gains(direction_to_vector(phi, np.zeros_like(phi)))
    assert np.all(g[:, 2:] < 1e-12)
    ratio = (g[:, 0] - g[:, 1]) / (g[:, 0] + g[:, 1])
    np.testing.assert_allclose(
        ratio, np.tan(np.radians(phi)) / np.tan(np.radians(30.0)), atol=1e-12
    )


def _great_circle(start: np.ndarray, through: np.ndarray, steps: int) -> np.ndarray:
    u = normalize(start)
    w = normalize(through - (through @ u) * u)
    t = np.linspace(0, 2 * np.pi, steps)
    return np.outer(np.cos(t), u) + np.outer(np.sin(t), w)


@pytest.mark.parametrize("name", ARRAYS)
def test_gains_change_continuously_along_paths(name):
    # Adjacent triangles share an edge on which the third gain is 0 (Pulkki 1997, sec.
    # 3.1): the gains are continuous. Paths of 0.05-degree steps, some through the poles
    # and the hole below 7.1.4; a jump would be some tenths, a continuous change stays
    # well under 0.02 per step (the largest derivative, near small triangles, is some
    # 0.01 per 0.05 degrees).
    panner = VbapPanner(ARRAYS[name])
    rng = np.random.default_rng(3)
    circles = [_great_circle(np.array([1.0, 0, 0]), np.array([0, 0, 1.0]), 7201)]
    circles += [_great_circle(*rng.standard_normal((2, 3)), 7201) for _ in range(4)]
    for path in circles:
        gains = panner.gains(path)
        assert np.abs(np.diff(gains, axis=0)).max() < 0.02


def test_a_hole_below_is_closed_by_a_virtual_point_shared_by_the_ring():
    # 7.1.4 has nothing below the horizon: a virtual nadir point (common practice), whose
    # gain is shared equally by the seven loudspeakers around it.
    panner = VbapPanner(ARRAYS["7.1.4 (no loudspeaker below)"])
    assert len(panner.virtual) == 1 and panner.virtual[0][2] == -1.0
    g = panner.gains(np.array([0.0, 0.0, -1.0]))[0]
    labels = [s.label for s in get_layout("7.1.4").speakers if not s.lfe]
    ring = [i for i, label in enumerate(labels) if not label.endswith(("tf", "tr"))]
    np.testing.assert_allclose(g[ring], 1 / np.sqrt(7), atol=1e-12)
    assert np.all(g[[i for i in range(len(labels)) if i not in ring]] == 0)
    # Below a loudspeaker, its own gain leads.
    under_left = panner.gains(direction_to_vector(30.0, -60.0))[0]
    assert int(np.argmax(under_left)) == labels.index("L")


def test_horizontal_rings_get_both_poles_and_full_spheres_none():
    assert len(VbapPanner(_ring(6)).virtual) == 2
    assert len(VbapPanner(virtual_layout(3)).virtual) == 0


@pytest.mark.parametrize(
    "vectors, match",
    [
        (direction_to_vector(np.array([30.0, -30.0, 0.0]), np.zeros(3)), "all around"),
        (np.zeros((4, 3)), "zero vector"),
        (np.ones((2, 3)), r"shape \(M, 3\)"),
        (np.vstack([_ring(6), _ring(6)[:1]]), "point the same way"),
        (np.full((4, 3), np.nan), "finite"),
    ],
)
def test_arrays_that_cannot_pan_are_refused(vectors, match):
    with pytest.raises(LayoutError, match=match):
        VbapPanner(vectors)


def test_bad_source_directions_are_refused():
    panner = VbapPanner(_ring(6))
    with pytest.raises(LayoutError, match="zero or not finite"):
        panner.gains(np.zeros(3))
    with pytest.raises(LayoutError, match=r"shape \(n, 3\)"):
        panner.gains(np.ones((2, 2)))
