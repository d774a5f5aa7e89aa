"""The ``earfold`` command line: happy paths and one-line errors with exit status 2."""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

import numpy as np
import pytest

from earfold.renderer.io import read_audio, write_audio
from earfold.service.cli import main

FS = 48000


def _run(*args: str) -> subprocess.CompletedProcess:
    """Run the CLI in a fresh interpreter, as a user would (no TTY: no progress)."""
    return subprocess.run(
        [sys.executable, "-m", "earfold.service.cli", *args],
        capture_output=True,
        text=True,
        timeout=120,
    )


def _assert_one_line_error(proc: subprocess.CompletedProcess, pattern: str) -> None:
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, proc.stderr
    assert lines[0].startswith("earfold: error:")
    assert pattern in lines[0]


@pytest.fixture
def stem51(tmp_path):
    data = np.zeros((FS // 4, 6), dtype=np.float32)
    data[:, 0] = 0.1 * np.random.default_rng(0).standard_normal(FS // 4)
    path = tmp_path / "take.wav"
    write_audio(path, data, FS)
    return path


def test_render_writes_output_and_report(tmp_path, stem51):
    out = tmp_path / "take.bin.wav"
    proc = _run("render", str(stem51), "-o", str(out), "--layout", "5.1")
    assert proc.returncode == 0, proc.stderr
    y, rate = read_audio(out)
    assert y.shape[1] == 2 and rate == FS
    report = json.loads((tmp_path / "take.bin.report.json").read_text())
    assert report["layout"]["name"] == "5.1"
    assert "wrote" in proc.stderr


def test_render_with_eq_options_reports_them(tmp_path, stem51, repo_root):
    out = tmp_path / "take.bin.wav"
    bright = repo_root / "examples" / "headphone_eq" / "bright.json"
    proc = _run(
        "render",
        str(stem51),
        "-o",
        str(out),
        "--layout",
        "5.1",
        "--eq",
        "none",
        "--headphone-eq",
        str(bright),
    )
    assert proc.returncode == 0, proc.stderr
    report = json.loads((tmp_path / "take.bin.report.json").read_text())
    assert report["eq"]["type"] == "none" and report["eq"]["chosen"] == "requested"
    assert report["eq"]["headphone"]["file"] == "bright.json"
    assert len(report["eq"]["headphone"]["sha256"]) == 64
    # The default for a free-field set: diffuse-field, with the curve's summary.
    proc = _run("render", str(stem51), "-o", str(out), "--layout", "5.1")
    report = json.loads((tmp_path / "take.bin.report.json").read_text())
    assert report["eq"]["type"] == "diffuse-field"
    assert report["eq"]["diffuse_field"]["octave_bands_db"]["1000"] is not None


def test_render_bad_headphone_eq_is_one_line_exit_2(tmp_path, stem51):
    bad = tmp_path / "cans.json"
    bad.write_text('[{"type": "notch", "frequency": 100}]')
    proc = _run(
        "render",
        str(stem51),
        "-o",
        str(tmp_path / "o.wav"),
        "--layout",
        "5.1",
        "--headphone-eq",
        str(bad),
    )
    _assert_one_line_error(proc, "unknown type 'notch'")
    assert not (tmp_path / "o.wav").exists()


def test_render_wrong_layout_is_one_line_exit_2(tmp_path, stem51):
    proc = _run("render", str(stem51), "-o", str(tmp_path / "o.wav"), "--layout", "7.1.4")
    _assert_one_line_error(proc, "layout '7.1.4' has 12")
    assert not (tmp_path / "o.wav").exists()


def test_render_unknown_layout_lists_choices(tmp_path, stem51):
    proc = _run("render", str(stem51), "-o", str(tmp_path / "o.wav"), "--layout", "4.0.9")
    _assert_one_line_error(proc, "7.1.4")


def test_render_missing_input(tmp_path):
    proc = _run(
        "render", str(tmp_path / "nope.wav"), "-o", str(tmp_path / "o.wav"), "--layout", "5.1"
    )
    _assert_one_line_error(proc, "nope.wav")


def test_render_malformed_sofa(tmp_path, stem51):
    bad = tmp_path / "bad.sofa"
    bad.write_bytes(b"\x89HDF\r\n\x1a\n" + b"\0" * 100)
    proc = _run(
        "render", str(stem51), "-o", str(tmp_path / "o.wav"), "--layout", "5.1", "--hrtf", str(bad)
    )
    _assert_one_line_error(proc, "bad.sofa")


def test_text_file_as_audio(tmp_path):
    txt = tmp_path / "notes.wav"
    txt.write_text("these are not samples\n")
    proc = _run("render", str(txt), "-o", str(tmp_path / "o.wav"), "--layout", "2.0")
    _assert_one_line_error(proc, "notes.wav")


def test_layouts_json_lists_the_standard_layouts(capsys):
    assert main(["layouts", "--json"]) == 0
    names = [entry["name"] for entry in json.loads(capsys.readouterr().out)]
    for name in ("2.0", "5.1", "7.1", "5.1.2", "5.1.4", "7.1.2", "7.1.4", "9.1.6", "22.2"):
        assert name in names


def test_layouts_text(capsys):
    assert main(["layouts"]) == 0
    out = capsys.readouterr().out
    assert "7.1.4" in out and "Ltf" in out


def test_hrtf_list(capsys):
    assert main(["hrtf", "list", "--json"]) == 0
    sets = json.loads(capsys.readouterr().out)
    assert {s["name"] for s in sets} >= {"mit-kemar", "rigid-sphere"}
    assert [s["name"] for s in sets if s["default"]] == ["mit-kemar"]


def test_hrtf_inspect_shipped_file(capsys, repo_root):
    assert (
        main(
            [
                "hrtf",
                "inspect",
                str(repo_root / "hrtf_sets" / "MIT_KEMAR_normal_pinna.sofa"),
                "--json",
            ]
        )
        == 0
    )
    summary = json.loads(capsys.readouterr().out)
    assert summary["measurements"] == 710 and summary["samplerate"] == 44100
    # ITD range of KEMAR: about +/-0.7 ms at the ears' axis (common practice).
    assert 0.6 < summary["itd_range_ms"][1] < 0.8
    assert -0.8 < summary["itd_range_ms"][0] < -0.6


def test_hrtf_inspect_shows_the_diffuse_field_curve(capsys, repo_root):
    assert main(["hrtf", "inspect", str(repo_root / "hrtf_sets" / "rigid_sphere.sofa")]) == 0
    out = capsys.readouterr().out
    assert "diffuse-field response" in out and "usable band" in out and "1000: " in out


def test_hrtf_inspect_malformed_files(shared_sofa_dir):
    for path in sorted((shared_sofa_dir / "malformed").glob("*.sofa"))[:4]:
        proc = _run("hrtf", "inspect", str(path))
        _assert_one_line_error(proc, path.name)


def test_no_command_prints_help():
    proc = _run()
    assert proc.returncode == 2 and "usage" in proc.stderr.lower()


def test_demo_renders_a_714_stem(tmp_path, capsys):
    assert main(["demo", str(tmp_path / "demo")]) == 0
    stem, rate = read_audio(tmp_path / "demo" / "harbour-bells.7.1.4.wav")
    assert stem.shape[1] == 12 and rate == 48000
    out, _ = read_audio(tmp_path / "demo" / "harbour-bells.binaural.wav")
    assert out.shape[1] == 2 and len(out) > len(stem)
    assert "low volume" in capsys.readouterr().out


def test_bench_smoke(capsys, tmp_path):
    """The benchmark runs end to end on a tiny stem (its figures are not asserted: timing
    belongs to `earfold bench`, not to tests)."""
    from earfold.renderer.tools import format_bench, run_bench

    result = run_bench(seconds=1.0, layouts=["2.0"], memory_check=False, workdir=tmp_path)
    row = result["layouts"]["2.0"]
    assert set(row) >= {
        "earfold",
        "baseline",
        "io_floor",
        "speedup_vs_baseline",
        "ratio_to_io_floor",
        "delivery_added",
        "delivery_loud_added",
        "eq_added",
        "eq_prepare_s",
    }
    from earfold.renderer.tools import DELIVERY_ROUNDS, EQ_ROUNDS

    assert len(row["earfold_delivered"]["round_ratios"]) == DELIVERY_ROUNDS
    assert len(row["earfold_delivered_loud"]["round_ratios"]) == DELIVERY_ROUNDS
    assert len(row["eq_on"]["round_ratios"]) == EQ_ROUNDS
    assert row["eq_engine"]["blocks"] >= 1 and row["eq_engine"]["on_seconds"] > 0
    assert "2.0" in format_bench(result)


def test_bench_rounds_alternate_and_compare_within_a_round():
    """Interleaved rounds reverse their order every other round, and each round's ratio
    uses the reference run of the same round."""
    from earfold.renderer.tools import interleaved, round_ratios

    calls = []
    times = iter([1.0, 2.0, 4.0, 3.0, 5.0, 10.0])  # A B | B A | A B

    def variant(name):
        def run():
            calls.append(name)
            return {"seconds": next(times)}

        return run

    runs = interleaved({"A": variant("A"), "B": variant("B")}, 3)
    assert calls == ["A", "B", "B", "A", "A", "B"]
    assert [r["seconds"] for r in runs["A"]] == [1.0, 3.0, 5.0]
    assert [r["seconds"] for r in runs["B"]] == [2.0, 4.0, 10.0]
    assert round_ratios(runs["B"], runs["A"]) == [2.0, 4.0 / 3.0, 2.0]


def test_bench_memory_check_covers_the_delivered_render(tmp_path):
    """The memory check runs the raw and the delivered render at both lengths (figures
    not asserted, as above: only that they are measured and shown)."""
    from earfold.renderer.tools import format_bench, run_bench

    result = run_bench(seconds=0.5, layouts=["2.0"], workdir=tmp_path)
    mem = result["memory"]
    for label in ("short", "long"):
        assert mem[label]["peak_memory_mb"] >= 0 and mem[label]["delivered_peak_memory_mb"] >= 0
    assert "delivered_growth_mb" in mem
    assert "delivered (2.0)" in format_bench(result)


def test_hrtf_without_action_shows_its_own_help():
    # Regression: the help shown was another subcommand's (late-bound parser variable).
    proc = _run("hrtf")
    assert proc.returncode == 2
    assert "inspect" in proc.stderr and "demo" not in proc.stderr


def test_render_options_come_from_the_declaration(tmp_path, stem51):
    """No --layout: the stem's suggested layout (6 channels: 5.1); --excerpt renders a
    window; an LFE gain outside the declared range is refused with the bounds in words."""
    out = tmp_path / "take.bin.wav"
    proc = _run("render", str(stem51), "-o", str(out), "--excerpt", "0.05,0.1", "--lfe-gain", "3")
    assert proc.returncode == 0, proc.stderr
    report = json.loads((tmp_path / "take.bin.report.json").read_text())
    assert report["layout"]["name"] == "5.1"
    assert report["input"]["frames"] == round(0.1 * FS)
    assert report["lfe"]["gain_db"] == 3.0
    proc = _run("render", str(stem51), "-o", str(out), "--lfe-gain", "41")
    assert proc.returncode == 2
    assert "lfe_gain must be from -40 to 40 dB, not 41" in proc.stderr
    proc = _run("render", str(stem51), "-o", str(out), "--loudness", "-70")
    assert proc.returncode == 2
    assert "between -70 and 0 LUFS (exclusive)" in proc.stderr


def test_loudness_with_a_layout_weights_only_the_matching_file(tmp_path, capsys):
    # A 5.1 stem and its two-channel render in one call: the layout's weights go to the
    # stem; the render is measured with plain weights, and the output says which is which.
    rng = np.random.default_rng(8)
    stem = tmp_path / "stem.wav"
    render = tmp_path / "render.wav"
    write_audio(stem, (0.1 * rng.standard_normal((FS, 6))).astype(np.float32), FS)
    write_audio(render, (0.1 * rng.standard_normal((FS, 2))).astype(np.float32), FS)

    assert main(["loudness", str(stem), str(render), "--layout", "5.1"]) == 0
    text = capsys.readouterr().out
    stem_part, render_part = text.split(f"{render}:")
    assert "channel weights  layout 5.1" in stem_part
    assert "channel weights  plain, 1.0 per channel" in render_part
    assert "not the 6 of layout 5.1" in render_part

    assert main(["loudness", str(stem), str(render), "--layout", "5.1", "--json"]) == 0
    entries = json.loads(capsys.readouterr().out)
    assert [(e["file"], e["channel_weights"], e["weights_layout"]) for e in entries] == [
        ("stem.wav", "layout", "5.1"),
        ("render.wav", "plain", None),
    ]
    assert all(e["integrated_lufs"] is not None for e in entries)


def _subparsers(parser: argparse.ArgumentParser, path: tuple[str, ...] = ("earfold",)):
    yield path, parser
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from _subparsers(sub, (*path, name))


def test_every_option_and_subcommand_has_help():
    from earfold.service.cli import build_parser

    missing = []
    for path, parser in _subparsers(build_parser()):
        for action in parser._actions:
            if isinstance(action, argparse._HelpAction) or action.help == argparse.SUPPRESS:
                continue
            if isinstance(action, argparse._SubParsersAction):
                helped = {a.dest for a in action._choices_actions if a.help}
                missing += [f"{' '.join(path)} {n}" for n in action.choices if n not in helped]
            if not action.help:
                missing.append(f"{' '.join(path)} {action.option_strings or action.dest}")
    assert missing == []


@pytest.mark.parametrize(
    "command",
    [["layouts"], ["rooms"], ["hrtf"], ["hrtf", "list"], ["hrtf", "inspect"], ["bench"], ["demo"]],
)
def test_help_of_each_command(command, capsys):
    with pytest.raises(SystemExit) as done:
        main([*command, "-h"])
    assert done.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith(f"usage: earfold {' '.join(command)}")
    for line in out.splitlines():
        if line.strip().startswith("--json"):
            assert "JSON" in line, line


def test_bench_checks_its_options_before_running(tmp_path):
    proc = _run("bench", "--seconds", "0", "--no-memory")
    assert proc.returncode == 2 and "must be > 0" in proc.stderr
    _assert_one_line_error(_run("bench", "--room", "huge", "--seconds", "0.1"), "unknown room")
    _assert_one_line_error(_run("bench", "--layout", "9.9", "--seconds", "0.1"), "9.9")


def test_demo_into_a_file_is_one_line(tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("")
    _assert_one_line_error(_run("demo", str(blocker / "demo")), "a-file")


def test_errors_show_no_python_repr(tmp_path, stem51):
    # a WAV given as a SOFA file: the message shows the first bytes, not b'RIFF...'
    proc = _run("hrtf", "inspect", str(stem51))
    _assert_one_line_error(proc, "not a SOFA file")
    assert "b'" not in proc.stderr and 'b"' not in proc.stderr and "array(" not in proc.stderr
    assert "52 49 46 46" in proc.stderr and "which begin a WAV file" in proc.stderr
