"""``earfold bench --commands``: whole commands timed as processes (shape and arithmetic
only; the times themselves belong to the bench, not to tests)."""

from __future__ import annotations

import json

import pytest

from earfold.renderer.tools import ADM_CASE, COMMAND_CASES, adm_case
from earfold.renderer.tools._bench_commands import (
    COMMAND_ROUNDS,
    MIN_STEM_SECONDS,
    command_ratios,
    scaled_seconds,
)
from earfold.service.cli import main


def test_bench_commands_runs_tiny_and_its_ratios_follow_from_its_times(capsys, tmp_path):
    # (Ratios are kept to 0.01, times to 1 us: recomputed, they agree within the rounding.)
    rc = main(["bench", "--commands", "--seconds", "0.3", "--json"])
    assert rc == 0
    result = json.loads(capsys.readouterr().out)
    assert result["kind"] == "commands" and result["rounds"] == COMMAND_ROUNDS
    assert [row["name"] for row in result["cases"]] == [c.name for c in COMMAND_CASES]
    for row, case in zip(result["cases"], COMMAND_CASES):
        commands = row["commands"]
        for when in ("before", "after"):  # how busy the machine was (None where unknown)
            load = row[f"load_average_{when}"]
            assert load is None or (len(load) == 3 and min(load) >= 0)
        assert set(commands) == {"earfold", *case.against}
        for figures in commands.values():
            runs = figures["runs_s"]
            assert len(runs) == COMMAND_ROUNDS and all(t > 0 for t in runs)
            assert figures["seconds"] == min(runs)
            assert figures["x_real_time"] == pytest.approx(
                row["seconds_of_audio"] / figures["seconds"], rel=0.01, abs=0.01
            )
        ours = commands["earfold"]["seconds"]
        # The earfold runs' stages, from each run's report; the row shows the fastest run's.
        stages = commands["earfold"]["stages_s"]
        assert len(stages) == COMMAND_ROUNDS
        fastest = commands["earfold"]["runs_s"].index(ours)
        assert row["earfold_stages_s"] == stages[fastest]
        assert set(stages[fastest]) == {"plan", "render", "delivery", "outside_render"}
        assert 0 < sum(stages[fastest].values()) <= ours + 0.01
        if "per_filter" in commands:
            assert row["speedup_vs_per_filter"] == pytest.approx(
                commands["per_filter"]["seconds"] / ours, rel=0.01, abs=0.01
            )
            assert row["per_filter_taps"] > 0
        if "io_floor" in commands:
            assert row["ratio_to_io_floor"] == pytest.approx(
                ours / commands["io_floor"]["seconds"], rel=0.01, abs=0.01
            )
    # The room cases convolve the full room responses: longer than the HRTF-only filters.
    taps = {row["name"]: row.get("per_filter_taps") for row in result["cases"]}
    assert taps["7.1.4 60 s large room"] > 10 * taps["7.1.4 120 s"]


def test_command_ratios_are_taken_from_the_fastest_runs():
    commands = {
        "earfold": {"seconds": 2.0},
        "per_filter": {"seconds": 7.0},
        "io_floor": {"seconds": 0.5},
    }
    assert command_ratios(commands) == {"speedup_vs_per_filter": 3.5, "ratio_to_io_floor": 4.0}
    assert command_ratios({"earfold": {"seconds": 1.0}, "io_floor": {"seconds": 0.25}}) == {
        "ratio_to_io_floor": 4.0
    }


def test_seconds_scales_every_case_with_a_floor():
    case = COMMAND_CASES[0]
    assert scaled_seconds(case, 60.0) == case.seconds
    assert scaled_seconds(case, 6.0) == pytest.approx(case.seconds / 10)
    assert scaled_seconds(case, 1e-6) == MIN_STEM_SECONDS


def test_bench_commands_refuses_options_it_does_not_take(capsys):
    assert main(["bench", "--commands", "--layout", "5.1"]) == 2
    assert "--commands" in capsys.readouterr().err
    assert main(["bench", "--rounds", "3"]) == 2
    assert "--rounds goes with --commands" in capsys.readouterr().err


def test_bench_commands_keeps_every_round(capsys):
    """--rounds N: N runs of every command, all kept."""
    from earfold.renderer.tools import run_command_bench
    from earfold.renderer.tools._bench_commands import CommandCase

    result = run_command_bench(0.3, cases=(CommandCase("tiny", "2.0", 1.0),), rounds=3)
    (row,) = result["cases"]
    assert result["rounds"] == 3
    assert {k: len(v["runs_s"]) for k, v in row["commands"].items()} == {
        "earfold": 3,
        "io_floor": 3,
    }


def test_bench_adm_times_the_master_against_the_floor_and_its_target(capsys):
    rc = main(["bench", "--adm", "--seconds", "0.3", "--rounds", "1", "--json"])
    assert rc == 0
    result = json.loads(capsys.readouterr().out)
    (row,) = result["cases"]
    assert row["name"] == ADM_CASE.name and row["layout"] == "adm"
    assert (row["objects"], row["channels"]) == (16, 28)
    assert set(row["commands"]) == {"earfold", "io_floor"}
    ours = row["commands"]["earfold"]
    assert ours["x_real_time"] == pytest.approx(
        row["seconds_of_audio"] / ours["seconds"], rel=0.01, abs=0.01
    )
    assert row["ratio_to_io_floor"] == pytest.approx(
        ours["seconds"] / row["commands"]["io_floor"]["seconds"], rel=0.01, abs=0.01
    )
    assert row["target_x_real_time"] == 100.0
    assert row["meets_target"] == (ours["x_real_time"] >= 100.0)
    assert main(["bench", "--adm", "--seconds", "0.3", "--rounds", "1"]) == 0
    assert "target >= 100x real time" in capsys.readouterr().out


def test_bench_adm_takes_a_room_and_refuses_what_it_does_not_use(capsys):
    assert adm_case("large").room == "large" and adm_case("large").target_x_real_time == 60.0
    assert adm_case("none") == ADM_CASE
    assert main(["bench", "--adm", "--layout", "5.1"]) != 0
    assert "--adm times its own master" in capsys.readouterr().err
    assert main(["bench", "--adm", "--room", "no-such-room"]) != 0


def test_bench_adm_says_why_a_timed_command_failed(capsys, monkeypatch):
    # Until ADM masters render in a room, the room case fails with the render's own words.
    from earfold.renderer.tools import _bench_commands

    def failing(argv, cwd):
        raise RuntimeError("bench command 'earfold' failed: earfold: error: room: not available")

    monkeypatch.setattr(_bench_commands, "_timed", failing)
    assert main(["bench", "--adm", "--room", "large", "--seconds", "0.1", "--rounds", "1"]) == 1
    assert "earfold: error: bench command 'earfold' failed" in capsys.readouterr().err
