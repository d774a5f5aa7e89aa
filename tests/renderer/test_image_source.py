"""Image-source method: analytic mirrors, pyroomacoustics' ShoeBox, gains, directions."""

from __future__ import annotations

import numpy as np
import pyroomacoustics as pra
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.defaults import SPEED_OF_SOUND
from earfold.renderer.errors import RoomError
from earfold.renderer.room import SURFACES, image_sources, room_from_dict

FS = 48000
DIMS = (6.0, 4.5, 3.2)
LISTENER = {"to_front_wall": 2.4, "to_left_wall": 1.9, "ear_height": 1.2}
SOURCE = np.array([4.7, 3.1, 1.6])


def _room(absorption: dict | float = 0.2, order: int = 3):
    if not isinstance(absorption, dict):
        absorption = {s: absorption for s in SURFACES}
    return room_from_dict(
        {"dimensions": list(DIMS), "listener": LISTENER, "absorption": absorption, "order": order}
    )


def test_first_order_images_are_the_six_analytic_mirrors():
    # Allen and Berkley (1979): the first-order images mirror the source in each wall.
    room = _room(order=1)
    im = image_sources(room, SOURCE)
    length, width, height = DIMS
    sx, sy, sz = SOURCE
    expected = {
        "back": (-sx, sy, sz),
        "front": (2 * length - sx, sy, sz),
        "right": (sx, -sy, sz),
        "left": (sx, 2 * width - sy, sz),
        "floor": (sx, sy, -sz),
        "ceiling": (sx, sy, 2 * height - sz),
    }
    assert im.count == 7 and im.orders[0] == 0
    assert_allclose(im.positions[0], SOURCE)
    for k in range(1, 7):
        wall = SURFACES[int(np.argmax(im.hits[k]))]
        assert im.hits[k].sum() == 1
        assert_allclose(im.positions[k], expected[wall], atol=1e-12)
    listener = np.asarray(room.listener)
    assert_allclose(im.distances, np.linalg.norm(im.positions - listener, axis=1))
    assert_allclose(im.delays, im.distances / SPEED_OF_SOUND)
    assert np.all(np.diff(im.distances) >= 0)


@pytest.mark.parametrize("order", [0, 1, 2, 3, 6])
def test_image_count_follows_the_shoebox_formula(order):
    # Every image is visible in a shoebox, so the count is the number of lattice points
    # with |i| + |j| + |k| <= N counted with parities: (2N + 1)(2N^2 + 2N + 3) / 3
    # (computed from the image lattice; 63 for N = 3, as pyroomacoustics gives below).
    im = image_sources(_room(order=order), SOURCE)
    assert im.count == (2 * order + 1) * (2 * order**2 + 2 * order + 3) // 3
    assert im.orders.max() == order


def _pyroomacoustics_images(absorption: dict[str, float], order: int):
    # pyroomacoustics' ShoeBox names its walls by axis: west/east at small/large x,
    # south/north at small/large y (its room.py docstring). Our x runs back -> front and
    # y right -> left, so back = west, front = east, right = south, left = north.
    names = {
        "back": "west",
        "front": "east",
        "right": "south",
        "left": "north",
        "floor": "floor",
        "ceiling": "ceiling",
    }
    materials = {names[s]: pra.Material(a) for s, a in absorption.items()}
    room = pra.ShoeBox(
        list(DIMS),
        fs=FS,
        max_order=order,
        materials=materials,
        air_absorption=False,
        ray_tracing=False,
        use_rand_ism=False,
    )
    room.add_source(SOURCE.tolist())
    ours = _room(absorption, order)
    room.add_microphone(list(ours.listener))
    room.image_source_model()
    src = room.sources[0]
    return ours, np.asarray(src.images, dtype=float).T, np.asarray(src.damping[0], dtype=float)


def test_images_match_pyroomacoustics_shoebox():
    # Reference library: pyroomacoustics' ShoeBox image sources for the same room, source,
    # listener and order 3; its positions are float32, so arrival times are compared
    # within one sample at 48 kHz and positions within a millimetre.
    absorption = {
        "front": 0.1,
        "back": 0.5,
        "left": 0.3,
        "right": 0.7,
        "floor": 0.05,
        "ceiling": 0.9,
    }
    room, positions, damping = _pyroomacoustics_images(absorption, 3)
    im = image_sources(room, SOURCE, order=3)
    assert positions.shape[0] == im.count == 63
    listener = np.asarray(room.listener)
    theirs = np.linalg.norm(positions - listener, axis=1) / SPEED_OF_SOUND
    order = np.argsort(theirs, kind="stable")
    assert_allclose(im.delays * FS, theirs[order] * FS, atol=1.0)
    # Same set of positions, and the same reflection gain for each (all bands equal here):
    # pyroomacoustics' damping is the product of the walls' sqrt(1 - alpha).
    gaps = np.linalg.norm(im.positions[:, None, :] - positions[None, :, :], axis=-1)
    match = np.argmin(gaps, axis=1)
    assert np.all(gaps[np.arange(im.count), match] < 1e-3)
    assert len(set(match.tolist())) == im.count
    assert_allclose(im.reflection[:, 0], damping[match], rtol=1e-6)


def test_reflection_gain_is_the_product_of_the_walls_beta_per_band():
    # beta = sqrt(1 - alpha) per hit (REFERENCES.md, recalled), per band.
    low_high = [0.1, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6]
    room = _room({**{s: 0.2 for s in SURFACES}, "floor": low_high})
    im = image_sources(room, SOURCE, order=2)
    floor = SURFACES.index("floor")
    for k in range(im.count):
        expected = (
            np.sqrt(0.8) ** (im.orders[k] - im.hits[k, floor])
            * np.sqrt(1.0 - np.array(low_high)) ** im.hits[k, floor]
        )
        assert_allclose(im.reflection[k], expected)
    assert_allclose(im.air, 1.0)  # no air absorption in this room


def test_spreading_is_one_over_r_relative_to_the_reference():
    im = image_sources(_room(), SOURCE, reference_distance=2.0)
    assert_allclose(im.spreading, 2.0 / im.distances)
    assert image_sources(_room(), SOURCE).spreading[0] == pytest.approx(1.0)


def test_arrival_directions_are_in_the_listener_frame():
    room = _room(order=1)
    im = image_sources(room, SOURCE)
    listener = np.asarray(room.listener)
    assert_allclose(np.linalg.norm(im.directions, axis=1), 1.0)
    assert_allclose(im.directions[0], (SOURCE - listener) / np.linalg.norm(SOURCE - listener))
    by_wall = {SURFACES[int(np.argmax(im.hits[k]))]: im.directions[k] for k in range(1, 7)}
    # The listener faces the front wall (+x), the left wall is on +y, the ceiling on +z.
    assert by_wall["front"][0] > 0.9
    assert by_wall["back"][0] < -0.5
    assert by_wall["left"][1] > 0.5 and by_wall["right"][1] < -0.5
    assert by_wall["floor"][2] < 0 and by_wall["ceiling"][2] > 0


def test_air_absorption_attenuates_with_distance_and_frequency():
    room = room_from_dict({"dimensions": [32, 22, 13], "rt60": 1.5, "air_absorption": True})
    im = image_sources(room, np.array([20.0, 11.0, 1.2]), order=2)
    assert np.all(np.diff(im.air[:, -1]) <= 1e-15)  # farther paths lose more at 8 kHz
    assert np.all(im.air[:, 0] > im.air[:, -1])
    assert im.band_gains.shape == (im.count, 7)


def test_max_distance_keeps_the_direct_path():
    im = image_sources(_room(order=3), SOURCE, max_distance=5.0)
    assert im.orders[0] == 0
    assert np.all(im.distances <= 5.0)
    assert im.complete_distance > im.distances[0]


def test_bad_arguments_are_rejected():
    with pytest.raises(RoomError, match=r"order 7 must be an integer from 0 to 6"):
        image_sources(_room(), SOURCE, order=7)
    with pytest.raises(RoomError, match=r"source at \(7\.0, 1\.0, 1\.0\) is not inside room"):
        image_sources(_room(), np.array([7.0, 1.0, 1.0]))
