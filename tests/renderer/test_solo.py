"""``solo``: one loudspeaker rendered alone, exactly as it sounds in the full render."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import LayoutError
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.render import RenderSettings, render, settings_from_options

FS = 48000


def _stems(tmp_path, keep: int, frames: int = FS // 5):
    rng = np.random.default_rng(7)
    full = (0.05 * rng.standard_normal((frames, 6))).astype(np.float32)
    only = np.zeros_like(full)
    only[:, keep] = full[:, keep]
    write_audio(tmp_path / "full.wav", full, FS, subtype="FLOAT")
    write_audio(tmp_path / "only.wav", only, FS, subtype="FLOAT")
    return tmp_path / "full.wav", tmp_path / "only.wav"


@pytest.mark.parametrize(
    "label,index,extra",
    [
        ("L", 0, {}),
        ("Ls", 4, {"room": "small"}),  # the shared room tail follows the solo too
        ("LFE", 3, {}),  # through the LFE path
    ],
)
def test_solo_equals_the_full_render_of_a_stem_with_only_that_channel(
    tmp_path, label, index, extra
):
    full, only = _stems(tmp_path, index)
    plain = dict(layout="5.1", loudness=None, true_peak=None, subtype="FLOAT", **extra)
    solo = render([full], tmp_path / "solo.wav", RenderSettings(solo=label, **plain))
    alone = render([only], tmp_path / "alone.wav", RenderSettings(**plain))
    a, _ = read_audio(tmp_path / "solo.wav")
    b, _ = read_audio(tmp_path / "alone.wav")
    assert np.abs(b).max() > 0
    assert_allclose(a, b, rtol=0, atol=1e-6 * np.abs(b).max())
    assert solo["solo"] == {"label": label, "channel": index, "lfe": label == "LFE"}
    assert alone["solo"] is None
    # Calibration is that of the whole layout, not of the one loudspeaker.
    assert solo["calibration"] == alone["calibration"]


def test_solo_is_a_label_after_the_channel_order(tmp_path):
    full, _ = _stems(tmp_path, 0)
    report = render(
        [full],
        tmp_path / "o.wav",
        RenderSettings(layout="5.1", channel_order=("film",), solo="c", loudness=None),
    )
    # film order L C R Ls Rs LFE: the centre is file channel 1; aliases and case as for
    # any label.
    assert report["solo"] == {"label": "C", "channel": 1, "lfe": False}


def test_unknown_solo_label_names_the_layout_labels(tmp_path):
    full, _ = _stems(tmp_path, 0)
    with pytest.raises(
        LayoutError,
        match=r"solo: 'Ltf' is not a channel of layout '5\.1'; its channels are "
        r"L, R, C, LFE, Ls, Rs",
    ):
        render([full], tmp_path / "o.wav", RenderSettings(layout="5.1", solo="Ltf"))
    assert not (tmp_path / "o.wav").exists()


def test_solo_option_is_declared():
    assert settings_from_options({"solo": "Ls"}).solo == "Ls"
    assert settings_from_options({}).solo is None


def test_a_loudness_managed_solo_says_the_target_applies_to_the_loudspeaker_alone(tmp_path):
    full, _ = _stems(tmp_path, 0, frames=FS)  # long enough for the BS.1770 gate
    report = render([full], tmp_path / "o.wav", RenderSettings(layout="5.1", solo="R"))
    assert any("solo 'R': the loudness target applies" in n for n in report["notes"])
    assert report["warnings"] == []
