"""An ADM render's prepared parts in the filter cache: the moving engine's pair grid
(``moving-grid``) and the bed's feeds (``feeds``). A second render loads them, computes no
pair and designs no filter, and writes the same bytes as a render without the cache."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf
from adm_factory import (
    BED_51,
    audio_object,
    channel,
    chna_body,
    content,
    document,
    object_block,
    pack,
    programme,
    seconds,
    stream_and_track,
    write_master,
)

import earfold.renderer.hrtf.hrir as hrir
import earfold.renderer.render.feeds as feeds_module
from earfold.renderer.engine import PairTable
from earfold.renderer.eq import equalised
from earfold.renderer.geometry import direction_to_vector
from earfold.renderer.hrtf import HrirSet
from earfold.renderer.render import RenderSettings, render
from earfold.renderer.render import filter_cache as fc
from earfold.renderer.render.moving_sources import (
    moving_response_length,
    moving_source_engine,
)

FS = 48000
FLAT = {"loudness": None, "true_peak": None, "subtype": "FLOAT"}
BED = BED_51


@pytest.fixture
def cache_dir(tmp_path, monkeypatch):
    """A fresh, empty cache folder, and an empty in-memory layer."""
    folder = tmp_path / "cache"
    monkeypatch.setenv(fc.ENV_DIR, str(folder))
    monkeypatch.delenv(fc.ENV_OFF, raising=False)
    fc._PROCESS_MEMORY.clear()
    hrir._load_cached.cache_clear()
    yield folder
    fc._PROCESS_MEMORY.clear()


def _master(path):
    """A 5.1 bed (tracks 1-6) and one object moving from the left to the right over 1 s
    (track 7), all noise."""
    blocks = [
        object_block("AC_00031001", 1, rtime=seconds(0), duration=seconds(0.1), az=80.0),
        object_block("AC_00031001", 2, rtime=seconds(0.1), duration=seconds(1.0), az=-80.0),
    ]
    parts = [
        programme("APR_1001", "Main", ["ACO_1001"]),
        content("ACO_1001", "All", ["AO_1001", "AO_1002"]),
        audio_object("AO_1001", "Bed", packs=["AP_00010003"], uids=[e[1] for e in BED]),
        audio_object("AO_1002", "Voice", packs=["AP_00031001"], uids=["ATU_00000007"]),
        pack("AP_00031001", "Objects", ["AC_00031001"]),
        channel("AC_00031001", "Objects", blocks),
        stream_and_track("AC_00031001", "AP_00031001"),
    ]
    entries = [*BED, (7, "ATU_00000007", "AT_00031001_01", "AP_00031001")]
    audio = (0.1 * np.random.default_rng(5).standard_normal((int(1.2 * FS), 7))).astype(np.float32)
    return str(write_master(path, audio=audio, chna=chna_body(entries), axml=document(*parts)))


def _samples(path):
    return sf.read(path, dtype="float32")[0]


def _entries(folder, kind):
    return sorted(folder.glob(f"{kind}-*.npz"))


def test_a_second_adm_render_loads_the_grid_and_feeds_and_writes_the_same_bytes(
    tmp_path, cache_dir, monkeypatch
):
    master = _master(tmp_path / "m.wav")
    first = render([master], tmp_path / "a.wav", RenderSettings(**FLAT))
    assert first["eq"]["moving_pairs_cache"] == "stored"
    assert len(_entries(cache_dir, "moving-grid")) == 1 and len(_entries(cache_dir, "feeds")) == 1

    # As a new command would: from the disk. No grid pair is computed (the object's only
    # lookups are the exact pairs of where it rests, 80 degrees left before it moves and
    # 80 right after) and the LFE filter is not designed.
    fc._PROCESS_MEMORY.clear()
    looked_up = []
    real_pairs = HrirSet.pairs

    def spy(self, directions):
        looked_up.append(np.array(directions))
        return real_pairs(self, directions)

    def no_design(*args, **kwargs):
        raise AssertionError("the LFE filter was designed")

    with monkeypatch.context() as m:
        m.setattr(HrirSet, "pairs", spy)
        m.setattr(feeds_module, "lfe_filter", no_design)
        second = render([master], tmp_path / "b.wav", RenderSettings(**FLAT))
    resting = direction_to_vector(np.array([80.0, -80.0]), np.zeros(2))
    asked = np.concatenate(looked_up)
    assert len(asked) <= 2
    assert np.all(np.min(np.linalg.norm(asked[:, None] - resting[None], axis=2), axis=1) < 1e-9)
    assert second["eq"]["moving_pairs_cache"] == "reused"

    monkeypatch.setenv(fc.ENV_OFF, "1")
    hrir._load_cached.cache_clear()
    fresh = render([master], tmp_path / "c.wav", RenderSettings(**FLAT))
    assert fresh["eq"]["moving_pairs_cache"] == "uncached"
    # Float output, compared sample for sample (a float WAV's header holds a time stamp).
    expected = _samples(tmp_path / "c.wav")
    np.testing.assert_array_equal(_samples(tmp_path / "a.wav"), expected)
    np.testing.assert_array_equal(_samples(tmp_path / "b.wav"), expected)
    for key in ("speakers", "adm", "warnings", "notes", "engine"):
        assert json.dumps(second.get(key), sort_keys=True) == json.dumps(
            fresh.get(key), sort_keys=True
        ), key


@pytest.mark.parametrize("kind", ["moving-grid", "feeds"])
def test_a_damaged_entry_is_ignored_and_rebuilt(tmp_path, cache_dir, kind):
    master = _master(tmp_path / "m.wav")
    render([master], tmp_path / "a.wav", RenderSettings(**FLAT))
    (entry,) = _entries(cache_dir, kind)
    with np.load(entry, allow_pickle=False) as z:
        members = {k: z[k] for k in z.files}
    name = "pairs" if kind == "moving-grid" else "filters"
    members[name] = members[name][:-1]  # a readable file whose shapes do not fit
    with open(entry, "wb") as fh:
        np.savez(fh, **members)
    fc._PROCESS_MEMORY.clear()
    again = render([master], tmp_path / "b.wav", RenderSettings(**FLAT))
    np.testing.assert_array_equal(_samples(tmp_path / "a.wav"), _samples(tmp_path / "b.wav"))
    if kind == "moving-grid":
        assert again["eq"]["moving_pairs_cache"] == "stored"
    garbled = bytearray(entry.read_bytes())
    garbled[200:3000] = bytes(2800)
    entry.write_bytes(bytes(garbled))
    fc._PROCESS_MEMORY.clear()
    render([master], tmp_path / "c.wav", RenderSettings(**FLAT))
    np.testing.assert_array_equal(_samples(tmp_path / "a.wav"), _samples(tmp_path / "c.wav"))


def test_cache_info_lists_the_grid_and_clear_removes_it(tmp_path, cache_dir, capsys):
    from earfold.service.cli import main

    master = _master(tmp_path / "m.wav")
    assert main(["render", master, "-o", str(tmp_path / "a.wav"), "-q", "--report", "none"]) == 0
    capsys.readouterr()
    assert main(["cache", "info", "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    kinds = info["kinds"]
    # the set, its prepared lookups, the bed's feeds and the grid
    assert set(kinds) == {"hrtf", "lookup", "feeds", "moving-grid"}
    assert sum(k["entries"] for k in kinds.values()) == info["entries"] == 4
    assert sum(k["bytes"] for k in kinds.values()) == info["bytes"]
    assert kinds["moving-grid"]["bytes"] > 10 * kinds["feeds"]["bytes"]
    assert main(["cache", "info"]) == 0
    assert "moving-grid" in capsys.readouterr().out
    assert main(["cache", "clear"]) == 0
    assert "removed 4 entries" in capsys.readouterr().out
    assert not _entries(cache_dir, "moving-grid")


def test_the_moving_response_length_is_the_engines(tmp_path):
    from earfold.hrtf_sets import get_shipped
    from earfold.renderer.engine import SourcePath
    from earfold.renderer.hrtf import load_hrir_set

    raw = load_hrir_set(get_shipped("mit-kemar").path, FS)
    for hset in (raw, equalised(raw)[0]):
        engine = moving_source_engine(hset, [SourcePath.fixed([1.0, 0.0, 0.0])])
        x = np.zeros((100, 1), np.float32)
        x[0] = 1.0
        out = np.concatenate([engine.process(x), *engine.flush()])
        # The whole response of a unit impulse: input length plus the response less one.
        assert len(out) == 100 + moving_response_length(hset) - 1
        assert isinstance(engine.table, PairTable)
