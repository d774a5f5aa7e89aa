"""An object's extent as angles (renderer/objects/_extent.py): ITU-R BS.2076-2 polar
width and height in degrees as they are, cartesian sizes (fractions of the room cube)
turned into the angles their box covers from the listener."""

from __future__ import annotations

from fractions import Fraction as F

import numpy as np
import pytest

from earfold.renderer.errors import AdmError
from earfold.renderer.objects import (
    ChannelFormat,
    ObjectBlock,
    ObjectChannel,
    cartesian_extent,
    object_positions,
    object_spread,
)


def _object(cartesian, blocks):
    """An object of blocks ``(rtime, duration, position, width, height, depth, diffuse)``."""
    made = tuple(
        ObjectBlock(
            f"AB_00031001_{k + 1:08X}", F(t), F(d), cartesian, pos, False, None, 1.0, w, h, dp, df
        )
        for k, (t, d, pos, w, h, dp, df) in enumerate(blocks)
    )
    channel = ChannelFormat("AC_00031001", "thing", "Objects", made)
    return ObjectChannel(
        "AO_1001", "thing", ("AO_1001",), channel, 0, "ATU_00000001", 1.0, False, F(0), None
    )


def test_polar_extents_pass_as_degrees_and_move_with_the_blocks():
    obj = _object(
        False,
        [(0, 1, (30.0, 0.0, 1.0), 0.0, 0.0, 0.0, 0.0), (1, 2, (30.0, 0.0, 1.0), 90.0, 40, 0.5, 1)],
    )
    spread = object_spread(object_positions(obj, [0.5, 2.0, 5.0]))
    # BS.2076-2 interpolation, as for the position: halfway through the second block.
    np.testing.assert_allclose(
        spread, [[0, 0, 0, 0], [45.0, 20.0, 0.25, 0.5], [90.0, 40.0, 0.5, 1.0]], atol=1e-12
    )


def test_a_box_in_front_spans_the_angle_of_its_face():
    # Hand-computed: at (X, Y, Z) = (0, 1, 0) a box of half-width 0.5 along X is 1 away
    # with a face 1 across: 2 atan(0.5) = 53.13 degrees wide; half-height 0.25 along Z:
    # 2 atan(0.25) = 28.07 degrees tall.
    w, h = cartesian_extent([[0.0, 1.0, 0.0]], 0.5, 0.25, 0.0)
    np.testing.assert_allclose(w, np.degrees(2 * np.arctan(0.5)), atol=1e-9)
    np.testing.assert_allclose(h, np.degrees(2 * np.arctan(0.25)), atol=1e-9)
    # Depth (along Y) brings its near face closer: 0.5 away, 2 atan(0.5 / 0.5) = 90.
    w, _ = cartesian_extent([[0.0, 1.0, 0.0]], 0.5, 0.0, 0.5)
    np.testing.assert_allclose(w, 90.0, atol=1e-9)


def test_on_the_side_depth_widens_and_width_comes_closer():
    # At (X, Y) = (-1, 0), the listener's left: Y (depth) runs across the view, X (width)
    # along it. Width alone: a segment pointing at the listener, 0 wide.
    w, _ = cartesian_extent([[-1.0, 0.0, 0.0]], 0.5, 0.0, 0.0)
    np.testing.assert_allclose(w, 0.0, atol=1e-9)
    w, _ = cartesian_extent([[-1.0, 0.0, 0.0]], 0.5, 0.0, 0.5)
    np.testing.assert_allclose(w, 90.0, atol=1e-9)  # 2 atan(0.5 / (1 - 0.5))


def test_a_box_around_the_listener_is_the_whole_sphere_and_the_way_there_is_smooth():
    w, h = cartesian_extent([[0.0, 0.0, 0.0]], 0.5, 0.5, 0.5)
    np.testing.assert_allclose([w[0], h[0]], [360.0, 360.0])
    # Walking a box in from the front: never a jump, never narrower as it comes closer.
    y = np.linspace(1.0, 0.0, 401)
    w, h = cartesian_extent(np.column_stack([0 * y, y, 0 * y]), 0.3, 0.3, 0.3)
    assert np.all(np.diff(w) >= 0) and np.all(np.diff(h) >= 0)
    assert np.abs(np.diff(w)).max() < 5.0
    assert w[0] < 60.0 and w[-1] == 360.0


def test_points_have_no_extent_and_bad_sizes_are_refused():
    w, h = cartesian_extent(np.random.default_rng(0).uniform(-1, 1, (50, 3)), 0.0, 0.0, 0.0)
    assert np.all(w == 0) and np.all(h == 0)
    with pytest.raises(AdmError, match="sizes >= 0"):
        cartesian_extent([[0.0, 1.0, 0.0]], -0.1, 0.0, 0.0)


def test_cartesian_objects_get_angles_in_their_spread():
    obj = _object(True, [(0, 1, (0.0, 1.0, 0.0), 0.5, 0.25, 0.0, 0.3)])
    spread = object_spread(object_positions(obj, [0.5]))
    np.testing.assert_allclose(
        spread[0], [np.degrees(2 * np.arctan(0.5)), np.degrees(2 * np.arctan(0.25)), 0.0, 0.3]
    )
