"""Every file a user names is checked before it is read: a regular file (not a device such
as /dev/zero, a pipe or a folder) of bounded size, with the limit in the message."""

from __future__ import annotations

import os
import threading

import pytest

from earfold.renderer.eq import load_headphone_eq
from earfold.renderer.eq.headphone import MAX_EQ_IR_BYTES, MAX_EQ_JSON_BYTES
from earfold.renderer.errors import HeadphoneEqError, LayoutError, RoomError, SofaError
from earfold.renderer.files import read_bytes_bounded
from earfold.renderer.hrtf import read_sofa, read_sofa_guarded
from earfold.renderer.hrtf.sofa import MAX_FILE_BYTES
from earfold.renderer.layouts import get_layout
from earfold.renderer.room import get_room
from earfold.renderer.room._schema import MAX_ROOM_FILE_BYTES


def _finishes(call, seconds: float = 10.0):
    """Run ``call`` in a thread; fail (instead of hanging the suite) if it does not return."""
    box: dict = {}

    def run():
        try:
            box["value"] = call()
        except BaseException as exc:  # handed to the test
            box["error"] = exc

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    thread.join(seconds)
    assert not thread.is_alive(), f"still reading after {seconds:g} s"
    if "error" in box:
        raise box["error"]
    return box.get("value")


def _zero(tmp_path, name):
    """``name`` in ``tmp_path`` as a link to /dev/zero (endless bytes)."""
    link = tmp_path / name
    os.symlink("/dev/zero", link)
    return link


def _sparse(tmp_path, name, size):
    """A file of ``size`` bytes that takes no disk space."""
    path = tmp_path / name
    with open(path, "wb") as fh:
        fh.truncate(size)
    return path


def test_headphone_eq_from_dev_zero_is_refused_instead_of_read_forever(tmp_path):
    for name in ("zero.json", "zero.wav"):
        with pytest.raises(HeadphoneEqError, match="is not a regular file"):
            _finishes(lambda n=name: load_headphone_eq(_zero(tmp_path, n), 48000.0))


def test_headphone_eq_from_a_pipe_is_refused_without_waiting_for_a_writer(tmp_path):
    fifo = tmp_path / "eq.json"
    os.mkfifo(fifo)
    with pytest.raises(HeadphoneEqError, match="is not a regular file"):
        _finishes(lambda: load_headphone_eq(fifo, 48000.0))


def test_oversized_headphone_eq_files_are_refused_with_the_limit(tmp_path):
    big_json = _sparse(tmp_path, "eq.json", MAX_EQ_JSON_BYTES + 1)
    with pytest.raises(HeadphoneEqError, match=rf"at most {MAX_EQ_JSON_BYTES} bytes"):
        load_headphone_eq(big_json, 48000.0)
    big_ir = _sparse(tmp_path, "eq.wav", MAX_EQ_IR_BYTES + 1)
    with pytest.raises(HeadphoneEqError, match=rf"at most {MAX_EQ_IR_BYTES} bytes"):
        load_headphone_eq(big_ir, 48000.0)


def test_layout_and_room_files_from_dev_zero_are_refused(tmp_path):
    with pytest.raises(LayoutError, match="is not a regular file"):
        _finishes(lambda: get_layout(_zero(tmp_path, "layout.json")))
    with pytest.raises(RoomError, match="is not a regular file"):
        _finishes(lambda: get_room(_zero(tmp_path, "room.json")))


def test_oversized_room_file_is_refused_with_the_limit(tmp_path):
    big = _sparse(tmp_path, "room.json", MAX_ROOM_FILE_BYTES + 1)
    with pytest.raises(RoomError, match=rf"at most {MAX_ROOM_FILE_BYTES} bytes"):
        get_room(big)


def test_sofa_from_dev_zero_or_oversized_is_refused_before_the_hdf5_library(tmp_path):
    zero = _zero(tmp_path, "zero.sofa")
    for reader in (read_sofa, read_sofa_guarded):
        with pytest.raises(SofaError, match="is not a regular file"):
            _finishes(lambda read=reader: read(zero))
    big = _sparse(tmp_path, "big.sofa", MAX_FILE_BYTES + 1)
    with pytest.raises(SofaError, match=rf"at most {MAX_FILE_BYTES} bytes"):
        read_sofa_guarded(big)


def test_bounded_read_refuses_a_folder_and_reads_a_small_file(tmp_path):
    with pytest.raises(LayoutError, match="is not a regular file"):
        read_bytes_bounded(tmp_path, kind="layout file", max_bytes=10, error=LayoutError)
    small = tmp_path / "small.json"
    small.write_bytes(b"[1, 2]")
    assert read_bytes_bounded(small, kind="x", max_bytes=6, error=LayoutError) == b"[1, 2]"
    with pytest.raises(LayoutError, match="at most 5 bytes"):
        read_bytes_bounded(small, kind="x", max_bytes=5, error=LayoutError)


def _cli(*args: str):
    import subprocess
    import sys

    return subprocess.run(
        [sys.executable, "-m", "earfold.service.cli", *args],
        capture_output=True,
        text=True,
        timeout=120,
    )


def test_cli_refuses_dev_zero_as_headphone_eq_and_as_sofa_in_one_line(tmp_path):
    import numpy as np

    from earfold.renderer.io import write_audio

    stem = tmp_path / "stem.wav"
    write_audio(stem, np.random.default_rng(1).standard_normal((4800, 2)) * 0.1, 48000)
    runs = [
        (
            _cli(
                "render",
                str(stem),
                "-o",
                str(tmp_path / "out.wav"),
                "--layout",
                "2.0",
                "--headphone-eq",
                str(_zero(tmp_path, "eq.json")),
                "-q",
            ),
            "eq.json",
        ),
        (_cli("hrtf", "inspect", str(_zero(tmp_path, "set.sofa"))), "set.sofa"),
        (
            _cli(
                "render",
                str(stem),
                "-o",
                str(tmp_path / "out2.wav"),
                "--layout",
                "2.0",
                "--hrtf",
                str(tmp_path / "set.sofa"),
                "-q",
            ),
            "set.sofa",
        ),
    ]
    for proc, name in runs:
        assert proc.returncode == 2, proc.stderr
        assert "Traceback" not in proc.stderr
        lines = proc.stderr.strip().splitlines()
        assert len(lines) == 1 and name in lines[0] and "not a regular file" in lines[0], lines
        assert not (tmp_path / "out.wav").exists()
