"""Stopping a command line render: SIGTERM is a clean cancel, as Ctrl-C is; bad option
values are one line."""

from __future__ import annotations

import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from earfold.renderer.io import write_audio

FS = 48000


def _cli(*args: str) -> list[str]:
    return [sys.executable, "-m", "earfold.service.cli", *args]


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
@pytest.mark.parametrize(
    "signum, status, line",
    [
        (signal.SIGTERM, 143, "earfold: terminated; no partial output was kept"),
        (signal.SIGINT, 130, "earfold: interrupted; no partial output was kept"),
    ],
)
def test_sigterm_to_a_running_render_leaves_no_part_file(tmp_path, signum, status, line):
    # SIGTERM used to kill the render where it stood, leaving the output's hidden
    # .part file (and the scratch render) behind. Ctrl-C (SIGINT) raised wherever the
    # main thread stood, which could leave the writer thread waiting for ever; both are
    # now the same clean cancel.
    stem = tmp_path / "long.wav"
    noise = 0.1 * np.random.default_rng(0).standard_normal((60 * FS, 6))
    write_audio(stem, noise.astype(np.float32), FS, subtype="PCM_16")
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    # The exact room makes the render slow enough (seconds) to be stopped midway.
    proc = subprocess.Popen(
        _cli("render", str(stem), "-o", str(out_dir / "mix.wav"), "--layout", "5.1")
        + ["--room", "large", "--room-mode", "exact", "-q"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        deadline = time.monotonic() + 60
        while not any(out_dir.iterdir()):  # the render is being written
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline, "the render never started writing"
            time.sleep(0.01)
        time.sleep(0.05)
        assert proc.poll() is None, "the render finished before it could be stopped"
        proc.send_signal(signum)
        stdout, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == status, stderr
    assert "Traceback" not in stderr
    lines = [text for text in stderr.splitlines() if text.strip()]
    assert lines == [line]
    assert stdout == ""
    assert sorted(p.name for p in out_dir.iterdir()) == []


def test_a_negative_seed_is_one_line_with_the_bounds(tmp_path):
    stem = tmp_path / "s.wav"
    write_audio(stem, np.zeros((4800, 2), dtype=np.float32), FS)
    proc = subprocess.run(
        _cli("render", str(stem), "-o", str(tmp_path / "o.wav"), "--seed", "-1"),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert lines == ["earfold: error: argument --seed: seed must be from 0 to 4294967295, not -1"]
    assert not (tmp_path / "o.wav").exists()
