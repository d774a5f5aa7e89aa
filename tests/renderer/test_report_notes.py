"""The report's ``notes``: information every default render shows, kept apart from the
``warnings`` of real problems; the command line prints notes plainly."""

from __future__ import annotations

import numpy as np

from earfold.renderer.io import write_audio
from earfold.renderer.render import RenderSettings, render
from earfold.service.cli import main

FS = 48000


def _stem(tmp_path, channels=6):
    rng = np.random.default_rng(2)
    data = (0.05 * rng.standard_normal((FS // 2, channels))).astype(np.float32)
    path = tmp_path / "stem.wav"
    write_audio(path, data, FS, subtype="FLOAT")
    return path


def test_a_default_render_has_notes_and_no_warnings(tmp_path):
    # No layout named, the shipped default set (mit-kemar) with its default diffuse-field
    # equalisation: what every plain render shows is a note, not a warning.
    report = render([_stem(tmp_path)], tmp_path / "o.wav", RenderSettings())
    assert report["warnings"] == []
    notes = " | ".join(report["notes"])
    assert "no layout was given: rendered as 5.1" in notes
    assert report["eq"]["diffuse_field"]["boost_limited"]  # the shipped set reaches it
    assert "diffuse-field inverse reached its boost limit" in notes


def test_real_problems_stay_warnings(tmp_path):
    report = render(
        [_stem(tmp_path)],
        tmp_path / "o.wav",
        RenderSettings(layout="5.1", loudness=None, true_peak=None),
    )
    assert any("limiter is off" in w for w in report["warnings"])
    assert not any("limiter is off" in n for n in report["notes"])


def test_the_command_line_prints_notes_without_the_warning_mark(tmp_path, capsys):
    stem = _stem(tmp_path)
    assert main(["render", str(stem), "-o", str(tmp_path / "o.wav")]) == 0
    err = capsys.readouterr().err
    lines = err.splitlines()
    assert any(line.startswith("no layout was given: rendered as 5.1") for line in lines), err
    assert any("boost limit" in line and not line.startswith("warning:") for line in lines)
    assert not any(line.startswith("warning:") for line in lines), err


def test_a_room_on_the_shipped_set_has_notes_and_no_warnings(tmp_path):
    # Floor reflections arrive from under the KEMAR set's lowest ring (-40 degrees): every
    # room on it meets that, so it is a note (with the largest gap), not an alarm.
    report = render(
        [_stem(tmp_path)], tmp_path / "o.wav", RenderSettings(layout="5.1", room="small")
    )
    assert report["warnings"] == []
    assert any(n.startswith("room: ") and "degrees away" in n for n in report["notes"])
