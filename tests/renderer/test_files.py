"""The renderer's whole-file helpers: atomic write-then-rename in every form."""

from __future__ import annotations

import json
import os

import pytest

from earfold.renderer.files import (
    AtomicPath,
    atomic_write,
    write_bytes_atomic,
    write_json_atomic,
    write_text_atomic,
)


def _names(folder):
    return sorted(p.name for p in folder.iterdir())


@pytest.mark.parametrize("durable", [True, False])
def test_atomic_path_commits_only_at_the_end(tmp_path, durable):
    target = tmp_path / "out.bin"
    target.write_bytes(b"old")
    with AtomicPath(target, suffix=".part", durable=durable) as spot:
        assert os.path.dirname(spot.tmp) == str(tmp_path)  # same folder: rename is atomic
        assert os.path.basename(spot.tmp).startswith(".out.bin.")
        assert spot.tmp.endswith(".part")
        with open(spot.tmp, "wb") as fh:
            fh.write(b"new")
        assert target.read_bytes() == b"old"  # nothing replaced before the commit
    assert target.read_bytes() == b"new"
    assert _names(tmp_path) == ["out.bin"]


def test_atomic_path_discards_on_error_and_keeps_the_old_file(tmp_path):
    target = tmp_path / "out.bin"
    target.write_bytes(b"old")
    with pytest.raises(RuntimeError, match="boom"):
        with AtomicPath(target) as spot:
            with open(spot.tmp, "wb") as fh:
                fh.write(b"half")
            raise RuntimeError("boom")
    assert target.read_bytes() == b"old"
    assert _names(tmp_path) == ["out.bin"]


def test_atomic_path_reserves_a_fresh_name_each_time(tmp_path):
    first = AtomicPath(tmp_path / "x")
    second = AtomicPath(tmp_path / "x")
    assert first.tmp != second.tmp
    assert os.path.exists(first.tmp) and os.path.exists(second.tmp)
    first.discard()
    second.discard()
    assert _names(tmp_path) == []


def test_commit_and_discard_are_idempotent(tmp_path):
    spot = AtomicPath(tmp_path / "x")
    spot.commit()
    spot.commit()
    spot.discard()  # after a commit: does not remove the committed file
    assert _names(tmp_path) == ["x"]


def test_missing_folder_raises_oserror(tmp_path):
    with pytest.raises(FileNotFoundError):
        AtomicPath(tmp_path / "absent" / "x")


def test_atomic_write_text_and_bytes(tmp_path):
    with atomic_write(tmp_path / "a.txt") as fh:
        fh.write("é\n")
    assert (tmp_path / "a.txt").read_text(encoding="utf-8") == "é\n"
    with atomic_write(tmp_path / "b.bin", "wb", durable=False) as fh:
        fh.write(b"\x00\x01")
    assert (tmp_path / "b.bin").read_bytes() == b"\x00\x01"
    with pytest.raises(ValueError, match="mode must be 'w' or 'wb'"):
        atomic_write(tmp_path / "c", "a")
    assert _names(tmp_path) == ["a.txt", "b.bin"]


def test_atomic_write_error_leaves_nothing(tmp_path):
    with pytest.raises(KeyError):
        with atomic_write(tmp_path / "a.txt") as fh:
            fh.write("partial")
            raise KeyError("x")
    assert _names(tmp_path) == []


def test_whole_value_writers(tmp_path):
    write_text_atomic(tmp_path / "t.txt", "text")
    write_bytes_atomic(tmp_path / "b.bin", b"bytes")
    write_json_atomic(tmp_path / "r.json", {"b": [1, 2], "a": None})
    assert (tmp_path / "t.txt").read_text() == "text"
    assert (tmp_path / "b.bin").read_bytes() == b"bytes"
    text = (tmp_path / "r.json").read_text()
    # The layout the service's reports use: two-space indent, a final newline.
    assert text == json.dumps({"b": [1, 2], "a": None}, indent=2) + "\n"
    assert _names(tmp_path) == ["b.bin", "r.json", "t.txt"]
