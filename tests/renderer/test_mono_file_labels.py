"""Mono files: the channel order read from their names, all or nothing."""

from __future__ import annotations

import numpy as np
import pytest

from earfold.renderer.errors import LayoutError
from earfold.renderer.io import write_audio
from earfold.renderer.layouts import filename_label, labels_from_filenames
from earfold.renderer.render import RenderSettings, plan_render

FS = 48000


def _monos(tmp_path, names):
    paths = []
    for k, name in enumerate(names):
        p = tmp_path / name
        sig = np.full((480, 1), 0.01 * (k + 1), dtype=np.float32)
        write_audio(p, sig, FS, subtype="FLOAT")
        paths.append(p)
    return paths


def test_partly_labelled_mono_files_are_refused_naming_the_unlabelled_file(tmp_path):
    # Five names carry labels, one does not: taking them in name order would send C to
    # L, L to C and R to Rs (with exit 0). It must be an error naming the odd file.
    names = ["mix_C.wav", "mix_L.wav", "mix_LFE.wav", "mix_R.wav", "mix_Rs.wav", "mix_03.wav"]
    paths = _monos(tmp_path, names)
    with pytest.raises(LayoutError) as caught:
        plan_render(paths, RenderSettings(layout="5.1"))
    msg = str(caught.value)
    assert "'mix_03.wav'" in msg and "'03'" in msg
    assert "5 of the 6 mono files" in msg
    assert "Rename" in msg and "--channel-order" in msg
    assert "leave Ls without a file" in msg
    for labelled in names[:5]:
        assert repr(labelled) not in msg


def test_mono_files_with_an_unknown_label_among_known_ones_are_refused(tmp_path):
    names = ["a.L.wav", "a.R.wav", "a.Cx.wav", "a.LFE.wav", "a.Ls.wav", "a.Rs.wav"]
    paths = _monos(tmp_path, names)
    with pytest.raises(LayoutError, match=r"'a\.Cx\.wav' \(its name ends in 'Cx'"):
        plan_render(paths, RenderSettings(layout="5.1"))


def test_partly_labelled_mono_files_render_with_an_explicit_channel_order(tmp_path):
    names = ["mix_C.wav", "mix_L.wav", "mix_LFE.wav", "mix_R.wav", "mix_Rs.wav", "mix_03.wav"]
    paths = _monos(tmp_path, names)
    order = ["C", "L", "LFE", "R", "Rs", "Ls"]
    plan = plan_render(paths, RenderSettings(layout="5.1", channel_order=order))
    assert plan.order_source == "--channel-order"
    assert [plan.layout.labels[i] for i in plan.order] == order


def test_mono_files_without_any_label_keep_the_file_order_with_a_warning(tmp_path):
    paths = _monos(tmp_path, [f"take_{k:02d}.wav" for k in range(6)])
    plan = plan_render(paths, RenderSettings(layout="5.1"))
    assert plan.order_source == "file order"
    assert plan.order == tuple(range(6))
    assert any("carry no channel labels" in w for w in plan.warnings)


def test_fully_labelled_mono_files_still_follow_their_names(tmp_path):
    names = ["m_Rs.wav", "m_Ls.wav", "m_LFE.wav", "m_C.wav", "m_R.wav", "m_L.wav"]
    plan = plan_render(_monos(tmp_path, names), RenderSettings(layout="5.1"))
    assert plan.order_source == "file names"
    assert [plan.layout.labels[i] for i in plan.order] == ["Rs", "Ls", "LFE", "C", "R", "L"]


def test_filename_label_tells_the_token_from_the_label():
    assert filename_label("mix.L.wav") == ("L", "L")
    assert filename_label("hall_M-030.wav") == ("M-030", "M-030")
    assert filename_label("mix_03.wav") == ("03", None)
    assert filename_label("mix_.wav") == ("", None)
    assert labels_from_filenames(["a_L.wav", "a_03.wav"]) is None
