"""Scene rotation: real-harmonic rotation matrices (Ivanic and Ruedenberg 1996/1998)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.spatial.transform import Rotation

from earfold.renderer.errors import SceneError
from earfold.renderer.geometry import direction_to_vector, vector_to_direction
from earfold.renderer.scenes import encode, rotation_matrix, scene_rotation, sh_rotation


@pytest.mark.parametrize("order", range(1, 8))
def test_rotating_an_encoded_wave_equals_encoding_the_rotated_direction(order):
    # The defining property (issue 17): encode(R d) = M(R) encode(d), to 1e-6, random d, R.
    rng = np.random.default_rng(order)
    d = rng.standard_normal((40, 3))
    for r in Rotation.random(5, random_state=order).as_matrix():
        m = sh_rotation(r, order)
        assert_allclose(encode(d @ r.T, order), encode(d, order) @ m.T, atol=1e-6)
        assert_allclose(m @ m.T, np.eye((order + 1) ** 2), atol=1e-10)  # orthogonal
    yaw, pitch, roll = rng.uniform(-180, 180, 3)
    r = scene_rotation(yaw, pitch, roll)
    assert_allclose(
        encode(d @ r.T, order),
        encode(d, order) @ rotation_matrix(order, yaw, pitch, roll).T,
        atol=1e-6,
    )


def test_yaw_pitch_and_roll_turn_the_way_the_module_says():
    front, left = direction_to_vector(0, 0), direction_to_vector(90, 0)
    az, el = vector_to_direction(scene_rotation(yaw=30) @ direction_to_vector(50, 20))
    assert_allclose([az, el], [80, 20], atol=1e-12)  # a source at a is heard at a + yaw
    az, el = vector_to_direction(scene_rotation(pitch=25) @ front)
    assert_allclose([az, el], [0, 25], atol=1e-12)  # positive pitch lifts the front
    az, el = vector_to_direction(scene_rotation(roll=25) @ left)
    assert_allclose([az, el], [90, 25], atol=1e-12)  # positive roll lifts the left
    # Order of application: roll, pitch, then yaw.
    combined = scene_rotation(40, 25, 10)
    assert_allclose(
        combined, scene_rotation(yaw=40) @ scene_rotation(pitch=25) @ scene_rotation(roll=10)
    )
    assert_allclose(rotation_matrix(3, yaw=90) @ encode(front, 3), encode(left, 3), atol=1e-12)


def test_scipy_rotation_agrees_on_the_axes():
    # scipy's Rotation.from_euler("ZYX", [yaw, -pitch, roll]) (intrinsic z-y'-x'') is the
    # same matrix: yaw about z, pitch about y with the sign that lifts the front, roll about x.
    r = Rotation.from_euler("ZYX", [40, -25, 10], degrees=True).as_matrix()
    assert_allclose(scene_rotation(40, 25, 10), r, atol=1e-12)


def test_bad_rotations_are_refused():
    with pytest.raises(SceneError, match="finite number of degrees"):
        scene_rotation(yaw=float("nan"))
    with pytest.raises(SceneError, match="reflection"):
        sh_rotation(np.diag([1.0, -1.0, 1.0]), 2)
    with pytest.raises(SceneError, match="not a 3 x 3 rotation"):
        sh_rotation(np.eye(2), 2)
    with pytest.raises(SceneError, match="order must be 1 to 7"):
        rotation_matrix(8, 10)
