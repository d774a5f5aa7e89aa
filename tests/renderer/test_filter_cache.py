"""The cache of prepared filters: reuse, keys, distrust of its files, concurrency, bound."""

from __future__ import annotations

import contextlib
import dataclasses
import json
import multiprocessing
import os
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

import earfold.renderer.hrtf.hrir as hrir
import earfold.renderer.render.plan as plan_module
import earfold.renderer.render.prepared as prepared_module
from earfold.renderer.errors import RendererError
from earfold.renderer.layouts import Layout, get_layout
from earfold.renderer.render import FilterCache, RenderSettings, plan_render, render
from earfold.renderer.render import filter_cache as fc


@pytest.fixture
def cache_dir(tmp_path, monkeypatch):
    """A fresh, empty cache folder, and an empty in-memory layer."""
    folder = tmp_path / "cache"
    monkeypatch.setenv(fc.ENV_DIR, str(folder))
    monkeypatch.delenv(fc.ENV_OFF, raising=False)
    fc._PROCESS_MEMORY.clear()
    hrir._load_cached.cache_clear()  # sets loaded earlier hold their lookups already
    yield folder
    fc._PROCESS_MEMORY.clear()


@pytest.fixture
def builds(monkeypatch):
    """Counts of the preparations a plan runs: set loads, equalisations, room builds."""
    counts = {"load": 0, "equalise": 0, "room": 0}

    def counted(name, real):
        def spy(*args, **kwargs):
            counts[name] += 1
            return real(*args, **kwargs)

        return spy

    monkeypatch.setattr(
        prepared_module, "load_hrir_set", counted("load", prepared_module.load_hrir_set)
    )
    monkeypatch.setattr(
        prepared_module, "equalised", counted("equalise", prepared_module.equalised)
    )
    monkeypatch.setattr(
        prepared_module, "build_room_filters", counted("room", prepared_module.build_room_filters)
    )
    return counts


def _stem(path: Path, channels: int = 6, rate: int = 48000, seconds: float = 0.25) -> str:
    rng = np.random.default_rng(7)
    data = 0.05 * rng.standard_normal((int(rate * seconds), channels))
    sf.write(path, data.astype(np.float32), rate, subtype="PCM_24")
    return str(path)


def _files(folder: Path, kind: str) -> list[Path]:
    return sorted(folder.glob(f"{kind}-*.npz"))


# -- reuse and identity ----------------------------------------------------------------


def test_a_second_render_plans_from_the_cache_and_writes_the_same_bytes(
    tmp_path, cache_dir, builds, monkeypatch
):
    stem = _stem(tmp_path / "mix.wav")
    settings = RenderSettings(layout="5.1", room="small", seed=3)
    first = render([stem], str(tmp_path / "a.wav"), settings)
    assert builds == {"load": 1, "equalise": 1, "room": 1}
    assert first["room"]["cache"] == "stored" and first["eq"]["cache"] == "stored"
    assert len(_files(cache_dir, "hrtf")) == 1 and len(_files(cache_dir, "room")) == 1

    fc._PROCESS_MEMORY.clear()  # as a new command would: from the disk
    second = render([stem], str(tmp_path / "b.wav"), settings)
    assert builds == {"load": 1, "equalise": 1, "room": 1}
    assert second["room"]["cache"] == "reused" and second["eq"]["cache"] == "reused"

    third = render([stem], str(tmp_path / "c.wav"), settings)  # from memory
    assert builds == {"load": 1, "equalise": 1, "room": 1}
    assert third["room"]["cache"] == "reused"

    monkeypatch.setenv(fc.ENV_OFF, "1")
    fresh = render([stem], str(tmp_path / "d.wav"), settings)
    assert builds == {"load": 2, "equalise": 2, "room": 2}
    assert fresh["room"]["cache"] == "off" and fresh["eq"]["cache"] == "off"

    expected = (tmp_path / "d.wav").read_bytes()
    for name in ("a.wav", "b.wav", "c.wav"):
        assert (tmp_path / name).read_bytes() == expected, name
    # What the report says of the room and the EQ is the same, wherever the filters came
    # from (but for how long the room's first build took)
    for key in ("room", "eq"):
        a = {k: v for k, v in second[key].items() if k not in ("cache", "build_seconds")}
        b = {k: v for k, v in fresh[key].items() if k not in ("cache", "build_seconds")}
        assert json.loads(json.dumps(a)) == json.loads(json.dumps(b))
    assert second["warnings"] == fresh["warnings"] and second["notes"] == fresh["notes"]


def test_a_spread_channel_and_a_plain_set_are_reused_exactly(tmp_path, cache_dir, builds):
    # LCRS's S is spread over two directions (a virtual layout inside the room build); no EQ.
    stem = _stem(tmp_path / "lcrs.wav", channels=4)
    settings = RenderSettings(layout="LCRS", room="small", eq="none")
    plan_a = plan_render([stem], settings)
    fc._PROCESS_MEMORY.clear()
    plan_b = plan_render([stem], settings)
    assert builds == {"load": 1, "equalise": 0, "room": 1}
    np.testing.assert_array_equal(plan_a.filters, plan_b.filters)
    assert plan_a.tail is not None and plan_b.tail is not None
    np.testing.assert_array_equal(plan_a.tail, plan_b.tail)
    np.testing.assert_array_equal(plan_a.tail_weights, plan_b.tail_weights)
    assert plan_a.hrir_set is not None and plan_b.hrir_set is not None
    np.testing.assert_array_equal(plan_a.hrir_set.directions, plan_b.hrir_set.directions)


# -- keys ------------------------------------------------------------------------------


def test_every_part_of_the_key_misses_when_changed(tmp_path, cache_dir, builds):
    stem = _stem(tmp_path / "mix.wav")
    stem_44k = _stem(tmp_path / "mix44.wav", rate=44100)
    base = RenderSettings(layout="5.1", room="small", seed=0)
    plan_render([stem], base)
    assert builds == {"load": 1, "equalise": 1, "room": 1}
    plan_render([stem], base)
    assert builds == {"load": 1, "equalise": 1, "room": 1}

    plan_render([stem], dataclasses.replace(base, seed=1))  # seed: the room only
    assert builds == {"load": 1, "equalise": 1, "room": 2}
    plan_render([stem], dataclasses.replace(base, room="medium"))  # room
    assert builds == {"load": 1, "equalise": 1, "room": 3}
    five = get_layout("5.1")
    moved = Layout(
        "5.1",
        (dataclasses.replace(five.speakers[0], azimuth=31.0), *five.speakers[1:]),
        five.description,
        five.source,
    )
    plan_render([stem], dataclasses.replace(base, layout=moved))  # layout positions
    assert builds == {"load": 1, "equalise": 1, "room": 4}
    plan_render([stem], dataclasses.replace(base, eq="none"))  # EQ: the set, then the room
    assert builds == {"load": 2, "equalise": 1, "room": 5}
    plan_render([stem_44k], base)  # rate
    assert builds == {"load": 3, "equalise": 2, "room": 6}
    # every one of them is now held
    for settings, path in [
        (dataclasses.replace(base, seed=1), stem),
        (dataclasses.replace(base, eq="none"), stem),
        (base, stem_44k),
    ]:
        plan_render([path], settings)
    assert builds == {"load": 3, "equalise": 2, "room": 6}


def test_the_set_is_keyed_by_its_content_not_its_path(tmp_path, cache_dir, builds):
    from earfold.hrtf_sets import get_shipped

    shipped = get_shipped("mit-kemar").path
    copy = tmp_path / "elsewhere" / Path(shipped).name
    copy.parent.mkdir()
    copy.write_bytes(Path(shipped).read_bytes())
    stem = _stem(tmp_path / "mix.wav")
    plan_render([stem], RenderSettings(layout="5.1", hrtf=str(shipped)))
    plan = plan_render([stem], RenderSettings(layout="5.1", hrtf=str(copy)))
    assert builds["load"] == 1
    assert plan.hrir_set is not None and plan.hrir_set.source == str(copy)
    copy.write_bytes(copy.read_bytes() + b"\0")  # other content: another key
    with contextlib.suppress(RendererError):  # the reader may or may not accept the byte
        plan_render([stem], RenderSettings(layout="5.1", hrtf=str(copy)))
    assert builds["load"] == 2


def test_a_changed_preparation_version_misses(tmp_path, cache_dir, builds, monkeypatch):
    stem = _stem(tmp_path / "mix.wav")
    settings = RenderSettings(layout="5.1", room="small")
    plan_render([stem], settings)
    fc._PROCESS_MEMORY.clear()
    monkeypatch.setattr(fc, "PREPARATION_VERSION", fc.PREPARATION_VERSION + 1)
    plan_render([stem], settings)
    assert builds == {"load": 2, "equalise": 2, "room": 2}


# -- files that are not trusted --------------------------------------------------------


def _damage_and_replan(tmp_path, cache_dir, builds, damage):
    stem = _stem(tmp_path / "mix.wav")
    settings = RenderSettings(layout="5.1", room="small")
    good = plan_render([stem], settings)
    (room_file,) = _files(cache_dir, "room")
    damage(room_file)
    for bank in _files(cache_dir, "bank"):  # the bank built on the room: taken back first
        bank.unlink()
    fc._PROCESS_MEMORY.clear()
    again = plan_render([stem], settings)
    assert builds["room"] == 2  # ignored and rebuilt
    assert again.room is not None and again.room["cache"] == "stored"
    np.testing.assert_array_equal(good.filters, again.filters)
    # the rebuilt entry replaced the bad file and is used from now on
    fc._PROCESS_MEMORY.clear()
    third = plan_render([stem], settings)
    assert builds["room"] == 2 and third.room is not None and third.room["cache"] == "reused"


@pytest.fixture
def banks(monkeypatch):
    """Counts of the filter banks a plan computes (feeds, room share, calibration)."""
    counts = {"built": 0}
    real = plan_module.speaker_feeds

    def spy(*args, **kwargs):
        counts["built"] += 1
        return real(*args, **kwargs)

    monkeypatch.setattr(plan_module, "speaker_feeds", spy)
    return counts


def test_a_stored_bank_makes_the_same_plan_and_misses_when_any_part_changes(
    tmp_path, cache_dir, builds, banks
):
    stem = _stem(tmp_path / "mix.wav")
    base = RenderSettings(layout="5.1", room="small", seed=2)
    fresh = plan_render([stem], base)
    fc._PROCESS_MEMORY.clear()  # from the disk, as a new command
    again = plan_render([stem], base)
    assert banks["built"] == 1 and builds == {"load": 1, "equalise": 1, "room": 1}
    np.testing.assert_array_equal(fresh.filters, again.filters)
    assert fresh.tail is not None and again.tail is not None
    np.testing.assert_array_equal(fresh.tail, again.tail)
    np.testing.assert_array_equal(fresh.tail_weights, again.tail_weights)
    assert fresh.tail_offset == again.tail_offset and fresh.length == again.length
    assert fresh.room_decay is not None and fresh.room_decay == again.room_decay
    assert fresh.speakers == again.speakers and fresh.calibration == again.calibration
    assert fresh.warnings == again.warnings and fresh.notes == again.notes
    assert again.room is not None and again.room["cache"] == "reused"
    assert fresh.room is not None
    assert {k: v for k, v in fresh.room.items() if k != "cache"} == {
        k: v for k, v in again.room.items() if k != "cache"
    }
    # LFE, channel order, solo and room mode change the bank only: set and room are reused
    for changed in (
        dataclasses.replace(base, lfe=dataclasses.replace(base.lfe, gain_db=0.0)),
        dataclasses.replace(base, channel_order="film"),
        dataclasses.replace(base, solo="C"),
        dataclasses.replace(base, room_mode="exact"),
    ):
        plan_render([stem], changed)
    assert banks["built"] == 5 and builds == {"load": 1, "equalise": 1, "room": 1}
    no_room = plan_render([stem], dataclasses.replace(base, room=None))
    assert banks["built"] == 6 and no_room.tail is None
    plan_render([stem], dataclasses.replace(base, room=None, seed=9))  # no room: seed unused
    assert banks["built"] == 6


def test_a_damaged_bank_is_ignored_and_rebuilt_from_the_set_and_room(
    tmp_path, cache_dir, builds, banks
):
    stem = _stem(tmp_path / "mix.wav")
    settings = RenderSettings(layout="5.1", room="small")
    good = plan_render([stem], settings)
    (bank,) = _files(cache_dir, "bank")
    with np.load(bank, allow_pickle=False) as z:
        members = {k: z[k] for k in z.files}
    members["filters"] = members["filters"][:, :, :10]  # shapes still fine: a short bank
    members["tail_weights"] = members["tail_weights"][:3]  # this one is not
    with open(bank, "wb") as fh:
        np.savez(fh, **members)
    fc._PROCESS_MEMORY.clear()
    again = plan_render([stem], settings)
    assert banks["built"] == 2 and builds == {"load": 1, "equalise": 1, "room": 1}
    np.testing.assert_array_equal(good.filters, again.filters)


def test_a_corrupt_file_is_ignored_and_rebuilt(tmp_path, cache_dir, builds):
    def garble(path):
        data = bytearray(path.read_bytes())
        data[100:4000] = os.urandom(3900)
        path.write_bytes(bytes(data))

    _damage_and_replan(tmp_path, cache_dir, builds, garble)


def test_a_truncated_file_is_ignored_and_rebuilt(tmp_path, cache_dir, builds):
    def truncate(path):
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 2])

    _damage_and_replan(tmp_path, cache_dir, builds, truncate)


def test_a_file_of_the_right_name_but_wrong_shapes_is_ignored_and_rebuilt(
    tmp_path, cache_dir, builds
):
    def reshape(path):
        with np.load(path, allow_pickle=False) as z:
            members = {k: z[k] for k in z.files}
        members["early"] = members["early"][:3]  # a 3-channel layout's filters
        with open(path, "wb") as fh:
            np.savez(fh, **members)

    _damage_and_replan(tmp_path, cache_dir, builds, reshape)


def test_a_foreign_file_under_the_right_name_is_ignored(tmp_path, cache_dir, builds):
    def replace_with_another_entry(path):
        with np.load(path, allow_pickle=False) as z:
            members = {k: z[k] for k in z.files}
        members["__key__"] = np.array(str(members["__key__"]).replace('"seed":0', '"seed":9'))
        with open(path, "wb") as fh:
            np.savez(fh, **members)

    _damage_and_replan(tmp_path, cache_dir, builds, replace_with_another_entry)


def test_a_file_needing_pickle_or_holding_non_finite_values_is_refused(tmp_path):
    cache = FilterCache(tmp_path, memory=False)
    key = {"x": 1}

    def check(arrays, meta):
        return set(arrays) == {"a"} and arrays["a"].shape == (4,)

    cache.put("test", key, {"a": np.arange(4.0)}, {"n": 4})
    (path,) = tmp_path.glob("test-*.npz")
    assert cache.get("test", key, check) is not None
    with np.load(path, allow_pickle=False) as z:
        members = {k: z[k] for k in z.files}
    with open(path, "wb") as fh:
        np.savez(fh, **{**members, "a": np.array([object(), 1, 2, 3], dtype=object)})
    assert cache.get("test", key, check) is None
    with open(path, "wb") as fh:
        np.savez(fh, **{**members, "a": np.array([0.0, np.nan, 1.0, 2.0])})
    assert cache.get("test", key, check) is None
    path.write_bytes(b"")
    assert cache.get("test", key, check) is None
    assert cache.stats.rejected == 3 and cache.stats.disk_hits == 1


def test_an_unwritable_folder_leaves_renders_working(tmp_path, monkeypatch, builds):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    monkeypatch.setenv(fc.ENV_DIR, str(blocker / "cache"))
    fc._PROCESS_MEMORY.clear()
    stem = _stem(tmp_path / "mix.wav")
    plan = plan_render([stem], RenderSettings(layout="5.1", room="small"))
    assert plan.room is not None and plan.room["cache"] == "stored"  # in memory only
    plan_render([stem], RenderSettings(layout="5.1", room="small"))
    assert builds["room"] == 1
    fc._PROCESS_MEMORY.clear()


# -- concurrency and the bound ---------------------------------------------------------


def _writer(folder: str, rounds: int) -> None:
    cache = FilterCache(folder, memory=False)
    payload = {"a": np.arange(200_000, dtype=np.float64), "b": np.ones((2, 3000))}
    for _ in range(rounds):
        cache.put("race", {"same": True}, payload, {"rounds": rounds})


def _race_check(arrays, meta):
    return arrays["a"].shape == (200_000,) and arrays["b"].shape == (2, 3000)


def test_two_processes_writing_one_entry_leave_a_valid_entry(tmp_path):
    ctx = multiprocessing.get_context("fork")
    procs = [ctx.Process(target=_writer, args=(str(tmp_path), 15)) for _ in range(2)]
    for p in procs:
        p.start()
    reader = FilterCache(tmp_path, memory=False)
    while any(p.is_alive() for p in procs):
        found = reader.get("race", {"same": True}, _race_check)
        if found is not None:  # never a torn file: whole or absent
            np.testing.assert_array_equal(found[0]["a"], np.arange(200_000))
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    assert reader.stats.rejected == 0
    found = reader.get("race", {"same": True}, _race_check)
    assert found is not None and found[1] == {"rounds": 15}
    assert len(list(tmp_path.glob("race-*.npz"))) == 1
    assert not list(tmp_path.glob(".partial-*"))


def test_the_size_bound_evicts_the_least_recently_used(tmp_path):
    one = {"a": np.zeros(100_000)}  # 800 kB each
    cache = FilterCache(tmp_path, limit_bytes=2_500_000, memory=False)

    def check(arrays, meta):
        return arrays["a"].shape == (100_000,)

    def path_of(n):
        (found,) = [p for p in tmp_path.glob("e-*.npz") if _key_of(p) == n]
        return found

    now = time.time()
    cache.put("e", {"n": 1}, one, {})
    os.utime(path_of(1), (now - 30, now - 30))
    cache.put("e", {"n": 2}, one, {})
    os.utime(path_of(2), (now - 20, now - 20))
    cache.put("e", {"n": 3}, one, {})
    os.utime(path_of(3), (now - 10, now - 10))
    assert cache.get("e", {"n": 1}, check) is not None  # 1 used again: now the newest
    cache.put("e", {"n": 4}, one, {})
    held = sorted(_key_of(p) for p in tmp_path.glob("e-*.npz"))
    assert held == [1, 3, 4]  # 2, least recently used, went
    assert cache.info()["bytes"] <= 2_500_000
    assert cache.get("e", {"n": 2}, check) is None


def _key_of(path: Path) -> int:
    with np.load(path, allow_pickle=False) as z:
        return int(json.loads(str(z["__key__"]))["key"]["n"])


def test_an_entry_larger_than_the_bound_is_not_kept_on_disk(tmp_path):
    cache = FilterCache(tmp_path, limit_bytes=1000, memory=False)
    cache.put("big", {"n": 1}, {"a": np.zeros(1000)}, {})
    assert cache.info()["entries"] == 0


# -- the command line ------------------------------------------------------------------


def test_cache_info_clear_and_render_no_cache(tmp_path, cache_dir, capsys):
    from earfold.service.cli import main

    stem = _stem(tmp_path / "mix.wav")
    args = [stem, "--layout", "5.1", "--room", "small", "-q", "--report", "none"]
    assert main(["render", *args, "-o", str(tmp_path / "a.wav"), "--no-cache"]) == 0
    assert not cache_dir.exists() or not list(cache_dir.iterdir())
    assert os.environ.get(fc.ENV_OFF) is None  # the switch was for that render only
    assert main(["render", *args, "-o", str(tmp_path / "b.wav")]) == 0
    assert (tmp_path / "a.wav").read_bytes() == (tmp_path / "b.wav").read_bytes()
    capsys.readouterr()
    assert main(["cache", "info", "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    # the set, the room, the set's prepared lookups and the calibrated bank
    assert info["directory"] == str(cache_dir) and info["entries"] == 4 and info["bytes"] > 0
    (cache_dir / "someone-elses.txt").write_text("kept")
    assert main(["cache", "clear"]) == 0
    assert "removed 4 entries" in capsys.readouterr().out
    assert [p.name for p in cache_dir.iterdir()] == ["someone-elses.txt"]
    assert main(["cache", "info"]) == 0
    assert "entries  0" in capsys.readouterr().out
    assert main(["cache"]) != 0  # no action: the command's help


def test_a_header_claiming_more_than_the_file_holds_is_refused_unread(tmp_path):
    import io
    import zipfile

    cache = FilterCache(tmp_path, memory=False)
    key = {"x": 1}
    cache.put("test", key, {"a": np.arange(4.0)}, {})
    (path,) = tmp_path.glob("test-*.npz")
    with zipfile.ZipFile(path) as archive:
        kept = {i.filename: archive.read(i) for i in archive.infolist() if i.filename != "a.npy"}
    buf = io.BytesIO()
    header = {"descr": "<f8", "fortran_order": False, "shape": (10**12,)}
    np.lib.format.write_array_header_1_0(buf, header)
    buf.write(np.arange(4.0).tobytes())
    with zipfile.ZipFile(path, "w") as archive:
        for name, data in kept.items():
            archive.writestr(name, data)
        archive.writestr("a.npy", buf.getvalue())
    assert cache.get("test", key, lambda arrays, meta: True) is None
    assert cache.stats.rejected == 1


def test_only_regular_files_are_hashed(tmp_path):
    assert prepared_module._content_hash(os.devnull) is None
    assert prepared_module._content_hash(str(tmp_path)) is None
    assert prepared_module._content_hash(str(tmp_path / "missing.sofa")) is None
    (tmp_path / "empty.sofa").write_bytes(b"")
    assert prepared_module._content_hash(str(tmp_path / "empty.sofa")) is None
    (tmp_path / "x.sofa").write_bytes(b"abc")
    assert prepared_module._content_hash(str(tmp_path / "x.sofa")) == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )


def test_the_lookups_prepared_for_interpolation_are_reused_exactly(
    tmp_path, cache_dir, builds, monkeypatch
):
    searches = []
    real = hrir.onset_times
    monkeypatch.setattr(hrir, "onset_times", lambda *a, **k: searches.append(1) or real(*a, **k))
    stem = _stem(tmp_path / "mix714.wav", channels=12)
    settings = RenderSettings(layout="7.1.4")  # heights at 45 degrees: interpolated
    first = plan_render([stem], settings)
    assert len(searches) == 1 and len(_files(cache_dir, "lookup")) == 1
    fc._PROCESS_MEMORY.clear()
    second = plan_render([stem], settings)
    assert len(searches) == 1 and builds["load"] == 1
    monkeypatch.setenv(fc.ENV_OFF, "1")
    fresh = plan_render([stem], settings)
    np.testing.assert_array_equal(first.filters, fresh.filters)
    np.testing.assert_array_equal(second.filters, fresh.filters)


def test_lookups_that_do_not_fit_the_set_are_not_taken(tmp_path, cache_dir):
    stem = _stem(tmp_path / "mix714.wav", channels=12)
    plan = plan_render([stem], RenderSettings(layout="7.1.4", eq="none"))
    assert plan.hrir_set is not None
    state = plan.hrir_set.lookup_state()
    assert set(state) == {"onsets", "aligned", "aligned_ref"}
    fresh = plan.hrir_set.derived()
    assert not fresh.with_lookup_state({**state, "onsets": state["onsets"][:-1]})
    assert not fresh.with_lookup_state({**state, "aligned": state["aligned"][..., :10]})
    assert not fresh.with_lookup_state({"onsets": state["onsets"], "aligned": state["aligned"]})
    assert fresh.lookup_state() == {}
    assert fresh.with_lookup_state(state)
    assert fresh.lookup_state().keys() == state.keys()


def test_partial_files_left_by_a_dead_writer_are_removed_later(tmp_path):
    stale, recent = tmp_path / ".partial-dead.npz", tmp_path / ".partial-busy.npz"
    for path in (stale, recent):
        path.write_bytes(b"half an entry")
    hour_ago = time.time() - 2 * 3600
    os.utime(stale, (hour_ago, hour_ago))
    cache = FilterCache(tmp_path, memory=False)
    assert cache.info()["entries"] == 0  # partial files are no entries
    cache.put("e", {"n": 1}, {"a": np.zeros(3)}, {})
    assert not stale.exists() and recent.exists()  # another writer may still be busy
    cache.clear()
    assert list(tmp_path.iterdir()) == []
