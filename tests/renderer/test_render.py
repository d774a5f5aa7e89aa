"""End-to-end renders: physical plausibility, channel order, LFE, errors, report."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from earfold.renderer.engine import convolve_reference
from earfold.renderer.errors import LayoutError, OptionError, RenderCancelled, RendererError
from earfold.renderer.hrtf import interaural_time_difference
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.layouts import get_layout
from earfold.renderer.render import RenderSettings, plan_render, render

FS = 48000


def _noise(frames: int, seed: int = 0) -> np.ndarray:
    return (0.1 * np.random.default_rng(seed).standard_normal(frames)).astype(np.float32)


def _stem(tmp_path, layout: str, feeds: dict[str, np.ndarray], frames: int = FS // 2):
    lay = get_layout(layout)
    data = np.zeros((frames, lay.channels), dtype=np.float32)
    for label, sig in feeds.items():
        data[: len(sig), lay.index(label)] = sig
    path = tmp_path / f"stem-{layout}.wav"
    write_audio(path, data, FS, subtype="FLOAT")
    return path, data


def _render(tmp_path, stem, layout, **kw):
    """A raw render (no loudness gain, no limiter) unless the test asks for delivery."""
    out = tmp_path / "out.wav"
    kw = {"loudness": None, "true_peak": None, **kw}
    settings = RenderSettings(layout=layout, subtype="FLOAT", **kw)
    report = render([stem], out, settings)
    y, rate = read_audio(out)
    assert rate == FS
    return y, report


def _energy(x: np.ndarray) -> float:
    return float(np.sum(np.asarray(x, dtype=np.float64) ** 2))


def test_left_front_reaches_the_left_ear_earlier_and_louder(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"L": _noise(FS // 2)})
    y, report = _render(tmp_path, stem, "5.1", hrtf="mit-kemar")
    assert _energy(y[:, 0]) > 2 * _energy(y[:, 1])
    plan = plan_render([stem], RenderSettings(layout="5.1"))
    left_pair = plan.filters[get_layout("5.1").index("L")]
    # Left leads (positive ITD in our convention) for a source at +30 degrees.
    assert interaural_time_difference(left_pair, FS) > 0.1e-3
    assert report["speakers"][0]["label"] == "L"


def test_symmetric_stem_on_symmetric_set_gives_identical_ears(tmp_path):
    s = _noise(FS // 2, 1)
    feeds = {"L": s, "R": s, "C": _noise(FS // 2, 2), "Ls": 0.5 * s, "Rs": 0.5 * s}
    stem, _ = _stem(tmp_path, "5.1", feeds)
    y, _ = _render(tmp_path, stem, "5.1", hrtf="rigid-sphere")
    assert _energy(y) > 0
    assert_allclose(y[:, 0], y[:, 1], atol=1e-6)


def test_front_centre_alone_has_no_interaural_delay(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"C": _noise(FS // 2)})
    plan = plan_render([stem], RenderSettings(layout="5.1", hrtf="mit-kemar"))
    centre = plan.filters[get_layout("5.1").index("C")]
    # KEMAR's frontal measurement: the ears are within a few microseconds of each other.
    assert abs(interaural_time_difference(centre, FS)) < 30e-6


def test_output_equals_direct_convolution_of_the_plan(tmp_path):
    """The whole pipeline against scipy.signal.oaconvolve of the same filters, summed."""
    feeds = {label: _noise(FS // 3, k) for k, label in enumerate(get_layout("7.1.4").labels)}
    stem, data = _stem(tmp_path, "7.1.4", feeds, frames=FS // 3)
    y, report = _render(tmp_path, stem, "7.1.4", block_size=1024)
    plan = plan_render([stem], RenderSettings(layout="7.1.4"))
    ref = convolve_reference(data, plan.filters)
    assert y.shape == ref.shape == (len(data) + plan.filters.shape[-1] - 1, 2)
    assert_allclose(y, ref, atol=1e-6)
    assert report["output"]["frames"] == len(ref)


def test_lfe_goes_to_both_ears_low_passed(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"LFE": _noise(FS // 2)})
    y, report = _render(tmp_path, stem, "5.1")
    assert_allclose(y[:, 0], y[:, 1])
    spec = np.abs(np.fft.rfft(y[:, 0])) ** 2
    f = np.fft.rfftfreq(len(y), 1 / FS)
    # 4th-order Butterworth at 120 Hz: -48 dB by 480 Hz, so little energy above 500 Hz.
    assert spec[f > 500].sum() < 1e-3 * spec[f < 120].sum()
    lfe = [s for s in report["speakers"] if s["label"] == "LFE"][0]
    assert lfe["method"] == "lfe" and lfe["gain_db"] == 10.0


def test_mono_files_named_by_label_match_the_interleaved_render(tmp_path):
    lay = get_layout("5.1")
    feeds = {label: _noise(FS // 4, k) for k, label in enumerate(lay.labels)}
    stem, data = _stem(tmp_path, "5.1", feeds, frames=FS // 4)
    y_inter, _ = _render(tmp_path, stem, "5.1")
    monos = []
    for label in reversed(lay.labels):  # given in a different order: names decide
        p = tmp_path / f"scene_{label}.wav"
        write_audio(p, data[:, [lay.index(label)]], FS, subtype="FLOAT")
        monos.append(p)
    out = tmp_path / "mono-out.wav"
    report = render(
        monos, out, RenderSettings(layout="5.1", subtype="FLOAT", loudness=None, true_peak=None)
    )
    y_mono, _ = read_audio(out)
    assert report["channel_order"]["source"] == "file names"
    assert_allclose(y_mono, y_inter, atol=1e-7)


def test_channel_order_option_permutes_channels(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"L": _noise(FS // 4)})
    # Declare that file channel 0 is actually the right loudspeaker.
    y, report = _render(tmp_path, stem, "5.1", channel_order=["R", "L", "C", "LFE", "Ls", "Rs"])
    assert _energy(y[:, 1]) > 2 * _energy(y[:, 0])
    assert report["channel_order"]["labels"][0] == "R"


def test_channel_count_mismatch_is_a_clear_error(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"L": _noise(100)})
    with pytest.raises(LayoutError, match=r"6 channel\(s\) but layout '7.1' has 8"):
        render([stem], tmp_path / "x.wav", RenderSettings(layout="7.1"))
    assert not (tmp_path / "x.wav").exists()


def test_an_output_name_of_a_format_we_only_read_is_refused_before_any_work(tmp_path):
    # AIFF is read but not written: the message says which formats are written and read.
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(100)})
    with pytest.raises(OptionError, match=r"writes \.wav and \.flac files \(it reads .*AIFF"):
        render([stem], tmp_path / "x.aiff", RenderSettings(layout="2.0"))
    assert list(tmp_path.iterdir()) == [stem]
    with pytest.raises(OptionError, match=r"format must be one of wav, flac"):
        render([stem], tmp_path / "x.wav", RenderSettings(layout="2.0", format="aiff"))


def test_a_render_without_a_layout_says_which_it_took(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"C": _noise(1000)})
    _, report = _render(tmp_path, stem, None)
    assert report["layout"]["name"] == "5.1"
    assert any("no layout was given: rendered as 5.1" in n for n in report["notes"])
    assert not any("no layout was given" in w for w in report["warnings"])
    _, named = _render(tmp_path, stem, "5.1")
    assert not any("no layout was given" in n for n in named["notes"])


def test_cancel_leaves_no_output(tmp_path):
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(FS)}, frames=FS)
    out = tmp_path / "cancelled.wav"
    with pytest.raises(RenderCancelled):
        render([stem], out, RenderSettings(layout="2.0", block_size=1024), cancelled=lambda: True)
    assert not out.exists()
    assert list(tmp_path.glob("*.part")) == [] and list(tmp_path.glob(".*.part")) == []


def test_pcm16_render_is_repeatable_for_a_seed(tmp_path):
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(FS // 4), "R": _noise(FS // 4, 3)})
    outs = []
    for name, seed in (("a", 5), ("b", 5), ("c", 6)):
        out = tmp_path / f"{name}.wav"
        render([stem], out, RenderSettings(layout="2.0", subtype="PCM_16", seed=seed))
        outs.append(out.read_bytes())
    assert outs[0] == outs[1]
    assert outs[0] != outs[2]


def test_report_is_json_and_names_what_was_used(tmp_path):
    stem, _ = _stem(tmp_path, "7.1.4", {"Ltf": _noise(FS // 4)})
    _, report = _render(tmp_path, stem, "7.1.4")
    text = json.dumps(report)
    assert json.loads(text)["hrtf"]["sha256"] and len(report["hrtf"]["sha256"]) == 64
    methods = {s["label"]: s["method"] for s in report["speakers"]}
    assert methods["LFE"] == "lfe"
    assert set(methods.values()) <= {"measured", "interpolated", "nearest", "lfe"}
    for s in report["speakers"]:
        if s["method"] != "lfe":
            assert_allclose(sum(m["weight"] for m in s["measured"]), 1.0, atol=1e-5)
    assert report["timings_s"]["total"] > 0


def test_unknown_hrtf_set_is_a_renderer_error(tmp_path):
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(100)})
    with pytest.raises(RendererError, match="no-such-set"):
        render([stem], tmp_path / "x.wav", RenderSettings(layout="2.0", hrtf="no-such-set"))


# -- the room ---------------------------------------------------------------------------


def test_room_render_shared_tail_equals_exact_brirs(tmp_path):
    """Shared-tail rendering (tail once, from the weighted channel sum, through a FIFO)
    against scipy.signal.oaconvolve of the full per-loudspeaker room responses."""
    lay = get_layout("5.1")
    feeds = {label: _noise(FS // 4, k) for k, label in enumerate(lay.labels)}
    stem, data = _stem(tmp_path, "5.1", feeds, frames=FS // 4)
    y, report = _render(tmp_path, stem, "5.1", room="small", block_size=2048)
    exact = plan_render([stem], RenderSettings(layout="5.1", room="small", room_mode="exact"))
    assert exact.tail is None
    ref = convolve_reference(data, exact.filters)
    assert y.shape == ref.shape
    assert_allclose(y, ref, atol=1e-6)
    assert report["room"]["synthetic"] and report["room"]["mode"] == "shared"
    assert report["engine"]["shared_tail"]["length"] > 0
    assert report["output"]["frames"] == len(data) + exact.length - 1


@pytest.mark.parametrize("chunk, block", [(1500, 512), (4096, 4096), (700, 1024)])
def test_shared_tail_in_chunks_equals_exact_brirs(tmp_path, monkeypatch, chunk, block):
    """The tail convolved in chunks larger than (or equal to) the engine block, with the
    direct output held until its tail is ready: still the whole convolution, frame for
    frame (oracle: scipy.signal.oaconvolve of the full room responses), whatever the
    chunk, block and stem lengths."""
    import earfold.renderer.engine.scheduler as render_module

    monkeypatch.setattr(render_module, "TAIL_BLOCK_FRAMES", chunk)
    lay = get_layout("5.1")
    frames = FS // 5 + 37
    feeds = {label: _noise(frames, k) for k, label in enumerate(lay.labels)}
    stem, data = _stem(tmp_path, "5.1", feeds, frames=frames)
    y, report = _render(tmp_path, stem, "5.1", room="small", block_size=block)
    exact = plan_render([stem], RenderSettings(layout="5.1", room="small", room_mode="exact"))
    ref = convolve_reference(data, exact.filters)
    assert y.shape == ref.shape
    assert_allclose(y, ref, atol=1e-6)
    assert report["engine"]["shared_tail"]["block_size"] % block == 0
    assert report["engine"]["shared_tail"]["block_size"] >= chunk


def test_room_and_headphone_eq_equal_the_cascade_of_references(tmp_path, monkeypatch):
    """Shared tail in chunks, then headphone EQ on the two ears: the render equals the
    exact room responses convolved (scipy.signal.oaconvolve) and then the headphone
    filter bank convolved again, over the whole length."""
    import earfold.renderer.engine.scheduler as render_module

    monkeypatch.setattr(render_module, "TAIL_BLOCK_FRAMES", 3000)
    bands = [
        {"type": "peaking", "frequency": 3000.0, "gain_db": -4.0, "q": 1.2},
        {"type": "high_shelf", "frequency": 8000.0, "gain_db": 3.0, "q": 0.7},
    ]
    lay = get_layout("5.1")
    frames = FS // 5 + 11
    feeds = {label: _noise(frames, k) for k, label in enumerate(lay.labels)}
    stem, data = _stem(tmp_path, "5.1", feeds, frames=frames)
    y, report = _render(tmp_path, stem, "5.1", room="small", block_size=1024, headphone_eq=bands)
    exact = plan_render(
        [stem], RenderSettings(layout="5.1", room="small", room_mode="exact", headphone_eq=bands)
    )
    ref = convolve_reference(convolve_reference(data, exact.filters), exact.headphone.filters())
    assert y.shape == ref.shape
    assert_allclose(y, ref, atol=2e-6)
    assert "headphone_eq" in report["engine"]


def test_room_is_deterministic_for_a_seed(tmp_path):
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(FS // 8)}, frames=FS // 8)
    outs = []
    for name, seed in (("a", 3), ("b", 3), ("c", 4)):
        out = tmp_path / f"{name}.wav"
        render(
            [stem],
            out,
            RenderSettings(
                layout="2.0",
                room="small",
                seed=seed,
                subtype="FLOAT",
                loudness=None,
                true_peak=None,
            ),
        )
        outs.append(read_audio(out)[0])
    assert np.array_equal(outs[0], outs[1])
    assert not np.array_equal(outs[0], outs[2])


def test_room_lengthens_the_output_and_adds_reverberant_energy(tmp_path):
    stem, _ = _stem(tmp_path, "5.1", {"C": _noise(FS // 8)}, frames=FS // 8)
    dry, _ = _render(tmp_path, stem, "5.1")
    wet, report = _render(tmp_path, stem, "5.1", room="medium")
    assert len(wet) > len(dry) + FS // 4  # a tail of several hundred ms
    late = wet[len(dry) :]
    assert _energy(late) > 1e-4 * _energy(wet)
    assert report["room"]["rt60_requested_s"]


def test_measured_room_set_is_rendered_as_it_is(tmp_path):
    """A SOFA file whose RoomType says 'reverberant' already holds the room: no synthetic room."""
    from tests.renderer import sofa_factory

    spec = sofa_factory.simple_free_field()
    spec.attrs["RoomType"] = "reverberant"
    sofa = sofa_factory.write(tmp_path / "brir.sofa", spec)
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(FS // 8)}, frames=FS // 8)
    _, report = _render(tmp_path, stem, "2.0", room="large", hrtf=str(sofa))
    assert report["room"]["synthetic"] is False and report["room"]["measured_room"] is True
    assert any("already holds room responses" in w for w in report["warnings"])


def test_unknown_room_mode_is_an_error(tmp_path):
    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(100)})
    with pytest.raises(RendererError, match="room mode 'approx'"):
        render(
            [stem],
            tmp_path / "x.wav",
            RenderSettings(layout="2.0", room="small", room_mode="approx"),
        )


# -- delivery ---------------------------------------------------------------------------


def test_match_keeps_the_input_loudness_under_the_ceiling(tmp_path):
    """'match' the stem's programme loudness (BS.1770 weights from the layout), limiter at
    -1 dBTP. Output loudness checked with pyloudnorm (ITU filter, filter_class="DeMan"), an
    independent implementation of ITU-R BS.1770."""
    import pyloudnorm

    from earfold.renderer.loudness import channel_weights, measure_file, true_peak

    lay = get_layout("5.1")
    feeds = {label: _noise(2 * FS, k) for k, label in enumerate(lay.labels) if label != "LFE"}
    stem, data = _stem(tmp_path, "5.1", feeds, frames=2 * FS)
    out = tmp_path / "delivered.wav"
    report = render([stem], out, RenderSettings(layout="5.1", subtype="FLOAT", loudness="match"))
    y, _ = read_audio(out)
    expected_in = measure_file(stem, channel_weights(lay)).integrated_lufs
    d = report["delivery"]
    assert_allclose(d["input_integrated_lufs"], expected_in, atol=0.01)
    got = pyloudnorm.Meter(FS, filter_class="DeMan").integrated_loudness(y.astype(np.float64))
    assert abs(got - expected_in) < 0.1
    assert true_peak(y, FS) <= -1.0
    assert d["limiter"]["enabled"] and d["ceiling_dbtp"] == -1.0


def test_loud_target_is_limited_to_the_ceiling(tmp_path):
    """A target far above what the material allows: the limiter holds the ceiling, checked
    by an independent 4x-oversampled true-peak measurement of the written file."""
    from earfold.renderer.loudness import true_peak

    stem, _ = _stem(tmp_path, "2.0", {"L": 4 * _noise(FS), "R": 4 * _noise(FS, 9)}, frames=FS)
    out = tmp_path / "loud.wav"
    report = render([stem], out, RenderSettings(layout="2.0", loudness=-8.0, true_peak=-2.0))
    y, _ = read_audio(out)
    assert true_peak(y, FS) <= -2.0
    lim = report["delivery"]["limiter"]
    assert lim["samples_limited"] > 0 and lim["max_gain_reduction_db"] > 0
    assert not list(tmp_path.glob(".*.render.wav"))  # the float temporary is gone


def test_limiter_off_and_no_target_keeps_the_raw_level_and_says_so(tmp_path):
    stem, data = _stem(tmp_path, "2.0", {"L": _noise(FS // 4)}, frames=FS // 4)
    y, report = _render(tmp_path, stem, "2.0")
    assert report["delivery"] is None
    assert any("limiter is off" in w for w in report["warnings"])


def test_default_delivery_is_ebu_r128_programme_level(tmp_path):
    """Default: -23 LUFS integrated (EBU R128), read back with pyloudnorm (ITU filter)."""
    import pyloudnorm

    stem, _ = _stem(tmp_path, "2.0", {"L": _noise(2 * FS), "R": _noise(2 * FS, 5)}, frames=2 * FS)
    out = tmp_path / "r128.wav"
    report = render([stem], out, RenderSettings(layout="2.0"))
    y, _ = read_audio(out)
    got = pyloudnorm.Meter(FS, filter_class="DeMan").integrated_loudness(y.astype(np.float64))
    assert abs(got - -23.0) < 0.1
    assert report["delivery"]["target_lufs"] == -23.0
