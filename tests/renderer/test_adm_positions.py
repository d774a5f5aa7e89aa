"""Object positions over time as ITU-R BS.2076-2 defines them (audioBlockFormat, Objects:
``jumpPosition`` and ``interpolationLength``), checked against hand-computed values, and a
long programme with many blocks."""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
import pytest
from adm_factory import (
    audio_object,
    channel,
    chna_body,
    content,
    document,
    object_block,
    pack,
    programme,
    seconds,
    stream_and_track,
    write_master,
)
from numpy.testing import assert_allclose, assert_array_equal

from earfold.renderer.errors import AdmError
from earfold.renderer.objects import inspect_adm, object_positions, read_adm

CH = "AC_00031001"


def _master(tmp_path, blocks, **kwargs):
    return read_adm(_write(tmp_path, blocks, **kwargs))


def _write(tmp_path, blocks, *, start=None, duration=None, gain=None, mute=None, n_objects=1):
    elements = [programme("APR_1001", "P", ["ACO_1001"])]
    objects = [f"AO_{0x1001 + k:04X}" for k in range(n_objects)]
    elements.append(content("ACO_1001", "C", objects))
    entries = []
    for k, object_id in enumerate(objects):
        code = f"0003{0x1001 + k:04X}"
        uid = f"ATU_{k + 1:08X}"
        entries.append((k + 1, uid, f"AT_{code}_01", f"AP_{code}"))
        elements.append(
            audio_object(
                object_id,
                f"o{k}",
                packs=[f"AP_{code}"],
                uids=[uid],
                start=start,
                duration=duration,
                gain=gain,
                mute=mute,
            )
        )
        elements.append(pack(f"AP_{code}", "Objects", [f"AC_{code}"]))
        elements.append(channel(f"AC_{code}", "Objects", blocks(f"AC_{code}")))
        elements.append(stream_and_track(f"AC_{code}", f"AP_{code}"))
    return write_master(
        tmp_path / "m.wav",
        audio=np.zeros((48, n_objects), np.float32),
        chna=chna_body(entries),
        axml=document(*elements),
    )


def _path_blocks(ch):
    """Five blocks covering each case of BS.2076-2's interpolation (see the test below)."""
    gain = "<gain>0.5</gain>"
    return [
        object_block(ch, 1, rtime=seconds(0), duration=seconds(1), az=0.0, el=0.0),
        object_block(ch, 2, rtime=seconds(1), duration=seconds(2), az=90.0, el=0.0, extra=gain),
        object_block(ch, 3, rtime=seconds(3), duration=seconds(1), az=30.0, el=0.0, jump="1"),
        object_block(
            ch,
            4,
            rtime=seconds(4),
            duration=seconds(2),
            az=-30.0,
            el=0.0,
            jump="1",
            interpolation="0.5",
        ),
        # a gap from 6 s to 7 s, then a block that moves over its whole length
        object_block(ch, 5, rtime=seconds(7), duration=seconds(1), az=10.0, el=20.0, jump="0"),
    ]


# Hand-computed (BS.2076-2; the first block has no previous position, so its own holds):
# t      block  rule                                   azimuth  elevation  block gain
# 0.5    1      first block holds                      0        0          1
# 1.0    2      start of a 2 s interpolation from 0    0        0          1
# 2.0    2      halfway: (0 + 90) / 2                  45       0          0.75
# 2.999  2      0 + 90 * 1.999 / 2                     89.955   0          0.50025
# 3.0    3      jumpPosition 1, no length: at once     30       0          1
# 4.0    4      jump over 0.5 s from 30, at 0          30       0          1
# 4.25   4      halfway through 0.5 s                  0        0          1
# 4.5    4      the interpolation is over              -30      0          1
# 5.9    4      holds                                  -30      0          1
# 6.5    (gap)  the last position holds                -30      0          1
# 7.5    5      halfway from (-30, 0) to (10, 20)      -10      10         1
# 9.0    (end)  the last block's position holds        10       20         1
TIMES = [0.5, 1.0, 2.0, 2.999, 3.0, 4.0, 4.25, 4.5, 5.9, 6.5, 7.5, 9.0]
AZIMUTH = [0, 0, 45, 89.955, 30, 30, 0, -30, -30, -30, -10, 10]
ELEVATION = [0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 10, 20]
GAIN = [1, 1, 0.75, 0.50025, 1, 1, 1, 1, 1, 1, 1, 1]


def test_interpolation_follows_jump_position_and_interpolation_length(tmp_path):
    (obj,) = _master(tmp_path, _path_blocks).objects
    path = object_positions(obj, TIMES)
    assert not path.cartesian
    assert_allclose(path.positions[:, 0], AZIMUTH, atol=1e-9)
    assert_allclose(path.positions[:, 1], ELEVATION, atol=1e-9)
    assert_allclose(path.positions[:, 2], 1.0)
    assert_allclose(path.gain, GAIN, atol=1e-9)
    assert path.active.all()


def test_block_ends_are_the_blocks_positions(tmp_path):
    """At the end of each block's interpolation the position is the block's own."""
    (obj,) = _master(tmp_path, _path_blocks).objects
    ends = [1.0, 3.0, 4.0, 6.0, 8.0]
    got = object_positions(obj, np.array(ends) - 1e-12).positions
    assert_allclose(got[:, 0], [b.position[0] for b in obj.blocks], atol=1e-6)


def test_an_object_span_gain_and_mute(tmp_path):
    blocks = _path_blocks
    master = _master(
        tmp_path, blocks, start="00:00:02.00000", duration="00:00:05.00000", gain="0.5"
    )
    (obj,) = master.objects
    path = object_positions(obj, [1.0, 2.5, 4.0, 6.999, 7.0])
    # block times are relative to the object's start (2 s): 4 s is 2 s into the object
    assert_allclose(path.positions[:, 0], [0, 0, 45, -30, -30])
    assert_array_equal(path.active, [False, True, True, True, False])
    assert_allclose(path.gain, [0, 0.5, 0.375, 0.5, 0])
    muted = _master(tmp_path, blocks, mute="1").objects[0]
    assert not object_positions(muted, [0.5, 2.0]).gain.any()


def test_cartesian_positions_are_kept_as_given(tmp_path):
    def blocks(ch):
        return [
            object_block(ch, 1, rtime=seconds(0), duration=seconds(1), xyz=(-1.0, 1.0, 0.0)),
            object_block(ch, 2, rtime=seconds(1), duration=seconds(1), xyz=(1.0, 0.0, 0.5)),
        ]

    (obj,) = _master(tmp_path, blocks).objects
    path = object_positions(obj, [0.5, 1.5])
    assert path.cartesian
    assert_allclose(path.positions, [[-1.0, 1.0, 0.0], [0.0, 0.5, 0.25]])


def test_polar_azimuth_is_interpolated_as_written(tmp_path):
    """From 170 to -170 degrees the numbers pass through 0: the reader does not reinterpret."""

    def blocks(ch):
        return [
            object_block(ch, 1, rtime=seconds(0), duration=seconds(1), az=170.0, el=0.0),
            object_block(ch, 2, rtime=seconds(1), duration=seconds(1), az=-170.0, el=0.0),
        ]

    (obj,) = _master(tmp_path, blocks).objects
    assert_allclose(object_positions(obj, [1.5]).positions[0, 0], 0.0, atol=1e-12)
    # Asked the short way round (as the renderer and the pages ask), the object crosses
    # the back: 175 degrees a quarter of the way, the back halfway, -175 at three quarters,
    # and it arrives where the block says.
    short = object_positions(obj, [1.25, 1.5, 1.75, 2.0], short_way=True).positions[:, 0]
    assert_allclose(short, [175.0, -180.0, -175.0, -170.0], atol=1e-9)


def test_sample_exact_block_edges(tmp_path):
    """BS.2076-2's sample form: edges at 480-sample steps of 48 kHz, read exactly."""

    def blocks(ch):
        return [
            object_block(ch, k + 1, rtime=f"00:00:00.{480 * k:05d}S48000",
                         duration="00:00:00.00480S48000", az=float(10 * k), el=0.0, jump="1")
            for k in range(5)
        ]  # fmt: skip

    (obj,) = _master(tmp_path, blocks).objects
    samples = np.arange(0, 2400)
    got = object_positions(obj, samples / 48000).positions[:, 0]
    assert_array_equal(got, 10.0 * (samples // 480))


def test_one_untimed_block_holds_for_the_whole_object(tmp_path):
    (obj,) = _master(tmp_path, lambda ch: [object_block(ch, 1, az=-45.0, el=10.0)]).objects
    assert_allclose(object_positions(obj, [0, 100]).positions[:, :2], [[-45, 10], [-45, 10]])


def test_times_must_be_finite(tmp_path):
    (obj,) = _master(tmp_path, _path_blocks).objects
    with pytest.raises(AdmError, match="times must be finite"):
        object_positions(obj, [0.0, np.nan])


def test_a_long_programme_with_many_blocks(tmp_path):
    """4 objects x 20 000 blocks of 20 ms (400 s each, circling): read in bounded time and
    memory; the positions at block ends are the blocks' and halfway between them the mean."""
    count = 20_000

    def blocks(ch):
        return [
            object_block(
                ch, k + 1, rtime=f"00:{k // 3000:02d}:{k // 50 % 60:02d}.{k % 50 * 960:05d}S48000",
                duration="00:00:00.00960S48000", az=float((k * 3) % 360 - 180), el=0.0,
            )
            for k in range(count)
        ]  # fmt: skip

    path = _write(tmp_path, blocks, n_objects=4)
    begin = time.perf_counter()
    master = read_adm(path)
    elapsed = time.perf_counter() - begin
    assert len(master.objects) == 4 and all(len(o.blocks) == count for o in master.objects)
    obj = master.objects[2]
    azimuth = np.array([b.position[0] for b in obj.blocks])
    ends = np.arange(1, count) * 0.02 - 1e-9
    got = object_positions(obj, ends).positions[:, 0]
    assert_allclose(got, azimuth[:-1], atol=1e-5)
    mids = np.arange(1, count) * 0.02 + 0.01
    assert_allclose(
        object_positions(obj, mids).positions[:, 0], (azimuth[:-1] + azimuth[1:]) / 2, atol=1e-6
    )
    # every 10 ms over the 400 s: one call, vectorised
    start = time.perf_counter()
    object_positions(obj, np.arange(0, 400, 0.01))
    per_call = time.perf_counter() - start
    summary = inspect_adm(master.path)
    assert summary["objects"][0]["motion"] == [0.02, 400.0]
    print(
        f"\nread {count * 4} blocks ({path.stat().st_size / 1e6:.1f} MB of axml) in "
        f"{elapsed:.2f} s; 40 000 positions in {per_call * 1000:.1f} ms"
    )
    assert elapsed < 20


def test_memory_per_block_is_bounded(tmp_path):
    """The model keeps a few hundred bytes per block while it is read (tracemalloc)."""
    count = 4000

    def blocks(ch):
        return [
            object_block(ch, k + 1, rtime=seconds(k * 0.02), duration=seconds(0.02),
                         az=float(k % 360 - 180), el=0.0)
            for k in range(count)
        ]  # fmt: skip

    path = _write(tmp_path, blocks, n_objects=2)
    tracemalloc.start()
    master = read_adm(path)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert len(master.objects[1].blocks) == count
    per_block = peak / (2 * count)
    print(f"\npeak {peak / 1e6:.1f} MB while reading, {per_block:.0f} bytes per block")
    assert per_block < 3000
