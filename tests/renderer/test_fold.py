"""The stereo fold-down (``fold="stereo"``): ITU-R BS.775's downmix to 2/0, rendered by the
same engine and delivery stage as a binaural render."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.errors import OptionError
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.layouts import LAYOUTS
from earfold.renderer.loudness import measure_file
from earfold.renderer.render import (
    BS775_DOWNMIX,
    RenderSettings,
    fold_coefficients,
    render,
    settings_from_options,
)

FS = 48000
K = 0.7071  # -3 dB as ITU-R BS.775 writes it
PLAIN = dict(loudness=None, true_peak=None, subtype="FLOAT")


def _write(path, data):
    write_audio(path, data.astype(np.float32), FS, subtype="FLOAT")
    return path


def test_a_5_1_stem_folds_to_exactly_the_bs775_formula(tmp_path):
    # ITU-R BS.775 3/2 -> 2/0: Lo = L + 0.7071 C + 0.7071 Ls, Ro = R + 0.7071 C + 0.7071 Rs,
    # LFE omitted. Each channel carries its own tone, so every term is visible.
    t = np.arange(FS // 5) / FS
    freqs = {"L": 220, "R": 330, "C": 440, "LFE": 50, "Ls": 550, "Rs": 660}
    x = np.stack([0.1 * np.sin(2 * np.pi * f * t) for f in freqs.values()], axis=1)
    stem = _write(tmp_path / "s.wav", x)
    report = render(
        [stem], tmp_path / "o.wav", RenderSettings(layout="5.1", fold="stereo", **PLAIN)
    )
    y, _ = read_audio(tmp_path / "o.wav")
    L, R, C, _lfe, Ls, Rs = (x[:, i].astype(np.float32) for i in range(6))
    assert y.shape == (len(t), 2)  # one-tap filters: no tail
    assert_allclose(y[:, 0], L + K * C + K * Ls, atol=1e-6)
    assert_allclose(y[:, 1], R + K * C + K * Rs, atol=1e-6)
    fold = report["fold"]
    assert fold["mode"] == "stereo" and "BS.775" in fold["source"]
    assert {c["label"]: (c["left"], c["right"]) for c in fold["coefficients"]} == {
        "L": (1.0, 0.0),
        "R": (0.0, 1.0),
        "C": (K, K),
        "LFE": (0.0, 0.0),
        "Ls": (K, 0.0),
        "Rs": (0.0, K),
    }
    assert report["hrtf"] is None and report["room"] is None
    assert report["calibration"]["gain_db"] == 0.0


@pytest.mark.parametrize(
    "layout,system",
    [("5.1", "3/2"), ("5.0", "3/2"), ("LCRS", "3/1"), ("3.0", "3/0"), ("4.0", "2/2")],
)
def test_the_rule_gives_the_bs775_equations_where_bs775_defines_them(layout, system):
    lay = LAYOUTS[layout]
    got = {s.label: g for s, g in zip(lay.speakers, fold_coefficients(lay)) if not s.lfe}
    assert got == dict(BS775_DOWNMIX[system])


def test_other_layouts_fold_by_side_and_height():
    # The documented extension (common practice): front ear-level within 45 degrees at
    # 1, the centre line to both at 0.7071, everything else to its side at 0.7071.
    big = LAYOUTS["9.1.6"]
    got = dict(zip(big.labels, fold_coefficients(big)))
    assert got["Lw"] == (K, 0.0) and got["Rw"] == (0.0, K)
    assert got["Ls"] == (K, 0.0) and got["Lrs"] == (K, 0.0)
    assert got["Ltf"] == (K, 0.0) and got["Rtr"] == (0.0, K)
    assert got["LFE"] == (0.0, 0.0)
    h = LAYOUTS["22.2"]
    got = dict(zip(h.labels, fold_coefficients(h)))
    assert got["M+030"] == (1.0, 0.0) and got["M-060"] == (0.0, K)
    assert got["M+180"] == (K, K) and got["T+000"] == (K, K) and got["U+000"] == (K, K)
    assert got["LFE1"] == got["LFE2"] == (0.0, 0.0)


def _programme(seconds: float = 4.0) -> np.ndarray:
    """Band-limited noise bursts per channel, different levels (a mix, roughly)."""
    rng = np.random.default_rng(11)
    n = int(seconds * FS)
    x = rng.standard_normal((n, 6)) * np.array([0.1, 0.1, 0.12, 0.05, 0.05, 0.05])
    return x


def test_loudness_managed_fold_is_level_matched_to_the_binaural_render(tmp_path):
    stem = _write(tmp_path / "s.wav", _programme())
    target = -23.0
    levels = {}
    for fold in ("binaural", "stereo"):
        out = tmp_path / f"{fold}.wav"
        render([stem], out, RenderSettings(layout="5.1", fold=fold, loudness=target))
        levels[fold] = measure_file(out).integrated_lufs  # our BS.1770 meter
    assert abs(levels["stereo"] - levels["binaural"]) <= 0.5, levels
    assert abs(levels["stereo"] - target) <= 0.5, levels


def test_room_hrtf_and_eq_asked_with_fold_stereo_are_left_out_with_a_note(tmp_path):
    stem = _write(tmp_path / "s.wav", _programme(0.5))
    report = render(
        [stem],
        tmp_path / "o.wav",
        RenderSettings(layout="5.1", fold="stereo", room="small", eq="diffuse-field", **PLAIN),
    )
    assert report["room"] is None
    assert any(
        "the room 'small' and the HRTF equalisation 'diffuse-field' asked for do not apply" in n
        for n in report["notes"]
    )


def test_solo_of_the_lfe_with_fold_stereo_warns_of_silence(tmp_path):
    stem = _write(tmp_path / "s.wav", _programme(0.5))
    report = render(
        [stem],
        tmp_path / "o.wav",
        RenderSettings(layout="5.1", fold="stereo", solo="LFE", **PLAIN),
    )
    assert any("leaves the LFE out" in w for w in report["warnings"])
    assert not np.any(read_audio(tmp_path / "o.wav")[0])


def test_fold_option_is_declared_with_its_choices():
    assert settings_from_options({"fold": "Stereo"}).fold == "stereo"
    assert settings_from_options({}).fold == "binaural"
    with pytest.raises(OptionError, match=r"fold must be one of binaural, stereo, not 'mono'"):
        settings_from_options({"fold": "mono"})
