"""Ambisonic scenes through the whole render: the command line, the plan, its cache, the
calibration, the room and the report (issue 17). The decoders themselves are checked in
test_scene_decoders.py; here a scene goes in as a file and binaural audio comes out."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import signal

import earfold.renderer.render.scene_feeds as scene_feeds
from earfold.renderer.eq import pink_band
from earfold.renderer.errors import RendererError
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.io import read_audio, write_audio
from earfold.renderer.layouts import SCENES, scene_layout
from earfold.renderer.loudness import LoudnessMeter, channel_weights
from earfold.renderer.render import RenderSettings, option, plan_render, render
from earfold.renderer.render import filter_cache as fc
from earfold.renderer.render.options import DECODER_CHOICES
from earfold.renderer.scenes import (
    DECODER_METHODS,
    acn_degrees,
    conversion_matrix,
    encode,
    speaker_gains,
    virtual_layout,
)
from earfold.service.cli import main

FS = 48000


def _noise(seconds: float, seed: int) -> np.ndarray:
    return 0.1 * np.random.default_rng(seed).standard_normal(int(seconds * FS))


def _from_sn3d(b: np.ndarray, order: int, norm: str) -> np.ndarray:
    """A scene (frames x channels) in ``norm`` whose SN3D form is ``b``."""
    return b @ np.linalg.inv(conversion_matrix(order, norm)).T


def _plane_wave(path, order, azimuth, elevation=0.0, *, norm="sn3d", seconds=0.3, seed=3):
    """A plane wave of noise from (azimuth, elevation), encoded in ``norm``, 32-bit float."""
    b = np.outer(_noise(seconds, seed), encode(direction_to_vector(azimuth, elevation), order))
    write_audio(path, _from_sn3d(b, order, norm).astype(np.float32), FS, subtype="FLOAT")
    return path


def _cli_render(stem, out, *extra: str) -> int:
    args = ["render", str(stem), "-o", str(out), "--loudness", "none", "--true-peak", "off"]
    return main([*args, "--subtype", "FLOAT", "--report", "none", "--quiet", *extra])


def _cli_error(capsys, *args: str) -> str:
    """The one-line error of a refused command (exit status 2)."""
    try:
        code = main(list(args))
    except SystemExit as exc:  # argparse refuses before the render
        code = exc.code
    assert code == 2
    lines = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("earfold: error:"), lines
    return lines[0]


def _itd_ms(y: np.ndarray) -> float:
    """Interaural delay (ms) below 1.5 kHz, positive when the right ear lags: the peak of
    the cross-correlation of the low-passed ears (scipy.signal.correlate)."""
    sos = signal.butter(4, 1500.0, "lowpass", fs=FS, output="sos")
    left, right = signal.sosfilt(sos, y[:, 0]), signal.sosfilt(sos, y[:, 1])
    xc = signal.correlate(right, left, mode="full")
    lags = signal.correlation_lags(len(right), len(left), mode="full")
    window = np.abs(lags) <= int(0.0015 * FS)
    return float(lags[window][np.argmax(xc[window])]) / FS * 1000.0


def _ild_db(y: np.ndarray) -> float:
    return float(10 * np.log10(np.sum(y[:, 0] ** 2) / np.sum(y[:, 1] ** 2)))


def test_a_scene_from_the_left_is_louder_and_earlier_at_the_left_ear(tmp_path):
    # Woodworth's spherical head (radius 8.75 cm, c = 343 m/s) puts a source at 90 degrees
    # (a / c)(pi/2 + 1) = 0.66 ms earlier at the near ear; KEMAR measures about that.
    for azimuth, sign in ((90.0, 1.0), (-90.0, -1.0)):
        stem = _plane_wave(tmp_path / f"pw{azimuth:+.0f}.wav", 3, azimuth)
        out = tmp_path / f"out{azimuth:+.0f}.wav"
        assert _cli_render(stem, out, "--layout", "hoa3") == 0
        y, _ = read_audio(out)
        assert sign * _ild_db(y) > 6.0
        assert 0.4 < sign * _itd_ms(y) < 0.9


def test_yaw_90_turns_a_front_source_to_the_left(tmp_path):
    front = _plane_wave(tmp_path / "front.wav", 3, 0.0)
    left = _plane_wave(tmp_path / "left.wav", 3, 90.0)
    assert _cli_render(front, tmp_path / "turned.wav", "--layout", "hoa3", "--rotate", "90") == 0
    assert _cli_render(left, tmp_path / "left-out.wav", "--layout", "hoa3") == 0
    turned, _ = read_audio(tmp_path / "turned.wav")
    heard, _ = read_audio(tmp_path / "left-out.wav")
    # The rotation is exact in the harmonics (encode(R d) = R encode(d)), and it is folded
    # into the filters: the turned front source is the left source, to float precision.
    assert np.max(np.abs(turned - heard)) < 1e-5 * np.max(np.abs(heard))
    assert _ild_db(turned) > 6.0 and _itd_ms(turned) > 0.4


@pytest.mark.parametrize(("order", "norm"), [(1, "fuma"), (1, "n3d"), (3, "n3d")])
def test_fuma_and_n3d_input_render_as_the_same_scene_in_sn3d(tmp_path, order, norm):
    layout = SCENES["foa" if order == 1 else f"hoa{order}"].name
    plain = _plane_wave(tmp_path / "sn3d.wav", order, 50.0, 20.0)
    other = _plane_wave(tmp_path / f"{norm}.wav", order, 50.0, 20.0, norm=norm)
    assert _cli_render(plain, tmp_path / "a.wav", "--layout", layout) == 0
    assert _cli_render(other, tmp_path / "b.wav", "--layout", layout, "--ambisonic-norm", norm) == 0
    a, _ = read_audio(tmp_path / "a.wav")
    b, _ = read_audio(tmp_path / "b.wav")
    assert np.max(np.abs(a - b)) < 1e-5 * np.max(np.abs(a))


def test_clear_errors_for_what_does_not_fit(tmp_path, capsys):
    nine = _plane_wave(tmp_path / "nine.wav", 2, 0.0)
    out = str(tmp_path / "o.wav")
    line = _cli_error(capsys, "render", str(nine), "-o", out, "--layout", "hoa3")
    assert "16 channels" in line and "9 channel" in line and "hoa2" in line
    line = _cli_error(
        capsys, "render", str(nine), "-o", out, "--layout", "hoa2", "--ambisonic-norm", "fuma"
    )
    assert "first order only" in line
    stereo = tmp_path / "stereo.wav"
    write_audio(stereo, np.zeros((FS // 10, 2), np.float32), FS)
    line = _cli_error(capsys, "render", str(stereo), "-o", out, "--layout", "2.0", "--rotate", "90")
    assert "rotate" in line and "Ambisonic scenes only" in line
    line = _cli_error(capsys, "render", str(nine), "-o", out, "--layout", "hoa2", "--rotate", "x")
    assert "yaw[,pitch[,roll]]" in line
    for extra in (["--channel-order", "L,R,C,LFE,Ls,Rs,Lb,Rb,C2"], ["--fold", "stereo"]):
        line = _cli_error(capsys, "render", str(nine), "-o", out, "--layout", "hoa2", *extra)
        assert "Ambisonic scene" in line
    assert not (tmp_path / "o.wav").exists()


def test_the_rotation_option_reads_one_to_three_angles():
    spec = option("rotate")
    assert spec.parse("90") == (90.0, 0.0, 0.0)
    assert spec.parse("90,-10,5") == (90.0, -10.0, 5.0)
    assert spec.check([30, 5]) == (30.0, 5.0, 0.0)
    assert spec.parse("none") is None
    for bad in ("1,2,3,4", "a", "nan"):
        with pytest.raises(RendererError, match="yaw"):
            spec.parse(bad)
    assert DECODER_CHOICES == DECODER_METHODS


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    monkeypatch.setenv(fc.ENV_DIR, str(tmp_path / "cache"))
    monkeypatch.delenv(fc.ENV_OFF, raising=False)
    fc._PROCESS_MEMORY.clear()
    yield
    fc._PROCESS_MEMORY.clear()


def test_a_repeated_scene_render_loads_its_bank_and_builds_no_decoder(
    tmp_path, monkeypatch, fresh_cache
):
    built = []
    real = scene_feeds.scene_decoder
    monkeypatch.setattr(
        scene_feeds, "scene_decoder", lambda *a, **k: built.append(1) or real(*a, **k)
    )
    stem = _plane_wave(tmp_path / "s.wav", 2, 30.0)
    settings = RenderSettings(layout="hoa2", rotate=(10.0, 0.0, 0.0))
    first = plan_render([stem], settings)
    fc._PROCESS_MEMORY.clear()  # from the files on disk
    again = plan_render([stem], settings)
    assert len(built) == 1
    assert np.array_equal(first.filters, again.filters)
    assert again.scene == first.scene and again.calibration == first.calibration
    # Every scene parameter is in the key: another rotation, normalisation or decoder
    # builds again.
    import dataclasses

    for changed in (
        dataclasses.replace(settings, rotate=(20.0, 0.0, 0.0)),
        dataclasses.replace(settings, ambisonic_norm="n3d"),
        dataclasses.replace(settings, ambisonic_decoder="virtual"),
    ):
        plan_render([stem], changed)
    assert len(built) == 4


def _diffuse_scene(path, order: int, seconds: float, seed: int) -> None:
    """Isotropic pink noise as a scene: SN3D channels uncorrelated, channel k of degree n
    at 1/(2n+1) of W's power."""
    n = int(seconds * FS)
    rng = np.random.default_rng(seed)
    f = np.fft.rfftfreq(n, 1 / FS)
    lo, hi = pink_band(FS)
    shape = np.where((f >= lo) & (f <= hi), 1 / np.sqrt(np.maximum(f, 1e-9)), 0.0)
    x = np.zeros((n, (order + 1) ** 2))
    for k, degree in enumerate(acn_degrees(order)):
        spec = (rng.standard_normal(len(f)) + 1j * rng.standard_normal(len(f))) * shape
        x[:, k] = np.fft.irfft(spec, n)
        x[:, k] *= 0.05 / np.std(x[:, k]) / np.sqrt(2 * degree + 1)
    write_audio(path, x.astype(np.float32), FS, subtype="FLOAT")


def test_the_diffuse_field_powers_are_the_sn3d_mean_squares():
    # The diffuse reference's powers: the mean square of an SN3D harmonic of degree n over
    # the sphere is 1/(2n+1) (AmbiX, Nachbar et al. 2011: N3D = SN3D sqrt(2n+1) has mean
    # square 1); checked on the stored 15-design, which integrates degree 14 exactly.
    points = virtual_layout(7)
    mean_square = np.mean(encode(points, 7) ** 2, axis=0)
    assert np.allclose(mean_square, 1 / (2 * acn_degrees(7) + 1), atol=1e-12)


@pytest.mark.parametrize("order", [1, 3])
def test_a_diffuse_scene_renders_at_the_loudness_of_its_w_channel(tmp_path, order):
    stem = tmp_path / "diffuse.wav"
    _diffuse_scene(stem, order, 6.0, seed=20 + order)
    x, _ = read_audio(stem)
    name = "foa" if order == 1 else f"hoa{order}"
    weights = channel_weights(scene_layout(name))
    assert weights[0] == 1.0 and not weights[1:].any()
    w_meter = LoudnessMeter(FS, x.shape[1], weights)
    w_meter.process(x)
    w_lufs = w_meter.result().integrated_lufs
    out = tmp_path / "out.wav"
    report = render(
        [stem],
        out,
        RenderSettings(layout=name, loudness=None, true_peak=None, subtype="FLOAT"),
    )
    y, _ = read_audio(out)
    meter = LoudnessMeter(FS, 2)
    meter.process(y)
    # Within 0.5 LU, measured with the project's BS.1770-4 meter (as the loudspeaker
    # calibration is in test_calibration.py).
    assert abs(meter.result().integrated_lufs - w_lufs) < 0.5
    assert "W channel" in report["calibration"]["reference"]
    # loudness match keeps the scene's own loudness: that of W.
    matched = render(
        [stem], tmp_path / "m.wav", RenderSettings(layout=name, loudness="match", true_peak=None)
    )
    assert abs(matched["delivery"]["input_integrated_lufs"] - w_lufs) < 0.05
    assert abs(matched["delivery"]["output"]["integrated_lufs"] - w_lufs) < 0.1


def test_a_room_on_request_adds_a_tail_fed_by_the_pressure(tmp_path):
    stem = _plane_wave(tmp_path / "s.wav", 1, 30.0, seconds=0.2)
    free = plan_render([stem], RenderSettings(layout="foa"))
    assert free.tail is None and free.room is None  # the default: no room for scenes
    roomy = plan_render([stem], RenderSettings(layout="foa", room="small"))
    assert roomy.room is not None and roomy.room["synthetic"]
    assert roomy.tail is not None and roomy.tail.shape[-1] > FS // 10
    assert roomy.scene is not None and "virtual loudspeakers" in roomy.scene["room"]
    # Channel k's share of the tail is sum_l w_l D[l, k] (basic gains on the t-design):
    # W alone, since every higher harmonic sums to zero over a design.
    w = roomy.tail_weights
    assert w is not None and w[0] > 0 and np.all(np.abs(w[1:]) < 1e-9 * w[0])
    directions = virtual_layout(1)
    gains = speaker_gains(directions, 1, "basic")
    assert np.isclose(gains[:, 0].sum(), 1.0)
    # Exact mode folds each virtual loudspeaker's whole response: no shared tail, and the
    # filters reach as far as the shared form's tail does.
    exact = plan_render([stem], RenderSettings(layout="foa", room="small", room_mode="exact"))
    assert exact.tail is None and exact.filters.shape[-1] >= roomy.length
    out_free = render([stem], tmp_path / "f.wav", RenderSettings(layout="foa", loudness=None))
    out_room = render(
        [stem], tmp_path / "r.wav", RenderSettings(layout="foa", room="small", loudness=None)
    )
    assert out_room["output"]["frames"] > out_free["output"]["frames"] + FS // 10
    y, _ = read_audio(tmp_path / "r.wav")
    late = y[out_free["output"]["frames"] :]
    assert np.sum(late**2) > 1e-3 * np.sum(y**2)  # the reverberation goes on after the dry


def test_solo_decodes_one_acn_channel_and_the_report_has_a_scene_section(tmp_path):
    stem = _plane_wave(tmp_path / "s.wav", 1, 30.0, seconds=0.2)
    plan = plan_render([stem], RenderSettings(layout="foa", solo="ACN0"))
    assert plan.solo is not None and plan.solo["label"] == "ACN0"
    assert np.any(plan.filters[0]) and not np.any(plan.filters[1:])
    report = render([stem], tmp_path / "o.wav", RenderSettings(layout="foa", rotate=(45, 0, 0)))
    scene = report["scene"]
    assert scene["order"] == 1 and scene["normalisation"] == "sn3d"
    assert scene["decoder"]["method"] == "virtual" and scene["decoder_chosen"].startswith("default")
    assert scene["rotation"] == {"yaw_deg": 45.0, "pitch_deg": 0.0, "roll_deg": 0.0}
    assert len(scene["decoder"]["directions"]) == 10
    assert report["layout"]["kind"] == "scene" and report["layout"]["speakers"] == []
    assert report["channel_order"]["labels"] == ["ACN0", "ACN1", "ACN2", "ACN3"]
    json.dumps(report)
    stereo = tmp_path / "st.wav"
    write_audio(stereo, 0.1 * np.ones((FS // 10, 2), np.float32), FS)
    assert render([stereo], tmp_path / "so.wav", RenderSettings(layout="2.0"))["scene"] is None


def test_layouts_json_lists_scenes_beside_the_loudspeaker_layouts(capsys):
    assert main(["layouts", "--json"]) == 0
    entries = {e["name"]: e for e in json.loads(capsys.readouterr().out)}
    assert entries["7.1.4"]["kind"] == "loudspeakers" and entries["7.1.4"]["speakers"]
    hoa3 = entries["hoa3"]
    assert hoa3["kind"] == "scene" and hoa3["order"] == 3 and hoa3["channels"] == 16
    assert hoa3["normalisations"] == ["sn3d", "n3d"]
    assert entries["foa"]["normalisations"] == ["sn3d", "n3d", "fuma"]
    assert "AmbiX" in hoa3["source"] and hoa3["labels"][:2] == ["ACN0", "ACN1"]


def test_a_square_channel_count_is_never_taken_for_a_scene_unasked(tmp_path):
    stem = tmp_path / "four.wav"
    write_audio(stem, 0.1 * np.ones((FS // 10, 4), np.float32), FS)
    plan = plan_render([stem], RenderSettings())
    assert plan.scene is None and plan.layout.kind == "loudspeakers"
    assert any("layout foa" in n for n in plan.notes)


def test_a_higher_order_stem_is_decoded_at_the_order_asked_for(tmp_path):
    # Truncation of the order (common practice): an order-3 stem rendered as hoa2 keeps
    # its first 9 ACN channels; how orders of one master are compared.
    stem = _plane_wave(tmp_path / "o3.wav", 3, 40.0, 10.0)
    first9 = tmp_path / "o2.wav"
    data, _ = read_audio(stem)
    write_audio(first9, data[:, :9].astype(np.float32), FS, subtype="FLOAT")
    assert _cli_render(stem, tmp_path / "a.wav", "--layout", "hoa2", "--rotate", "20") == 0
    assert _cli_render(first9, tmp_path / "b.wav", "--layout", "hoa2", "--rotate", "20") == 0
    a, _ = read_audio(tmp_path / "a.wav")
    b, _ = read_audio(tmp_path / "b.wav")
    np.testing.assert_allclose(a, b, atol=1e-6 * np.abs(b).max())
    plan = plan_render([str(stem)], RenderSettings(layout="hoa2"))
    assert plan.scene is not None
    assert (plan.scene["order"], plan.scene["stem_order"]) == (2, 3)
    assert plan.scene["channels_decoded"] == 9 and plan.filters.shape[0] == 16
    assert not plan.filters[9:].any()
    assert any("decoded at order 2" in n for n in plan.notes)
    # A lower-order stem cannot be decoded at a higher order
    with pytest.raises(RendererError, match="decoded at this order"):
        plan_render([str(first9)], RenderSettings(layout="hoa3"))
