"""The guarded SOFA reader (a child process with time and memory limits) and the SOFA
fuzzing harness: damaged, forged and hostile files are refused with one line or loaded,
never hang, never exhaust memory, never end in a traceback."""

from __future__ import annotations

import os
import resource
import time
from pathlib import Path

import numpy as np
import pytest
import sofa_factory as fac
import sofa_mutants as mut
from numpy.testing import assert_array_equal

from earfold.renderer.errors import HrirError, SofaError
from earfold.renderer.hrtf import (
    HrirSet,
    is_shipped,
    load_hrir_set,
    read_sofa,
    read_sofa_guarded,
)


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    return mut.write_base(tmp_path_factory.mktemp("base") / "base.sofa")


def _one_line_error(exc: SofaError, name: str) -> None:
    text = str(exc)
    assert "\n" not in text
    assert "Traceback" not in text
    assert text.startswith(repr(name) + ":"), text


def test_guarded_read_returns_what_the_direct_read_does(base):
    direct = read_sofa(base)
    guarded = read_sofa_guarded(base)
    for name in ("ir", "delay", "directions", "distances"):
        assert_array_equal(getattr(guarded, name), getattr(direct, name))
        assert not getattr(guarded, name).flags.writeable
    assert guarded.samplerate == direct.samplerate
    assert guarded.convention == direct.convention
    assert dict(guarded.attributes) == dict(direct.attributes)
    assert guarded.path == direct.path
    assert guarded.warnings == direct.warnings


def test_sofa_file_that_reads_forever_is_stopped_with_one_line(base):
    # A damaged file can make the HDF5 library loop; the guard kills the child at its wall
    # time limit. A limit shorter than the child's start-up stands in for the loop here.
    start = time.monotonic()
    with pytest.raises(SofaError) as info:
        read_sofa_guarded(base, timeout_s=0.05)
    assert time.monotonic() - start < 5.0
    _one_line_error(info.value, "base.sofa")
    assert "took longer than 0.05 s" in str(info.value)
    assert "probably damaged" in str(info.value)


def test_sofa_file_that_needs_too_much_memory_is_stopped_with_one_line(tmp_path):
    # Data.IR declared within the value limit but never written reads as fill values:
    # 2000 x 2 x 8192 float64 is 256 MiB, more than a child limited to its libraries
    # plus some 100 MiB may take.
    spec = fac.simple_free_field()
    spec.variables["Data.IR"] = fac.Var(("M", "R", "N"), None)
    spec.variables["SourcePosition"] = fac.Var(("M", "C"), None)
    spec.sizes.update(M=2000, R=2, N=8192, C=3)
    path = fac.write(tmp_path / "big.sofa", spec)
    baseline = 700 * 2**20
    with pytest.raises(SofaError) as info:
        read_sofa_guarded(path, memory_bytes=baseline)
    _one_line_error(info.value, "big.sofa")
    assert "memory" in str(info.value)


def test_cli_load_of_a_user_sofa_file_goes_through_the_guard(base, monkeypatch):
    import earfold.renderer.hrtf.hrir as hrir

    calls = []
    real = hrir.read_sofa_guarded

    def spy(path, **kwargs):
        calls.append(path)
        return real(path, **kwargs)

    monkeypatch.setattr(hrir, "read_sofa_guarded", spy)
    hrir._load_cached.cache_clear()
    hset = load_hrir_set(base, 48000.0)
    assert calls == [os.fspath(base)]
    assert hset.measurements == 24


def test_shipped_sets_are_trusted_and_user_files_are_not(base):
    from earfold.hrtf_sets import DEFAULT_SET, get_shipped

    assert is_shipped(get_shipped(DEFAULT_SET).path)
    assert not is_shipped(base)


@pytest.mark.parametrize(
    "recipe",
    ["forged_huge_taps", "forged_huge_measurements", "forged_many_values", "forged_huge_positions"],
)
def test_forged_dimensions_are_refused_before_reading_with_the_limit_named(base, tmp_path, recipe):
    path = mut.make_mutant(base, recipe, 1, tmp_path / "forged.sofa")
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    with pytest.raises(SofaError, match=r"refusing|more than") as info:
        read_sofa(path)
    # Refused from the header alone: this process grew by far less than the declared data.
    assert resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before < 200 * 1024
    _one_line_error(info.value, "forged.sofa")
    assert "2**" in str(info.value)


def test_resampling_a_set_beyond_the_value_limit_is_refused():
    hset = HrirSet(
        name="wide",
        samplerate=8000.0,
        ir=np.ones((2048, 2, 256)),
        directions=np.tile([1.0, 0.0, 0.0], (2048, 1)),
    )
    with pytest.raises(HrirError, match=r"at most 33554432 \(2\*\*25\)"):
        hset.resampled(384000.0)


# -- the fuzzing harness -----------------------------------------------------------------

#: Mutants run by the CI test, their seed, and each one's limits.
FUZZ_COUNT = 40
FUZZ_SEED = 20261204
FUZZ_TIMEOUT_S = 8.0
FUZZ_MEMORY_BYTES = 1536 * 2**20


def test_sofa_mutants_are_refused_with_one_line_or_loaded(base, tmp_path):
    outcomes: dict[str, int] = {"loaded": 0, "refused": 0}
    started = time.monotonic()
    for i, (recipe, seed) in enumerate(mut.sample(FUZZ_COUNT, FUZZ_SEED)):
        path = mut.make_mutant(base, recipe, seed, tmp_path / f"m{i}.sofa")
        t0 = time.monotonic()
        try:
            data = read_sofa_guarded(path, timeout_s=FUZZ_TIMEOUT_S, memory_bytes=FUZZ_MEMORY_BYTES)
        except SofaError as exc:
            _one_line_error(exc, path.name)
            outcomes["refused"] += 1
        else:
            outcomes["loaded"] += 1
            # What loads is usable: finite, bounded, and builds a set (or says why not).
            assert np.all(np.isfinite(data.ir)) and np.all(np.isfinite(data.delay))
            assert data.delay.min() >= 0
            try:
                HrirSet.from_sofa(data)
            except HrirError as exc:
                assert "\n" not in str(exc)
        elapsed = time.monotonic() - t0
        assert elapsed < FUZZ_TIMEOUT_S + 5.0, f"{recipe} seed {seed}: {elapsed:.1f} s"
    assert outcomes["refused"] > 0 and outcomes["loaded"] > 0, outcomes
    assert time.monotonic() - started < 120.0


@pytest.mark.parametrize(
    ("recipe", "message"),
    [
        ("delay_huge", r"Data\.Delay reaches 1e\+09 samples"),
        ("rate_huge", r"outside the supported range"),
        ("ir_nan", r"NaN, infinite"),
        ("ir_all_tiny", r"practically silent"),
        ("empty_measurements", r"empty"),
        ("wrong_receivers", r"3 receivers"),
    ],
)
def test_hostile_values_are_refused_with_what_was_wrong(base, tmp_path, recipe, message):
    path = mut.make_mutant(base, recipe, 3, tmp_path / "hostile.sofa")
    with pytest.raises(SofaError, match=message) as info:
        read_sofa(path)
    _one_line_error(info.value, "hostile.sofa")


@pytest.mark.parametrize(
    ("recipe", "warning"),
    [
        ("delay_negative", r"negative \(relative\) delays"),
        ("positions_one_direction", r"cover a single direction"),
        ("positions_beyond_pole", r"beyond \+/-90 degrees.*folded"),
    ],
)
def test_odd_but_readable_sets_load_with_a_warning(base, tmp_path, recipe, warning):
    path = mut.make_mutant(base, recipe, 3, tmp_path / "odd.sofa")
    data = read_sofa(path)
    assert any(__import__("re").search(warning, w) for w in data.warnings), data.warnings
    hset = HrirSet.from_sofa(data)
    assert hset.warnings == data.warnings


def test_one_nearly_silent_measurement_is_warned_about(base, tmp_path):
    path = Path(tmp_path / "faint.sofa")
    path.write_bytes(base.read_bytes())
    mut._set(path, "Data.IR", lambda a: np.concatenate([a[:1] * 1e-9, a[1:]]))
    data = read_sofa(path)
    assert any("1 of 24 measurements have an ear" in w for w in data.warnings)


def test_render_with_a_user_set_of_relative_delays_reports_the_shift(base, tmp_path):
    from earfold.renderer.io import write_audio
    from earfold.renderer.render import RenderSettings, plan_render

    odd = mut.make_mutant(base, "delay_negative", 3, tmp_path / "relative.sofa")
    stem = tmp_path / "stem.wav"
    write_audio(stem, np.random.default_rng(1).standard_normal((4800, 2)) * 0.1, 48000)
    plan = plan_render([stem], RenderSettings(layout="2.0", hrtf=str(odd)))
    assert any("negative (relative) delays" in w for w in plan.warnings), plan.warnings


def test_hrtf_inspect_of_a_user_file_reads_it_guarded_and_shows_the_warnings(
    base, tmp_path, monkeypatch
):
    import earfold.renderer.tools._inspect as inspect_module

    calls = []
    real = inspect_module.read_sofa_guarded

    def spy(path, **kwargs):
        calls.append(path)
        return real(path, **kwargs)

    monkeypatch.setattr(inspect_module, "read_sofa_guarded", spy)
    odd = mut.make_mutant(base, "positions_beyond_pole", 3, tmp_path / "pole.sofa")
    summary = inspect_module.inspect_sofa(odd)
    assert calls == [odd]
    assert any("folded over the pole" in w for w in summary["warnings"])


def test_guard_works_under_a_parent_whose_memory_is_already_limited(base, tmp_path):
    # The child cannot raise a hard limit it inherits; it must keep the lower one, not fail.
    import subprocess
    import sys

    script = (
        "import resource, sys\n"
        "resource.setrlimit(resource.RLIMIT_AS, (3 * 2**30, 3 * 2**30))\n"
        "from earfold.renderer.hrtf import read_sofa_guarded\n"
        "data = read_sofa_guarded(sys.argv[1], memory_bytes=8 * 2**30)\n"
        "print(data.measurements)\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", script, str(base)], capture_output=True, text=True, timeout=60
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "24"
