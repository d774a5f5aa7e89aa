"""The comparison builder and the excerpt window it renders through.

References
----------
* Level matching is checked with the project's BS.1770-4 meter (earfold.renderer.loudness.meter,
  itself checked against EBU Tech 3341) to 0.1 LU, and independently with pyloudnorm
  (PyPI, ``filter_class="DeMan"``, the ITU filter; see ../shared/REFERENCES.md) to 0.2 LU.
* Scaling by g dB moves integrated loudness and true peak by exactly g dB (BS.1770 is a
  power measure; common practice), so the recorded figures must add up.
"""

from __future__ import annotations

import json
import struct

import numpy as np
import pytest

from earfold.renderer.errors import RendererError
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.loudness import LoudnessMeter
from earfold.renderer.render import RenderSettings, render
from earfold.service.comparisons.builder import (
    CEILING_DBTP,
    BuildError,
    build,
    common_level,
    loudest_window,
)
from earfold.service.jobs.render_child import build_settings
from tests.service.stem_factory import FS, noise, write_mono_set


def _meter(x: np.ndarray) -> tuple[float, float]:
    m = LoudnessMeter(FS, x.shape[1])
    m.process(x)
    r = m.result()
    return r.integrated_lufs, r.true_peak_dbtp


def _data_offset(raw: bytes) -> int:
    """Byte offset of the WAV 'data' payload (RIFF chunk walk)."""
    pos = 12
    while pos + 8 <= len(raw):
        cid, size = raw[pos : pos + 4], struct.unpack("<I", raw[pos + 4 : pos + 8])[0]
        if cid == b"data":
            return pos + 8
        pos += 8 + size + (size & 1)
    raise AssertionError("no data chunk")


# ------------------------------------------------------------------ the excerpt window


def test_an_excerpt_render_equals_the_render_of_the_cut_stem(tmp_path):
    x = noise(FS * 3, 6, seed=1)
    write_audio(tmp_path / "full.wav", x, FS, subtype="FLOAT")
    start, length = 12000, 48000
    write_audio(tmp_path / "cut.wav", x[start : start + length], FS, subtype="FLOAT")
    base = RenderSettings(layout="5.1", loudness=None, true_peak=None, subtype="FLOAT")
    from dataclasses import replace

    r1 = render(
        [tmp_path / "full.wav"],
        tmp_path / "a.wav",
        replace(base, excerpt=(start / FS, length / FS)),
    )
    render([tmp_path / "cut.wav"], tmp_path / "b.wav", base)
    a, _ = read_audio(tmp_path / "a.wav")
    b, _ = read_audio(tmp_path / "b.wav")
    assert a.shape == b.shape
    np.testing.assert_array_equal(a, b)
    assert r1["input"]["frames"] == length
    assert r1["input"]["excerpt_start_s"] == pytest.approx(0.25)


def test_an_excerpt_of_mono_files_reads_each_from_the_start(tmp_path):
    paths = write_mono_set(tmp_path, "5.1", FS, seed=2)
    s = RenderSettings(
        layout="5.1", loudness=None, true_peak=None, subtype="FLOAT", excerpt=(0.5, 10.0)
    )  # cut to the stem's end
    report = render(paths, tmp_path / "o.wav", s)
    assert report["input"]["frames"] == FS // 2


@pytest.mark.parametrize(
    ("excerpt", "pattern"),
    [
        ((5.0, 1.0), "starts at 5 s but the stem is only 1.000 s long"),
        ((-1.0, 1.0), "start >= 0"),
        ((0.0, 0.0), "length > 0"),
        (("soon", 1.0), "excerpt must be"),
    ],
)
def test_bad_excerpts_are_refused_with_the_reason(tmp_path, excerpt, pattern):
    write_audio(tmp_path / "s.wav", noise(FS, 6), FS)
    with pytest.raises(RendererError, match=pattern):
        render(
            [tmp_path / "s.wav"], tmp_path / "o.wav", RenderSettings(layout="5.1", excerpt=excerpt)
        )


def test_render_child_passes_the_excerpt_on():
    s = build_settings({"layout": "5.1", "excerpt": [1.5, 4]})
    assert s.excerpt == (1.5, 4.0)


# -------------------------------------------------------------------- choosing a window


def test_loudest_window_finds_the_loud_passage():
    # 60 s of readings every 0.1 s (3 s blocks), loud from 30 s to 40 s.
    t = np.arange(571) * 0.1  # block starts 0 .. 57 s
    series = np.where((t >= 30) & (t + 3 <= 40), -10.0, -30.0)
    start = loudest_window(series, 0.1, 3.0, 10.0, 60.0)
    assert start == pytest.approx(30.0)


def test_loudest_window_of_a_short_stem_is_its_start():
    assert loudest_window([-20.0] * 10, 0.1, 3.0, 15.0, 4.0) == 0.0


def test_automatic_excerpt_lands_on_the_loud_part(tmp_path):
    x = noise(FS * 12, 6, seed=4, level=0.005)
    x[FS * 7 : FS * 10] *= 20  # loud from 7 s to 10 s
    write_audio(tmp_path / "s.wav", x, FS)
    out = build(
        [str(tmp_path / "s.wav")],
        [{"layout": "5.1"}, {"layout": "5.1", "room": "small"}],
        {"start": None, "length": 3.0},
        tmp_path,
    )
    assert out["excerpt"]["automatic"] is True
    assert out["excerpt"]["start"] == pytest.approx(7.0, abs=0.11)


# ------------------------------------------------------------------------ level matching


def test_common_level_is_the_loudest_unless_a_peak_forbids_it():
    # Variant 0 raised by 6 dB to -14 LUFS peaks at -2 dBTP, under the -1 ceiling.
    assert common_level([-20.0, -14.0], [-8.0, -3.0]) == -14.0
    # Raised by 6 dB it would peak at +2 dBTP; it may rise only 3 dB: common -17 LUFS.
    assert common_level([-20.0, -14.0], [-4.0, -3.0], ceiling_dbtp=-1.0) == pytest.approx(-17.0)


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """Three variants of one 5.1 stem that differ in level by several dB.

    Layout and HRTF set alone no longer change the level (earfold.renderer.eq.calibration), so the
    third variant maps the loud 220 Hz tone of file channel 2 to the LFE, whose 120 Hz
    low-pass takes most of it away."""
    folder = tmp_path_factory.mktemp("build")
    rng = np.random.default_rng(9)
    x = noise(FS * 8, 6, seed=9, level=0.03)
    x[:, 2] += 0.1 * np.sin(2 * np.pi * 220 * np.arange(len(x)) / FS).astype(np.float32)
    x[rng.integers(0, len(x), 40), 0] = 0.9  # sharp clicks on L: a high crest factor
    write_audio(folder / "s.wav", x, FS)
    variants = [
        {"layout": "5.1"},
        {"layout": "5.1", "room": "small"},
        {
            "layout": "5.1",
            "channel_order": ["L", "R", "LFE", "C", "Ls", "Rs"],
            "hrtf": "rigid-sphere",
        },
    ]
    out = build([str(folder / "s.wav")], variants, {"start": 2.0, "length": 4.0}, folder)
    return folder, out


def test_every_trial_file_has_the_same_length_and_header(built):
    folder, out = built
    raws = [(folder / v["file"]).read_bytes() for v in out["variants"]]
    assert len({len(r) for r in raws}) == 1
    offsets = {_data_offset(r) for r in raws}
    assert len(offsets) == 1
    header = offsets.pop()
    assert len({r[:header] for r in raws}) == 1  # byte for byte
    for v in out["variants"]:
        x, sr = read_audio(folder / v["file"])
        assert sr == FS and x.shape == (out["frames"], 2) and out["frames"] == 4 * FS


def test_levels_match_by_our_meter_and_by_pyloudnorm(built):
    pyln = pytest.importorskip("pyloudnorm")
    folder, out = built
    common = out["common_lufs"]
    meter = pyln.Meter(FS, filter_class="DeMan")
    measured = [v["measured_lufs"] for v in out["variants"]]
    assert max(measured) - min(measured) > 1.0  # the variants really differed
    for v in out["variants"]:
        x, _ = read_audio(folder / v["file"])
        ours, tp = _meter(x)
        assert ours == pytest.approx(common, abs=0.1)  # the issue: 0.1 LU, project meter
        assert meter.integrated_loudness(x.astype(np.float64)) == pytest.approx(common, abs=0.2)
        assert tp <= CEILING_DBTP + 0.05  # nothing would need limiting
        # The recorded figures add up: gain = common - measured; scaling moves by the gain.
        assert v["gain_db"] == pytest.approx(common - v["measured_lufs"], abs=2e-3)
        assert v["matched_lufs"] == pytest.approx(common, abs=0.02)
        assert v["matched_true_peak_dbtp"] == pytest.approx(
            v["true_peak_dbtp"] + v["gain_db"], abs=0.05
        )
    assert common <= max(measured) + 1e-9


def test_the_ends_fade_in_and_out(built):
    folder, out = built
    x, _ = read_audio(folder / out["variants"][0]["file"])
    assert np.max(np.abs(x[:3])) < 0.01 and np.max(np.abs(x[-3:])) < 0.01
    assert np.max(np.abs(x[FS : 2 * FS])) > 0.05


def test_a_silent_variant_cannot_be_matched(tmp_path):
    write_audio(tmp_path / "s.wav", np.zeros((FS * 2, 6), np.float32), FS)
    with pytest.raises(BuildError, match="silent"):
        build(
            [str(tmp_path / "s.wav")],
            [{"layout": "5.1"}, {"layout": "5.1"}],
            {"start": 0.0, "length": 1.0},
            tmp_path,
        )


def test_the_result_is_json(built):
    _, out = built
    assert json.loads(json.dumps(out)) == out


def test_a_build_over_two_processes_equals_the_one_process_build(built, tmp_path):
    """Rendering, measuring and writing spread over forked processes: the same trial
    files byte for byte and the same figures as one process doing it all."""
    folder, out = built
    variants = [
        {"layout": "5.1"},
        {"layout": "5.1", "room": "small"},
        {
            "layout": "5.1",
            "channel_order": ["L", "R", "LFE", "C", "Ls", "Rs"],
            "hrtf": "rigid-sphere",
        },
    ]
    spread = build(
        [str(folder / "s.wav")], variants, {"start": 2.0, "length": 4.0}, tmp_path, processes=2
    )
    assert spread == out
    for v in out["variants"]:
        assert (tmp_path / v["file"]).read_bytes() == (folder / v["file"]).read_bytes()
    assert not list(tmp_path.glob(".build-*"))  # the renders' scratch is gone


def test_a_silent_variant_stops_a_build_over_two_processes(tmp_path):
    write_audio(tmp_path / "s.wav", np.zeros((FS * 2, 6), np.float32), FS)
    with pytest.raises(BuildError, match="variant 1 is silent"):
        build(
            [str(tmp_path / "s.wav")],
            [{"layout": "5.1"}, {"layout": "5.1"}],
            {"start": 0.0, "length": 1.0},
            tmp_path,
            processes=2,
        )
    assert not (tmp_path / "audio").exists() or not any((tmp_path / "audio").iterdir())
